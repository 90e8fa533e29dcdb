package acquire_test

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

// With a controller that overshoots by 30 % of each step, an ascending
// point first lands above the target: the runner must notice, retreat and
// creep up on it again from below, so that every point lies on the branch of
// its series (common practice: a point is approached from its series' side,
// never by reversing onto it). The simulated dead band is widened to 0.06 bar
// so that the two branches lie 5 tolerances apart.
func TestApproachFromTheSeriesSide(t *testing.T) {
	t.Parallel()
	b := bench(t, func(c *config.Config) {
		shortCycle(c)
		c.Simulator.Speed = 60
		c.Simulator.Source.Overshoot = 0.3
		c.Simulator.Device.DeadBand = "0.06 bar"
		instrumentNamed(t, c, config.RoleDevice).SimVia = config.LinkModbusTCP
	})
	id, state, reason := b.run(t, 30*time.Second)
	if state != store.StateFinished {
		b.logInstruments(t)
		t.Fatalf("run ended %q: %s", state, reason)
	}
	if n := len(eventsOf(b.events(t, id), "approach")); n < 2 {
		t.Errorf("%d approach events: the overshoot was never noticed", n)
	}
	pts := b.points(t, id)
	if len(pts) != 8 {
		t.Fatalf("%d points, want 8", len(pts))
	}
	for _, p := range pts {
		if p.Note != "" {
			t.Errorf("%s: %s", describe(p), p.Note)
		}
	}
	checkErrors(t, b.rig, pts, 2, 0.012e5)
}

// A point that does not settle within its time-out is marked missed: with
// on_timeout skip the run goes on to the end, with stop it ends failed at
// the first one. The device's noise (1 bar) makes settling impossible.
func TestPointTimeout(t *testing.T) {
	for _, onTimeout := range []string{"skip", "stop"} {
		t.Run(onTimeout, func(t *testing.T) {
			t.Parallel()
			b := bench(t, func(c *config.Config) {
				c.Procedure.Cycles = 1
				c.Procedure.Exercise = 0
				c.Procedure.Zero = false
				c.Procedure.PointsPa = []float64{0, 16e5}
				c.Procedure.Timeout = 40 * time.Second
				c.Procedure.OnTimeout = onTimeout
				c.Simulator.Device.Noise = "1 bar"
			})
			id, state, reason := b.run(t, 20*time.Second)
			missed := eventsOf(b.events(t, id), "missed")
			for _, ev := range missed {
				if !strings.Contains(ev.Message, "device under test did not settle") {
					t.Errorf("missed event %q does not say why", ev.Message)
				}
			}
			if n := len(b.points(t, id)); n != 0 {
				t.Errorf("%d points captured from a device that never settles", n)
			}
			want, wantMissed := store.StateFinished, 4
			if onTimeout == "stop" {
				want, wantMissed = store.StateFailed, 1
			}
			if state != want || len(missed) != wantMissed {
				t.Fatalf("run ended %q (%s) with %d missed points, want %q with %d", state, reason, len(missed), want, wantMissed)
			}
		})
	}
}

// Free run: no plan and no source; the pressure is moved by hand (here on
// the simulator's front panel). Every plateau both instruments hold for a
// full window becomes one point, with the direction it was reached from.
func TestFreeRun(t *testing.T) {
	t.Parallel()
	b := bench(t, func(c *config.Config) {
		c.Procedure.Mode = "free"
		var kept []config.Instrument
		for _, in := range c.Instruments {
			if in.Role != config.RoleSource {
				kept = append(kept, in)
			}
		}
		c.Instruments = kept
	})
	id, err := b.eng.Start(t.Name())
	if err != nil {
		t.Fatal(err)
	}
	plateaus := []float64{0, 5e5, 10e5, 5e5}
	for _, pa := range plateaus {
		if err := b.rig.SetPoint(pa); err != nil {
			t.Fatal(err)
		}
		<-b.clk.After(40 * time.Second) // settling (about 10 s) plus a window and a half
	}
	if err := b.eng.Stop("plateaus done"); err != nil {
		t.Fatal(err)
	}
	if run, err := b.st.Run(id); err != nil || run.State != store.StateStopped {
		t.Errorf("run stored as %q (%v), want stopped", run.State, err)
	}
	pts := b.points(t, id)
	if len(pts) != len(plateaus) {
		for _, p := range pts {
			t.Logf("%s at %.0f Pa", describe(p), p.Reference.Mean)
		}
		t.Fatalf("%d points from %d plateaus", len(pts), len(plateaus))
	}
	dirs := []analysis.Direction{analysis.Ascending, analysis.Ascending, analysis.Ascending, analysis.Descending}
	for i, p := range pts {
		if math.Abs(p.Reference.Mean-plateaus[i]) > b.cfg.Procedure.Settle.BandPa || p.Direction != dirs[i] {
			t.Errorf("point %d: %s at %.0f Pa, want %s at %.0f Pa", i, p.Direction, p.Reference.Mean, dirs[i], plateaus[i])
		}
	}
	checkWindowsFromStore(t, b, id, pts)
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
			}, withDial())
			id, state, reason := b.run(t, 30*time.Second)
			if state != store.StateFinished {
				b.logInstruments(t)
				t.Fatalf("run ended %q: %s", state, reason)
			}
			pts := b.points(t, id)
			if len(pts) != 8 {
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
