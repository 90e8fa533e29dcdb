package main

import (
	"context"
	"encoding/json"
	"errors"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
)

// plateau report on a run of eight devices, as a process: directly on the
// store with no daemon, then through a daemon serving that store. Every
// device by default, one with --device, a clear refusal of a device the
// run does not have, and -o x.html writes one document.
func TestReportSeveralDevicesAsProcess(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the program and the daemon as processes")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "eight")
	severalDevicesStore(t, filepath.Join(dir, "eight.db"))
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	plateau := func(args ...string) (string, error) {
		out, err := exec.CommandContext(ctx, bin, append([]string{"-c", cfgPath}, args...)...).CombinedOutput()
		return string(out), err
	}
	check := func(how string) {
		t.Helper()
		out, err := plateau("report", "last")
		if err != nil {
			t.Fatalf("%s: report last: %v\n%s", how, err, out)
		}
		for _, want := range []string{"8 DEVICES UNDER TEST", "════ device 1 of 8: pt-1 ════", "════ device 8 of 8: pt-8 ════",
			"PT-1002 · Example Instruments PT-16 · serial S7002", "VERDICT: FAIL"} {
			if !strings.Contains(out, want) {
				t.Errorf("%s: report last lacks %q", how, want)
			}
		}
		out, err = plateau("report", "last", "--device", "pt-2")
		if err != nil || strings.Contains(out, "PT-1001") || !strings.Contains(out, "Device under test      PT-1002") || strings.Contains(out, "DEVICES UNDER TEST") {
			t.Errorf("%s: report --device pt-2 (%v) is not pt-2's report alone:\n%.600s", how, err, out)
		}
		out, err = plateau("report", "last", "--device", "pt-9")
		var exit *exec.ExitError
		if !errors.As(err, &exit) || !strings.Contains(out, `run r000001 has no device "pt-9"; its devices: pt-1, pt-2, pt-3, pt-4, pt-5, pt-6, pt-7, pt-8`) {
			t.Errorf("%s: report --device pt-9: %v\n%s", how, err, out)
		}
		html := filepath.Join(dir, how+".html")
		if out, err := plateau("report", "last", "-o", html); err != nil {
			t.Fatalf("%s: report -o: %v\n%s", how, err, out)
		}
		page := readFile(html)
		if strings.Count(page, `<section class="device" id="device-pt-`) != 8 || strings.Count(page, `<a href="#device-pt-`) != 8 {
			t.Errorf("%s: %s is not one document with 8 linked device sections", how, html)
		}
		out, err = plateau("report", "last", "--format", "json", "--device", "pt-1")
		var doc struct{ Device string }
		if err != nil || json.Unmarshal([]byte(out), &doc) != nil || doc.Device != "pt-1" {
			t.Errorf("%s: JSON of pt-1: device %q, %v\n%.300s", how, doc.Device, err, out)
		}
		out, err = plateau("report", "last", "--format", "csv")
		if err != nil || !strings.HasPrefix(out, "device,point,nominal_bar,") || strings.Count(out, "\npt-2,") != 11 {
			t.Errorf("%s: CSV of every device (%v):\n%.300s", how, err, out)
		}
	}
	check("store") // no daemon: the store is read directly

	startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "daemon.log"))
	waitReady(t, ctx, api.NewUnixClient(filepath.Join(dir, "eight.sock"), ""))
	check("daemon")
	if out, err := plateau("runs"); err != nil || !strings.Contains(out, "8: pt-1, pt-2, pt-3, …") {
		t.Errorf("runs through the daemon does not name the devices (%v):\n%s", err, out)
	}
}

// twoDials is the simulated bench with two dials read by a person in place
// of its device, on a short plan: 0, 8 and 16 bar, one cycle.
func twoDials(t *testing.T, dir, name string) string {
	return simConfig(t, dir, name,
		"  - name: dut\n    role: device\n    link: {kind: sim}\n    sim_part: device\n    sim_via: modbus-rtu\n    poll: 100ms\n",
		"  - name: dial-a\n    role: device\n    link: {kind: manual}\n    unit: bar\n    device: {id: DG-A1, serial: A-1}\n"+
			"  - name: dial-b\n    role: device\n    link: {kind: manual}\n    unit: bar\n    device: {id: DG-B2, serial: B-2}\n",
		"points: [0 %, 20 %, 40 %, 60 %, 80 %, 100 %]", "points: [0 %, 50 %, 100 %]",
		"cycles: 2", "cycles: 1", "exercise: 1", "exercise: 0",
		"window: 10s", "window: 3s", "timeout: 5m", "timeout: 60m", "top_hold: 20s", "top_hold: 2s", "hold: 5s", "hold: 1s")
}

// plateau enter with two dials, against a running daemon: an unknown dial is
// refused with the dials named; before a step waits an entry is refused
// with the reason; without --device a reading goes to the one dial a step
// is waiting for (the procedure asks the dials in turn); --device takes it
// for the named dial.
func TestEnterNamesTheDial(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the daemon as a process")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := twoDials(t, dir, "dials")
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	wait, stopWaiting := context.WithTimeout(ctx, 40*time.Second)
	defer stopWaiting()
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "daemon.log"))
	c := api.NewUnixClient(filepath.Join(dir, "dials.sock"), "")
	waitReady(t, ctx, c)
	if _, err := c.Start(ctx, api.StartRequest{Label: "two dials"}); err != nil {
		t.Fatal(err)
	}
	enter := func(args ...string) (string, int) {
		out, err := exec.CommandContext(ctx, bin, append([]string{"-c", cfgPath, "enter"}, args...)...).CombinedOutput()
		var exit *exec.ExitError
		if errors.As(err, &exit) {
			return string(out), exit.ExitCode()
		}
		if err != nil {
			t.Fatal(err)
		}
		return string(out), 0
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--device", "dial-c", "-0,1"}, `no dial read by an operator is named "dial-c"; the dials are dial-a, dial-b`},
	} {
		out, code := enter(c.args...)
		if code == 0 || !strings.Contains(out, c.want) {
			t.Errorf("enter %v: exit %d, output %q; want a refusal with %q", c.args, code, out, c.want)
		}
	}
	// The first step (the zero reading) asks for each dial in turn once
	// the bench is vented and the reference settled: dial-a named, then
	// dial-b as the only one waiting.
	for _, dial := range []string{"dial-a", ""} {
		for {
			args := []string{"0"}
			if dial != "" {
				args = []string{"--device", dial, "0"}
			}
			out, code := enter(args...)
			if code == 0 {
				if !strings.Contains(out, "taken"+prefixed(" for ", dial)+": 0 bar") {
					t.Errorf("enter %v: %q", args, out)
				}
				break
			}
			if !strings.Contains(out, "no step is waiting") || wait.Err() != nil {
				t.Fatalf("enter --device %s: exit %d: %s\ndaemon log:\n%s", dial, code, out, readFile(filepath.Join(dir, "daemon.log")))
			}
			time.Sleep(200 * time.Millisecond)
		}
	}
	stopDaemon(t, d)
	log := readFile(filepath.Join(dir, "daemon.log"))
	for _, want := range []string{"dial-a: dial read 0 bar", "dial-b: dial read 0 bar"} {
		if !strings.Contains(log, want) {
			t.Errorf("the daemon's log lacks %q", want)
		}
	}
}

// plateau run with two dials read by a person, typed through a pseudo-
// terminal: every prompt names the dial it is for, both dials are asked at
// every step (again when the step asks again), and at the end the results
// of both devices are printed (the summary, then each) and -o writes one
// HTML document with both.
func TestRunPromptsEachDialAndReportsBoth(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the program and runs a procedure")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := twoDials(t, dir, "run2")
	html := filepath.Join(dir, "both.html")
	term, exited := onTerminal(t, bin, "--config", cfgPath, "run", "--label", "two dials", "-o", html)
	prompt := regexp.MustCompile(`\n(dial-[ab]), an entry for [^\n]*?: set (-?[0-9.]+) bar, read the dial: `)
	asked := map[string]int{}
	for {
		m, err := term.expect(prompt, exited, 60*time.Second)
		if errors.Is(err, errExited) {
			break
		}
		if err != nil {
			t.Fatalf("prompt after %v: %v\n%s", asked, err, term.text())
		}
		asked[m[1]]++
		term.send(m[2])
		term.must(t, `press Enter to take it`, exited)
		term.send("")
		term.must(t, `taken for `+m[1]+`: `, exited)
	}
	if err := <-exited; err != nil {
		t.Fatalf("run: %v\n%s", err, term.text())
	}
	// 0, 8 and 16 bar up and down, with a zero reading before and after:
	// eight readings of each dial, and one more for each time a step asked
	// again (the reference was not steady when the dial was read).
	again := strings.Count(term.text(), " asks again for ")
	if asked["dial-a"] < 8 || asked["dial-b"] < 8 || asked["dial-a"]+asked["dial-b"] != 16+again {
		t.Errorf("prompts per dial %v with %d asked again, want 8 each and one per ask again:\n%s", asked, again, term.text())
	}
	out := term.text()
	for _, want := range []string{"2 DEVICES UNDER TEST", "dial-a  DG-A1 · serial A-1", "════ device 1 of 2: dial-a ════",
		"════ device 2 of 2: dial-b ════", "wrote " + html} {
		if !strings.Contains(out, want) {
			t.Errorf("run's output lacks %q", want)
		}
	}
	page := readFile(html)
	if strings.Count(page, `<section class="device" id="device-dial-`) != 2 || !strings.Contains(page, `<a href="#device-dial-b">dial-b</a>`) {
		t.Errorf("%s is not one document with both dials", html)
	}
}
