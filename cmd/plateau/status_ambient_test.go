package main

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"plateau/acquire/api"
)

// ambientConfig is the simulated bench with ambient instruments
// (testdata/config/ambient.yaml, a scenario of our own) in dir, the room
// thermometer read by a person, with a TCP listener on port.
func ambientConfig(t *testing.T, dir string, port int) string {
	t.Helper()
	text, err := os.ReadFile("../../testdata/config/ambient.yaml")
	if err != nil {
		t.Fatal(err)
	}
	r := strings.NewReplacer(
		"path: plateau-ambient.db", "path: "+filepath.Join(dir, "ambient.db"),
		"socket: plateau-ambient.sock", "socket: "+filepath.Join(dir, "ambient.sock")+fmt.Sprintf("\n  tcp: 127.0.0.1:%d", port),
		"    uncertainty: 0.2 K\n    link: {kind: sim}\n    sim_part: ambient\n    poll: 1s\n", "    uncertainty: 0.2 K\n    link: {kind: manual}\n")
	out := r.Replace(string(text))
	if !strings.Contains(out, "kind: manual") || !strings.Contains(out, "tcp: 127.0.0.1") {
		t.Fatal("testdata/config/ambient.yaml changed: the test's replacements no longer apply")
	}
	path := filepath.Join(dir, "ambient.yaml")
	if err := os.WriteFile(path, []byte(out), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// The simulated bench with a barometer, a hygrometer and a thermometer
// typed in by a person, as processes: status shows each ambient reading in
// its own quantity and unit, never as a pressure or in scientific
// notation; enter takes the thermometer's reading in °C, °F or its own
// unit and refuses a humidity unit or an instrument read over its link;
// the metrics give each ambient quantity a series of its own; the live
// page shows the same readings and keeps them off the pressure trace.
func TestAmbientInstrumentsAtTheBench(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the daemon on the simulated bench")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	port := freePort(t)
	cfgPath := ambientConfig(t, dir, port)
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "daemon.log"))
	c := api.NewUnixClient(filepath.Join(dir, "ambient.sock"), "")
	waitStatus(t, ctx, c, "the barometer and the hygrometer read", func(s api.Status) bool {
		n := 0
		for _, in := range s.Instruments {
			if in.Role == api.RoleAmbient && !in.LastAt.IsZero() {
				n++
			}
		}
		return n == 2
	})
	plateau := func(args ...string) (string, int) {
		t.Helper()
		out, err := exec.CommandContext(ctx, bin, append([]string{"-c", cfgPath}, args...)...).CombinedOutput()
		if exit, ok := err.(*exec.ExitError); ok {
			return string(out), exit.ExitCode()
		} else if err != nil {
			t.Fatalf("plateau %v: %v", args, err)
		}
		return string(out), 0
	}

	status, code := plateau("status")
	if code != 0 {
		t.Fatalf("status: exit %d\n%s", code, status)
	}
	for name, row := range map[string]*regexp.Regexp{
		"baro":     regexp.MustCompile(`(?m)^baro +ambient \(barometric\) +up +\d{3,4}\.\d\d hPa `),
		"humidity": regexp.MustCompile(`(?m)^humidity +ambient \(humidity\) +up +\d\d\.\d %RH `),
		// Read by a person: listed before the first entry.
		"room": regexp.MustCompile(`(?m)^room +ambient \(temperature\) +up +no entry yet \(plateau enter\) `),
	} {
		if !row.MatchString(status) {
			t.Errorf("status shows %s not in its own unit:\n%s", name, status)
		}
	}
	if scientific.MatchString(status) {
		t.Errorf("scientific notation in status:\n%s", status)
	}

	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"enter", "--device", "room", "23.4", "°C"}, 0, "taken for room: 23.4 °C\n"},
		{[]string{"enter", "--device", "room", "74,1°F"}, 0, "taken for room: 74.1 °F\n"},
		{[]string{"enter", "--device", "room", "23.6"}, 0, "taken for room: 23.6 °C\n"},
		{[]string{"enter", "--device", "room", "52", "%RH"}, 1, `unknown temperature unit "%RH"`},
		{[]string{"enter", "--device", "room", "230"}, 1, "230 °C is no temperature of a laboratory"},
		{[]string{"enter", "--device", "humidity", "52", "%RH"}, 1, "humidity is read over its link (sim): there is nothing to type in"},
	} {
		out, code := plateau(c.args...)
		if code != c.code || !strings.Contains(out, c.want) {
			t.Errorf("plateau %s: exit %d, %q; want exit %d and %q", strings.Join(c.args, " "), code, out, c.code, c.want)
		}
	}
	// The last entry shows in status like any reading.
	if status, _ := plateau("status"); !regexp.MustCompile(`(?m)^room +ambient \(temperature\) +up +23\.60? °C \(`).MatchString(status) {
		t.Errorf("status does not show the room's last entry:\n%s", status)
	}

	url := fmt.Sprintf("http://127.0.0.1:%d/", port)
	resp, err := http.Get(url + "metrics")
	if err != nil {
		t.Fatal(err)
	}
	metrics, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, want := range []*regexp.Regexp{
		regexp.MustCompile(`(?m)^plateau_ambient\{instrument="baro",quantity="barometric"\} 1\d{5}(\.\d+)?$`), // Pa
		regexp.MustCompile(`(?m)^plateau_ambient\{instrument="humidity",quantity="humidity"\} \d\d(\.\d+)?$`),
	} {
		if !want.Match(metrics) {
			t.Errorf("metrics lack %s", want)
		}
	}
	if strings.Contains(string(metrics), `plateau_instrument_last_value_pascals{instrument="humidity"}`) {
		t.Error("a humidity is exported as a pressure")
	}

	// The live page, in a browser.
	chrome := browser(t)
	tab := headlessTab(t, ctx, chrome, dir)
	console := &pageConsole{}
	if err := chromedp.Do(tab, chromedp.Navigate("about:blank")); err != nil {
		t.Fatal(err)
	}
	console.follow(tab)
	if err := chromedp.Do(tab, chromedp.Navigate(url), chromedp.WaitVisible(chromedp.CSS(`#instruments tr[data-name="baro"]`))); err != nil {
		t.Fatal(err)
	}
	row := func(name string) string {
		return inPage[string](t, tab, fmt.Sprintf(`(() => { const r = document.querySelector('#instruments tr[data-name=%q]'); return r ? r.children[1].textContent + " | " + r.querySelector(".reading").textContent : ""; })()`, name))
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		baro, hum := row("baro"), row("humidity")
		okBaro := regexp.MustCompile(`^ambient \(barometric\) \| \d{3,4}\.\d\d hPa$`).MatchString(baro)
		okHum := regexp.MustCompile(`^ambient \(humidity\) \| \d\d\.\d %RH$`).MatchString(hum)
		if okBaro && okHum {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the page shows baro %q and humidity %q, want their own quantity and unit", baro, hum)
		}
		time.Sleep(100 * time.Millisecond)
	}
	deadline = time.Now().Add(10 * time.Second)
	for {
		series, _ := chromedp.Run(tab, chromedp.Evaluate[[]string](`traceChart ? traceChart.series.slice(1).map(s => s.label) : []`))
		if len(series) > 0 {
			for _, s := range series {
				if strings.Contains(s, "ambient") {
					t.Errorf("the pressure trace plots %s", s)
				}
			}
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("the page drew no trace")
		}
		time.Sleep(100 * time.Millisecond)
	}
	if errs := console.all(); len(errs) > 0 {
		t.Fatalf("console errors:\n%s", strings.Join(errs, "\n"))
	}
}
