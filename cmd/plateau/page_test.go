package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/analysis"
)

const pageToken = "page-test-token-0123456789abcdef"

// browser finds Debian's Chromium, skipping (or failing under CI=true)
// when it is not installed.
func browser(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") == "true" {
		t.Fatal("chromium not found; CI must install the Debian package chromium")
	}
	t.Skip("chromium not found (Debian package chromium); skipping the live page's browser test")
	return ""
}

// freePort asks the kernel for a loopback port nobody uses right now.
func freePort(t *testing.T) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// pageConsole collects what the page reports as errors.
type pageConsole struct {
	mu     sync.Mutex
	errors []string
}

func (c *pageConsole) add(s string) {
	c.mu.Lock()
	c.errors = append(c.errors, s)
	c.mu.Unlock()
}

func (c *pageConsole) all() []string {
	c.mu.Lock()
	defer c.mu.Unlock()
	return slices.Clone(c.errors)
}

// follow collects the tab's error messages (console.error, uncaught
// exceptions, browser log errors) until the tab closes.
func (c *pageConsole) follow(tab context.Context) {
	msgs := chromedp.Console(tab)
	go func() {
		for m, err := range msgs {
			if err != nil {
				return
			}
			if m.Type == chromedp.ConsoleError || m.IsException() {
				c.add(m.String() + " " + m.URL)
			}
		}
	}()
}

// headlessTab is a tab of a headless Chromium with its profile in dir,
// closed when the test ends.
func headlessTab(t *testing.T, ctx context.Context, chrome, dir string) context.Context {
	t.Helper()
	alloc, cancelAlloc := chromedp.NewExecAllocator(ctx,
		chromedp.ExecPath(chrome), chromedp.UserDataDir(filepath.Join(dir, "profile")),
		chromedp.NoSandbox, chromedp.Headless, chromedp.DisableGPU, chromedp.NoFirstRun, chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-background-networking", true), chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true), chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.WindowSize(1400, 2200))
	tab, cancelTab := chromedp.NewContext(alloc)
	t.Cleanup(func() { cancelTab(); cancelAlloc() })
	return tab
}

// inPage runs a JavaScript expression in the tab and returns its value.
func inPage[T any](t *testing.T, tab context.Context, expr string) T {
	t.Helper()
	v, err := chromedp.Run(tab, chromedp.Evaluate[T](expr))
	if err != nil {
		t.Fatalf("evaluate %s: %v", expr, err)
	}
	return v
}

// TestLivePageFollowsARun opens the page in headless Chromium on a daemon
// serving the simulated bench (a real process on a loopback TCP port with
// a token), starts a run from the page through its safety and token
// dialogs, and checks what a person at the desk would look at: values
// moving, a table row within a second of each capture event, the captured
// points on the error chart, and after the daemon restarts mid-run the
// page carrying on with every point exactly once, without a reload.
func TestLivePageFollowsARun(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a calibration on the simulated bench in a browser")
	}
	chrome := browser(t)
	dir := t.TempDir()
	bin := plateauBinary(t)
	port := freePort(t)
	tokenFile := filepath.Join(dir, "token")
	if err := os.WriteFile(tokenFile, []byte(pageToken+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cfgPath := simConfig(t, dir, "page",
		"listen:\n", fmt.Sprintf("listen:\n  tcp: 127.0.0.1:%d\n  token_file: %s\n", port, tokenFile))
	// Half the usual simulated speed leaves room for a restart mid-run.
	slow, err := os.ReadFile(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(cfgPath, []byte(strings.Replace(string(slow), "speed: 60", "speed: 30", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	c := api.NewUnixClient(filepath.Join(dir, "page.sock"), "")
	ctx, cancel := context.WithTimeout(context.Background(), 240*time.Second)
	defer cancel()
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "first.log"))
	waitReady(t, ctx, c)

	tab := headlessTab(t, ctx, chrome, dir)
	console := &pageConsole{}
	run := func(what string, actions ...chromedp.Action[chromedp.Void]) {
		t.Helper()
		if err := chromedp.Do(tab, actions...); err != nil {
			t.Fatalf("%s: %v", what, err)
		}
	}
	waitPage := func(what, expr string, within time.Duration) {
		t.Helper()
		deadline := time.Now().Add(within)
		for {
			if ok, err := chromedp.Run(tab, chromedp.Evaluate[bool](expr)); err == nil && ok {
				return
			}
			if time.Now().After(deadline) {
				t.Fatalf("%s: not within %v (%s)", what, within, expr)
			}
			time.Sleep(50 * time.Millisecond)
		}
	}

	url := fmt.Sprintf("http://127.0.0.1:%d/", port)
	run("open the browser", chromedp.Navigate("about:blank"))
	console.follow(tab)
	run("open the page", chromedp.Navigate(url), chromedp.WaitVisible(chromedp.CSS("#instruments tbody tr")))
	// Resource timing records every status call, to check the pace below.
	inPage[bool](t, tab, `performance.setResourceTimingBufferSize(100000), window.loadedOnce = true`)
	first := inPage[string](t, tab, `(document.querySelector('#instruments tr[data-name="ref"] .reading') || {}).textContent || ""`)
	waitPage("the reference's reading changes", fmt.Sprintf(`(document.querySelector('#instruments tr[data-name="ref"] .reading') || {}).textContent !== %q`, first), 10*time.Second)
	if errs := console.all(); len(errs) > 0 {
		t.Fatalf("the page loaded with console errors:\n%s", strings.Join(errs, "\n"))
	}

	// Follow the stream from here, as tail does, to know when each point
	// was captured; the page must show it within a second.
	captured := make(chan store.Event, 100)
	followCtx, stopFollow := context.WithCancel(ctx)
	defer stopFollow()
	go c.Follow(followCtx, api.FollowOptions{Retry: true, MinBackoff: 50 * time.Millisecond, MaxBackoff: 200 * time.Millisecond},
		func(ev store.Event) error {
			if ev.Type == "point" {
				captured <- ev
			}
			return nil
		})

	// Start from the page: the cautions first, then the token, once.
	run("start from the page",
		chromedp.SetValue(chromedp.CSS("#start-label"), "page test"),
		chromedp.Click(chromedp.CSS("#start-button")),
		chromedp.WaitVisible(chromedp.CSS("#safety-dialog")))
	cautions := inPage[string](t, tab, `document.getElementById("safety-points").textContent`)
	for _, want := range []string{"eye protection", "range", "oil", "Vent", "procedure"} {
		if !strings.Contains(cautions, want) {
			t.Errorf("the safety cautions lack %q: %s", want, cautions)
		}
	}
	if !inPage[bool](t, tab, `document.getElementById("safety-start").disabled`) {
		t.Error("the start button in the cautions is enabled before they are acknowledged")
	}
	run("acknowledge the cautions and give the token",
		chromedp.Click(chromedp.CSS("#safety-ack")),
		chromedp.Click(chromedp.CSS("#safety-start")),
		chromedp.WaitVisible(chromedp.CSS("#token-dialog")),
		chromedp.SendKeys(chromedp.CSS("#token-input"), pageToken),
		chromedp.Click(chromedp.CSS(`#token-dialog button[value="ok"]`)))
	waitPage("the start is confirmed", `document.getElementById("control-result").textContent.includes("r000001")`, 10*time.Second)
	if stored := inPage[string](t, tab, `sessionStorage.getItem("plateau-token")`); stored != pageToken {
		t.Fatalf("the token is not kept for the tab: %q", stored)
	}

	seen := map[string]bool{}
	rowWithin := func(ev store.Event) {
		t.Helper()
		key := pointKeyOf(t, ev)
		if seen[key] {
			t.Fatalf("point %s captured twice", key)
		}
		seen[key] = true
		waitPage("row for point "+key, fmt.Sprintf(`document.querySelector('#points tr[data-key=%q]') !== null`, key), time.Second)
	}
	nextPoint := func(within time.Duration) store.Event {
		t.Helper()
		select {
		case ev := <-captured:
			return ev
		case <-time.After(within):
			t.Fatalf("no point captured in %v", within)
		}
		return store.Event{}
	}
	for range 4 {
		rowWithin(nextPoint(60 * time.Second))
	}

	// Pause and go on from the page: the token given at the start is kept,
	// so no dialog comes up again.
	run("pause from the page", chromedp.Click(chromedp.CSS("#pause-button")))
	waitStatus(t, ctx, c, "run paused from the page", func(s api.Status) bool { return s.Run != nil && s.Run.State == store.StatePaused })
	run("go on from the page", chromedp.Click(chromedp.CSS("#resume-button")))
	waitStatus(t, ctx, c, "run going on from the page", func(s api.Status) bool { return s.Run != nil && s.Run.State == store.StateRunning })
	if inPage[bool](t, tab, `document.getElementById("token-dialog").open`) {
		t.Fatal("the page asked for the token again")
	}
	// A dial entry on a bench whose device is read over the wire is
	// refused, and the page says why.
	run("enter a dial reading", chromedp.SetValue(chromedp.CSS("#entry-value"), "3.2"), chromedp.Click(chromedp.CSS(`#entry-form button[type="submit"]`)))
	waitPage("the refusal of the entry is shown", `document.getElementById("control-result").textContent.startsWith("refused: ")`, 5*time.Second)
	t.Logf("entry: %s", inPage[string](t, tab, `document.getElementById("control-result").textContent`))

	// The daemon goes away mid-run and comes back; the run resumes.
	stopDaemon(t, d)
	waitPage("the page notices the daemon left", `document.getElementById("link").textContent !== "live"`, 10*time.Second)
	d = startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "second.log"))
	waitReady(t, ctx, c)
	waitPage("the page follows the daemon again", `document.getElementById("link").textContent === "live"`, 15*time.Second)
	// A page opened now, mid-run, shows the last minutes and the points
	// so far at once, from the store.
	late, cancelLate := chromedp.NewContext(tab)
	lateConsole := &pageConsole{}
	run2 := func(what string, actions ...chromedp.Action[chromedp.Void]) {
		t.Helper()
		if err := chromedp.Do(late, actions...); err != nil {
			t.Fatalf("%s: %v", what, err)
		}
	}
	run2("open a second tab", chromedp.Navigate("about:blank"))
	lateConsole.follow(late)
	run2("open the page mid-run", chromedp.Navigate(url), chromedp.WaitVisible(chromedp.CSS("#instruments tbody tr")))
	deadline := time.Now().Add(5 * time.Second)
	for {
		traced, _ := chromedp.Run(late, chromedp.Evaluate[int](`traceChart ? traceChart.data[0].length : 0`))
		rows, _ := chromedp.Run(late, chromedp.Evaluate[int](`document.querySelectorAll('#points tbody tr[data-key]').length`))
		if traced > 30 && rows >= len(seen) {
			t.Logf("a page opened mid-run: %d trace samples, %d points at once", traced, rows)
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("a page opened mid-run shows %d trace samples and %d points (want > 30 and %d)", traced, rows, len(seen))
		}
		time.Sleep(100 * time.Millisecond)
	}
	if errs := lateConsole.all(); len(errs) > 0 {
		t.Fatalf("the page opened mid-run has console errors:\n%s", strings.Join(errs, "\n"))
	}
	cancelLate()

	for {
		ev := nextPoint(60 * time.Second)
		if seen[pointKeyOf(t, ev)] {
			continue // not shown twice: the comparison with the store below checks it
		}
		rowWithin(ev)
		if len(seen) >= 7 {
			break
		}
	}
	st := waitStatus(t, ctx, c, "run ends", func(s api.Status) bool { return s.Run == nil && s.Last != nil })
	if st.Last.State != string(store.StateFinished) {
		t.Fatalf("run ended %s: %s", st.Last.State, st.Last.Reason)
	}
	pts, err := c.Points(ctx, "r000001")
	if err != nil {
		t.Fatal(err)
	}
	waitPage("every stored point in the table", fmt.Sprintf(`document.querySelectorAll('#points tbody tr[data-key]').length >= %d`, len(pts)), 5*time.Second)
	keys := inPage[[]string](t, tab, `[...document.querySelectorAll('#points tbody tr[data-key]')].map(r => r.dataset.key)`)
	var want []string
	measured := 0
	for _, p := range pts {
		want = append(want, pointKey(p))
		if p.Kind == analysis.Measurement {
			measured++
		}
	}
	if !slices.Equal(keys, want) {
		t.Fatalf("the page's points differ from the store's:\npage  %v\nstore %v", keys, want)
	}
	onChart := inPage[int](t, tab, `errorChart.data[1].filter(v => v !== null).length + errorChart.data[2].filter(v => v !== null).length`)
	if onChart != measured {
		t.Fatalf("the error chart shows %d points, the run captured %d measurement points", onChart, measured)
	}
	if !inPage[bool](t, tab, `window.loadedOnce === true`) {
		t.Fatal("the page was reloaded")
	}
	// The status is asked for a full second after each answer, never faster.
	gaps := inPage[[]float64](t, tab, `(() => {
		const ts = performance.getEntriesByType("resource").filter(e => e.name.endsWith("/api/v1/status")).map(e => e.startTime);
		return ts.slice(1).map((x, i) => x - ts[i]);
	})()`)
	if len(gaps) < 10 {
		t.Fatalf("the page asked for the status %d times during the run", len(gaps)+1)
	}
	if fastest := slices.Min(gaps); fastest < 995 {
		t.Fatalf("the page asked for the status twice within %.0f ms", fastest)
	}
	t.Logf("%d status calls, %.0f ms apart at the least", len(gaps)+1, slices.Min(gaps))
	waitPage("the verdict", `document.getElementById("verdict").textContent.startsWith("Verdict: ")`, 15*time.Second)
	waitPage("links to the reports", `document.querySelectorAll('#reports a[href*="/api/v1/runs/r000001/report?format="]').length === 3`, 5*time.Second)
	waitPage("the band of permissible error", `errorChart.data[3].some(v => v !== null)`, 15*time.Second)

	png, err := chromedp.Run(tab, chromedp.FullScreenshot(100))
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	shot := filepath.Join(dir, "page.png")
	if err := os.WriteFile(shot, png, 0o644); err != nil {
		t.Fatal(err)
	}
	t.Logf("screenshot: %s (%d bytes)", shot, len(png))
	if os.Getenv("PLATEAU_UPDATE_SCREENSHOT") == "1" {
		if err := os.WriteFile("../../acquire/api/page/screenshot.png", png, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	for _, e := range console.all() {
		// Refused connections while the daemon was away and the refused
		// dial entry are expected; anything from the page's own code is not.
		if !strings.Contains(e, "ERR_CONNECTION_REFUSED") && !strings.Contains(e, "Failed to load resource") {
			t.Errorf("page error: %s", e)
		} else {
			t.Logf("expected: %s", e)
		}
	}
	stopDaemon(t, d)
}

func pointKeyOf(t *testing.T, ev store.Event) string {
	t.Helper()
	var p analysis.Point
	if err := json.Unmarshal(ev.Data, &p); err != nil {
		t.Fatalf("point event %d: %v", ev.ID, err)
	}
	return pointKey(p)
}

// pointKey names a point as the page's table does (data-key).
func pointKey(p analysis.Point) string {
	return fmt.Sprintf("%d/%s/%s/%d", p.Cycle, p.Direction, p.Kind, p.Index)
}
