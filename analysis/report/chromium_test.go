package report

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"
)

// chromium finds the browser, skipping (or failing under CI=true) when absent.
func chromium(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") == "true" {
		t.Fatal("chromium not found; CI must install the Debian package chromium")
	}
	t.Skip("chromium not found (Debian package chromium); skipping the browser check")
	return ""
}

// runChromium runs headless Chromium on page with extra arguments and
// returns its stdout and stderr.
func runChromium(t *testing.T, bin, dir, page string, extra ...string) (string, string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	args := append([]string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir=" + filepath.Join(dir, "profile"), "--enable-logging=stderr", "--v=0"}, extra...)
	args = append(args, "file://"+page)
	cmd := exec.CommandContext(ctx, bin, args...)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", extra, err, errb.String())
	}
	return out.String(), errb.String()
}

// consoleError matches what Chromium logs for a script or console error.
var consoleError = regexp.MustCompile(`(?i)uncaught|CONSOLE.*error|:CONSOLE\(`)

func TestHTMLInChromium(t *testing.T) {
	bin := chromium(t)
	info, res := scenario(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "report.html")
	if err := os.WriteFile(page, []byte(renderHTML(t, info, res)), 0o644); err != nil {
		t.Fatal(err)
	}

	dom, stderr := runChromium(t, bin, dir, page, "--dump-dom")
	if got := strings.Count(dom, "<svg"); got != 4 {
		t.Errorf("Chromium's DOM holds %d <svg elements, want 4", got)
	}
	if !strings.Contains(dom, "CONDITIONAL PASS") {
		t.Error("Chromium's DOM lacks the verdict")
	}
	if m := consoleError.FindString(stderr); m != "" {
		t.Errorf("Chromium logged a console error (%q):\n%s", m, stderr)
	}

	png := filepath.Join(dir, "report.png")
	_, stderr = runChromium(t, bin, dir, page, "--screenshot="+png, "--window-size=1240,1754", "--hide-scrollbars")
	if m := consoleError.FindString(stderr); m != "" {
		t.Errorf("Chromium logged a console error (%q):\n%s", m, stderr)
	}
	b, err := os.ReadFile(png)
	if err != nil {
		t.Fatalf("no screenshot: %v\n%s", err, stderr)
	}
	if len(b) < 10_000 || !bytes.HasPrefix(b, []byte("\x89PNG\r\n\x1a\n")) {
		t.Errorf("screenshot %s is %d bytes or not a PNG", png, len(b))
	}
	if dst := os.Getenv("PLATEAU_KEEP_SCREENSHOT"); dst != "" {
		_ = os.WriteFile(dst, b, 0o644) // for a person to look at; not part of the check
	}
}

// pdftotext finds poppler's text extractor, skipping (or failing under
// CI=true) when absent.
func pdftotext(t *testing.T) string {
	t.Helper()
	if p, err := exec.LookPath("pdftotext"); err == nil {
		return p
	}
	if os.Getenv("CI") == "true" {
		t.Fatal("pdftotext not found; CI must install the Debian package poppler-utils")
	}
	t.Skip("pdftotext not found (Debian package poppler-utils); skipping the print check")
	return ""
}

// The report of several devices printed by Chromium: the summary on the
// first page, each device's section starting on a page of its own, and
// every page carrying the report's identity and "page n of m"; the pages
// of a device name it too.
func TestSeveralDevicesPrintInChromium(t *testing.T) {
	bin, text := chromium(t), pdftotext(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "report.html")
	var b bytes.Buffer
	if err := HTMLDevices(&b, severalDevices(t)); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(page, b.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	pages := printPages(t, bin, text, dir, page)
	if len(pages) < 4 {
		t.Fatalf("%d printed pages, want the summary and at least one per device", len(pages))
	}
	const identity = "Calibration report — as found & adjusted — 3 devices · run-0042"
	firstLine := func(p string) string {
		for _, l := range strings.Split(p, "\n") {
			if s := strings.TrimSpace(l); s != "" {
				return s
			}
		}
		return ""
	}
	starts := map[string]int{} // device heading → page it opens
	for i, p := range pages {
		if !strings.Contains(p, identity) || !strings.Contains(p, fmt.Sprintf("page %d of %d", i+1, len(pages))) {
			t.Errorf("printed page %d lacks the report's identity or its number:\n%s", i+1, p)
		}
		if h := firstLine(p); strings.HasPrefix(h, "Device ") {
			starts[h[:len("Device 1 of 3")]] = i + 1
		}
	}
	if !strings.HasPrefix(firstLine(pages[0]), "Pressure calibration by comparison") || !strings.Contains(pages[0], "Devices under test") {
		t.Errorf("the first page is not the summary:\n%s", pages[0])
	}
	for k := 1; k <= 3; k++ {
		h := fmt.Sprintf("Device %d of 3", k)
		at, ok := starts[h]
		if !ok {
			t.Errorf("%s does not start a printed page", h)
			continue
		}
		for _, p := range pages[at-1:] {
			if strings.Contains(p, "· "+h+":") { // its pages' footer names it
				continue
			}
			if strings.HasPrefix(firstLine(p), "Device ") {
				break
			}
			t.Errorf("a page of %s does not name it in its footer:\n%s", h, p)
		}
	}
}

// printPages prints page with Chromium and returns the text of each page.
func printPages(t *testing.T, bin, text, dir, page string) []string {
	t.Helper()
	pdf := filepath.Join(dir, "report.pdf")
	_, stderr := runChromium(t, bin, dir, page, "--no-pdf-header-footer", "--print-to-pdf="+pdf)
	if m := consoleError.FindString(stderr); m != "" {
		t.Errorf("Chromium logged a console error (%q):\n%s", m, stderr)
	}
	out, err := exec.Command(text, "-layout", pdf, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext: %v", err)
	}
	return strings.Split(strings.TrimRight(string(out), "\f\n "), "\f")
}

// The report of one device printed by Chromium: every page carries the
// report's identity (with the certificate number) and "page n of m", and
// the table of every reading is printed.
func TestOneDevicePrintInChromium(t *testing.T) {
	bin, text := chromium(t), pdftotext(t)
	info, res := scenario(t)
	info.Certificate = Certificate{Number: "C-2026-0311", Customer: "Example Works"}
	dir := t.TempDir()
	page := filepath.Join(dir, "report.html")
	if err := os.WriteFile(page, []byte(renderHTML(t, info, res)), 0o644); err != nil {
		t.Fatal(err)
	}
	pages := printPages(t, bin, text, dir, page)
	if len(pages) < 3 {
		t.Fatalf("%d printed pages, want the results, the charts and the budgets on pages of their own", len(pages))
	}
	const identity = "Calibration report — PG-0417 — as found & adjusted · run-0042 · certificate C-2026-0311"
	all := strings.Join(pages, "\n")
	for i, p := range pages {
		if !strings.Contains(p, identity) || !strings.Contains(p, fmt.Sprintf("page %d of %d", i+1, len(pages))) {
			t.Errorf("printed page %d lacks the report's identity or its number:\n%s", i+1, p)
		}
	}
	for _, want := range []string{"Every reading", "Certificate number", "C-2026-0311", "Example Works"} {
		if !strings.Contains(all, want) {
			t.Errorf("the printed report lacks %q", want)
		}
	}
}
