package main

import (
	"bytes"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/analysis/units"
)

// What status prints while a step waits, after a run and while paused: the
// target and the settle rule, what each instrument still waits for, the
// time left, the device each instrument reads, since when the run is in its
// state; never "step step", every pressure in fixed notation.
func TestStatusGoldenTechniciansView(t *testing.T) {
	t.Setenv("TZ", "UTC")
	now := time.Date(2026, 3, 1, 22, 0, 0, 0, time.UTC)
	bar := display{unit: units.Bar, res: 1e3}
	rule := &api.SettleRule{WindowSeconds: 10, MaxDriftPaPerS: 500.0 / 60, MaxSpreadPa: 400, BandPa: 16000}
	plan := make([]api.PlanStep, 29)
	info := api.RunInfo{ID: "r000002", State: store.StateRunning}
	waitingStep := api.Status{Version: "1.2.0", Since: now.Add(-2 * time.Hour), Run: &info, State: "running", StateSince: now.Add(-20 * time.Minute),
		Step: "step 19 of 29, 16 of 28 points: cycle 2 up point 3", Progress: 16.0 / 28, PointsCaptured: 16, Unit: "bar", LastEventID: 90,
		Current: &api.StepNow{Index: 18, Of: 29, Phase: "cycle 2 up point 3", TargetPa: 6.4e5, Estimated: true, StepLeftSeconds: 12.4, RunLeftSeconds: 251},
		Settle:  rule, Plan: plan, Source: true,
		Instruments: []api.InstrumentInfo{
			{Name: "ref", Role: "reference", Up: true, Reads: 9000, LastPa: 6.39e5, LastAt: now.Add(-time.Second), Why: "drifting 0.004 bar/min, limit 0.005 bar/min"},
			{Name: "pg1", Role: "device", Device: "PG-0421", Up: true, Reads: 5000, LastPa: 6.41e5, LastAt: now.Add(-time.Second), Settled: true},
			{Name: "dial", Role: "device", Device: "PG-0422", Up: true, Waiting: "cycle 2 up point 3"},
			{Name: "controller", Role: "source", Up: true},
		}}
	paused := waitingStep
	paused.State, paused.Reason, paused.Held = "paused", "paused by operator; the pressure is held", true
	paused.StateSince = now.Add(-90 * time.Second)
	paused.Instruments = waitingStep.Instruments[:2]
	idle := api.Status{Version: "1.2.0", Since: now.Add(-3 * time.Hour), PointsCaptured: 28, Unit: "bar", LastEventID: 120,
		Last: &api.LastRun{ID: "r000002", State: "finished", Reason: "every step done", Verdict: "conditional pass"},
		Plan: plan, ExpectedSeconds: 475, ExpectedMostSeconds: 8580, Settle: rule}
	stopped := idle
	stopped.Last = &api.LastRun{ID: "r000002", State: "stopped", Reason: "stopped by operator", Verdict: "pass", Earlier: true}
	// Ambient instruments in their own units as they read them (a °F
	// thermometer stays in °F); one typed by a person has no reading yet.
	ambient := api.Status{Version: "1.2.0", Since: now.Add(-time.Hour), Unit: "bar", LastEventID: 12,
		Instruments: []api.InstrumentInfo{
			{Name: "ref", Role: "reference", Up: true, Reads: 900, LastPa: 0.25, LastAt: now.Add(-time.Second), Raw: 1.0133825540542603, RawUnit: "bar"},
			{Name: "baro", Role: "ambient", Quantity: "barometric", Up: true, Reads: 374, LastPa: 101338.00048828125, LastAt: now.Add(-time.Second), Raw: 1013.3800048828125, RawUnit: "hPa"},
			{Name: "room", Role: "ambient", Quantity: "temperature", Up: true, Reads: 80, LastPa: 21.1, LastAt: now.Add(-2 * time.Second), Raw: 69.98, RawUnit: "°F"},
			{Name: "humidity", Role: "ambient", Quantity: "humidity", Up: true, Reads: 80, LastPa: 45.06431198120117, LastAt: now.Add(-2 * time.Second), Raw: 45.06431198120117, RawUnit: "%RH"},
			{Name: "typed", Role: "ambient", Up: true},
		}}
	for _, c := range []struct {
		name string
		st   api.Status
		want string
	}{
		{"a step waiting", waitingStep, `daemon    plateau 1.2.0, up 2h0m0s
run       r000002 running since 21:40:00 (20m ago)
progress  57 % — step 19 of 29, 16 of 28 points: cycle 2 up point 3
target    6.40 bar; settled when steady over 10s: drift within 0.005 bar/min, scatter within 0.004 bar, mean within 0.160 bar of the target
left      this step ~12s, the run ~4m11s (the plan, scaled by how long the steps so far took)
waiting   ref: drifting 0.004 bar/min, limit 0.005 bar/min
waiting   dial (PG-0422): a dial reading for cycle 2 up point 3 (plateau enter VALUE)
points    16 captured since the daemon started; last event 90

INSTRUMENT      ROLE       STATE  LAST READING       SETTLED  READS  FAILED
ref             reference  up     6.39 bar (1s ago)  no       9000   0
pg1 (PG-0421)   device     up     6.41 bar (1s ago)  yes      5000   0
dial (PG-0422)  device     up     —                  no       0      0
controller      source     up     —                  no       0      0
`},
		{"paused", paused, `daemon    plateau 1.2.0, up 2h0m0s
run       r000002 paused since 21:58:30 (1m30s ago): paused by operator; the pressure is held
progress  57 % — step 19 of 29, 16 of 28 points: cycle 2 up point 3
target    6.40 bar; settled when steady over 10s: drift within 0.005 bar/min, scatter within 0.004 bar, mean within 0.160 bar of the target
left      this step ~12s, the run ~4m11s (the plan, scaled by how long the steps so far took)
waiting   ref: drifting 0.004 bar/min, limit 0.005 bar/min
points    16 captured since the daemon started; last event 90

INSTRUMENT     ROLE       STATE  LAST READING       SETTLED  READS  FAILED
ref            reference  up     6.39 bar (1s ago)  no       9000   0
pg1 (PG-0421)  device     up     6.41 bar (1s ago)  yes      5000   0
`},
		{"after a run", idle, `daemon    plateau 1.2.0, up 3h0m0s
run       none (idle)
last run  r000002 finished: every step done
verdict   CONDITIONAL PASS
a run     29 steps, at least 7m55s, at most 2h23m (reaching each pressure comes on top)
points    28 captured since the daemon started; last event 120
`},
		{"after a stopped run", stopped, `daemon    plateau 1.2.0, up 3h0m0s
run       none (idle)
last run  r000002 stopped: stopped by operator
verdict   PASS — on the points captured before the run stopped; the calibration is incomplete
a run     29 steps, at least 7m55s, at most 2h23m (reaching each pressure comes on top)
points    28 captured since the daemon started; last event 120
`},
		{"ambient instruments", ambient, `daemon    plateau 1.2.0, up 1h0m0s
run       none (idle)
points    0 captured since the daemon started; last event 12

INSTRUMENT  ROLE                   STATE  LAST READING          SETTLED  READS  FAILED
ref         reference              up     0.00 bar (1s ago)     no       900    0
baro        ambient (barometric)   up     1013.38 hPa (1s ago)  no       374    0
room        ambient (temperature)  up     69.98 °F (2s ago)     no       80     0
humidity    ambient (humidity)     up     45.1 %RH (2s ago)     no       80     0
typed       ambient                up     —                     no       0      0
`},
	} {
		t.Run(c.name, func(t *testing.T) {
			var b bytes.Buffer
			printStatus(&b, c.st, bar, now)
			got := trimTrailing(b.String())
			if got != c.want {
				t.Errorf("got\n%s\nwant\n%s", got, c.want)
			}
			if scientific.MatchString(got) || bytes.Contains(b.Bytes(), []byte("step step")) {
				t.Errorf("scientific notation or \"step step\" in\n%s", got)
			}
		})
	}
}

// pause says whether the pressure is held, and why not when it is not.
func TestPausedSaysWhetherThePressureIsHeld(t *testing.T) {
	bar := display{unit: units.Bar, res: 1e3}
	run := &api.RunInfo{ID: "r000004"}
	at := &api.StepNow{Index: 6, Of: 29, Phase: "cycle 1 up point 5", TargetPa: 12.8e5}
	for _, c := range []struct {
		name string
		st   api.Status
		want string
	}{
		{"held", api.Status{Run: run, Current: at, Source: true, Held: true},
			"run r000004 paused at step 7 of 29; the pressure is held: the controller keeps its setpoint of 12.80 bar; 'plateau resume' carries it on, 'plateau stop' vents and ends it"},
		{"tripped", api.Status{Run: run, Current: at, Source: true, Trip: "reference above safety.max_pressure"},
			"run r000004 paused at step 7 of 29; the pressure is NOT held: the safety guard vented the source (reference above safety.max_pressure)"},
		{"vented at a restart", api.Status{Run: run, Current: at, Source: true, Reason: "paused by operator; the source was vented when the daemon stopped"},
			"run r000004 paused at step 7 of 29; the pressure is NOT held: the source was vented (paused by operator; the source was vented when the daemon stopped)"},
		{"no source", api.Status{Run: run, Current: at},
			"run r000004 paused at step 7 of 29; plateau drives no pressure source here: the pressure is whatever the bench holds"},
	} {
		if got := pausedText(c.st, bar); got != c.want {
			t.Errorf("%s:\n got %s\nwant %s", c.name, got, c.want)
		}
	}
}

func TestVerdictOfAReport(t *testing.T) {
	for _, c := range []struct{ report, want string }{
		{`{"info":{"device":{"id":"PG-1"}},"result":{"decision":"pass"}}`, "pass"},
		{`[{"info":{"device":{"id":"PG-1"}},"result":{"decision":"pass"}},{"info":{"device":{"id":"PG-2"}},"result":{"decision":"fail"}}]`, "PG-1 pass, PG-2 fail"},
		{`not json`, ""},
	} {
		if got := verdictOf([]byte(c.report)); got != c.want {
			t.Errorf("%s: %q, want %q", c.report, got, c.want)
		}
	}
}
