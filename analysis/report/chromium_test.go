package report

import (
	"bytes"
	"context"
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
