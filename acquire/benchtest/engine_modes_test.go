package benchtest

import (
	"math"
	"strings"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
)

// one short cycle: zero, two points up, two down, zero.
func shortCycle(c *config.Config) {
	c.Procedure.Cycles = 1
	c.Procedure.PointsPa = []float64{0, 5e5, 10e5}
}

// An analog dial read by the simulated operator: one reading per point,
// paired with the settled reference window.
func TestDialRun(t *testing.T) {
	for _, compare := range []string{"set-by-reference", "set-by-device"} {
		t.Run(compare, func(t *testing.T) {
			t.Parallel()
			b := bench(t, func(c *config.Config) {
				shortCycle(c)
				c.Simulator.Device.Kind = "dial"
				c.Device.Kind = "dial"
				c.Procedure.Compare = compare
				// Bringing the pointer onto the mark takes several reads;
				// on a loaded machine the scaled clock runs ahead of them.
				c.Procedure.Timeout = 15 * time.Minute
			}, withDial())
			id, state, reason := b.run(t, 30*time.Second)
			if state != store.StateFinished {
				b.logInstruments(t)
				t.Fatalf("run ended %q: %s", state, reason)
			}
			pts := b.points(t, id)
			if len(pts) != 8 {
				for _, ev := range eventsOf(b.events(t, id), "missed") {
					t.Log(ev.Message)
				}
				t.Fatalf("%d points, want 8", len(pts))
			}
			for _, p := range pts {
				if p.DUT.Count != 1 {
					t.Errorf("%s: dial window of %d readings, want 1", describe(p), p.DUT.Count)
				}
				// Set by the device: the pointer is brought onto the mark by
				// moving the source until the operator reads the mark, within
				// half a division. Zero readings are taken vented, and at the
				// lower range value the source cannot go below the stop: those
				// are taken as read and say so.
				if compare == "set-by-device" && p.Kind == analysis.Measurement && !strings.Contains(p.Note, "taken as read") &&
					math.Abs(p.DUT.Mean-p.Nominal) > b.cfg.Device.ResolutionPa/2+1e-6 {
					t.Errorf("%s: set by the device, its reading %.0f Pa must be the mark %.0f Pa", describe(p), p.DUT.Mean, p.Nominal)
				}
			}
			if compare == "set-by-reference" {
				// The operator reads to the dial's 0.01 bar division; with
				// the pointer's 0.002 bar scatter an error may differ from
				// the model by about one division.
				checkErrors(t, b.rig, pts, 2, 0.012e5)
			}
			checkWindowsFromStore(t, b, id, pts)
		})
	}
}

// Pause holds the run, Resume continues it, Stop ends it: the stopped run
// is stored as stopped and the source is vented.
func TestPauseResumeStop(t *testing.T) {
	t.Parallel()
	b := bench(t, nil)
	id, err := b.eng.Start(t.Name())
	if err != nil {
		t.Fatal(err)
	}
	waitFor := func(what string, ok func(acquire.Status) bool) {
		t.Helper()
		for i := 0; i < 500; i++ {
			if ok(b.eng.Status()) {
				return
			}
			time.Sleep(10 * time.Millisecond)
		}
		t.Fatalf("%s: status %+v", what, b.eng.Status())
	}
	waitFor("first point", func(s acquire.Status) bool { return s.Points >= 1 })
	if err := b.eng.Pause(); err != nil {
		t.Fatal(err)
	}
	paused := b.eng.Status()
	if paused.State != string(store.StatePaused) {
		t.Fatalf("state %q after Pause", paused.State)
	}
	<-b.clk.After(60 * time.Second) // long enough for two points, were it running
	if s := b.eng.Status(); s.Points != paused.Points {
		t.Errorf("%d points captured while paused (had %d)", s.Points-paused.Points, paused.Points)
	}
	if err := b.eng.Resume(); err != nil {
		t.Fatal(err)
	}
	waitFor("a point after resuming", func(s acquire.Status) bool { return s.Points > paused.Points })
	if err := b.eng.Stop(""); err != nil {
		t.Fatal(err)
	}
	run, err := b.st.Run(id)
	if err != nil {
		t.Fatal(err)
	}
	if run.State != store.StateStopped {
		t.Errorf("stored state %q, want stopped", run.State)
	}
	if s := b.rig.Sample(); !s.Vented {
		t.Errorf("source not vented after Stop: setpoint %.3f bar", s.Setpoint)
	}
	states := []string{}
	for _, ev := range eventsOf(b.events(t, id), "state") {
		states = append(states, ev.Message)
	}
	t.Logf("state events: %q", states)
	if err := b.eng.Stop(""); err != acquire.ErrNoRun {
		t.Errorf("second Stop: %v, want ErrNoRun", err)
	}
}
