package benchtest

import (
	"context"
	"errors"
	"log/slog"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/sim"
)

// waitFor polls cond (wall time) until it holds or limit passes.
func waitFor(t *testing.T, limit time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(limit)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not within %s", what, limit)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// overLimit records the wall time of the first reference reading above a
// limit, to time the guard's vent against it.
type overLimit struct {
	drivers.Gauge
	limit float64
	first atomic.Int64
}

func (o *overLimit) Read(ctx context.Context) (drivers.Reading, error) {
	r, err := o.Gauge.Read(ctx)
	if err == nil && r.Pa > o.limit {
		o.first.CompareAndSwap(0, time.Now().UnixNano())
	}
	return r, err
}

// firstVentAfter is the first vent the simulated controller accepted at or
// after t, and whether any setpoint arrived after t.
func firstVentAfter(rig *sim.Rig, t time.Time) (vent time.Time, setpointAfter bool) {
	for _, w := range rig.Writes() {
		if w.Wall.Before(t) {
			continue
		}
		if w.Vent && vent.IsZero() {
			vent = w.Wall
		}
		if !w.Vent {
			setpointAfter = true
		}
	}
	return vent, setpointAfter
}

// The store in front of the engine blocks or fails; the safety guard must
// not care.
type stuckStore struct {
	acquire.Store
	fail  bool          // Put fails instead of blocking
	on    atomic.Bool   // the fault is active
	block chan struct{} // never closed: a blocked Put waits for ever
}

func (s *stuckStore) Put(run store.RunID, instrument string, smp store.Sample) error {
	if s.on.Load() {
		if s.fail {
			return errors.New("no space left on device (injected)")
		}
		<-s.block
	}
	return s.Store.Put(run, instrument, smp)
}

// A reference reading above the safety limit trips the guard: the source is
// vented within about one reference poll, no setpoint follows, and the run
// is paused with an error event naming the over-pressure — also while the
// store blocks or fails. The pollers keep polling.
func TestOverPressureTripWithAStuckStore(t *testing.T) {
	for _, mode := range []string{"healthy", "blocking", "failing"} {
		t.Run(mode, func(t *testing.T) {
			t.Parallel()
			// The controller overshoots its steps by 30 %: on the way to the
			// 16 bar exercise point the pressure passes a 16.3 bar limit that
			// no setpoint ever asked for (every setpoint above the limit is
			// refused before it is sent; this is the physical excursion).
			const limit = 16.3e5
			ref := &overLimit{limit: limit}
			fake := &stuckStore{fail: mode == "failing", block: make(chan struct{})}
			b := bench(t, func(c *config.Config) {
				c.Safety.MaxPressurePa = limit
				c.Simulator.Source.Overshoot = 0.3
				c.Simulator.Speed = 10
			}, withReference(func(g drivers.Gauge) drivers.Gauge { ref.Gauge = g; return ref }),
				withStore(func(st *store.Store) acquire.Store { fake.Store = st; return fake }))
			if mode != "healthy" {
				fake.on.Store(true)
			}
			id, err := b.eng.Start(t.Name())
			if err != nil {
				t.Fatal(err)
			}
			waitFor(t, 30*time.Second, "guard tripped", func() bool { return b.eng.Status().Trip != "" })
			st := b.eng.Status()
			if mode == "failing" && strings.Contains(st.Trip, "store") {
				// The failing store may trip the guard before the pressure
				// gets there; the over-pressure must still vent at once.
				waitFor(t, 10*time.Second, "paused", func() bool { return b.eng.Status().State == string(store.StatePaused) })
				if !strings.Contains(b.eng.Status().Reason, "store cannot write") {
					t.Errorf("paused for %q, want the store named", b.eng.Status().Reason)
				}
			} else {
				if !strings.Contains(st.Trip, "over-pressure") {
					t.Fatalf("tripped for %q, want over-pressure", st.Trip)
				}
				over := time.Unix(0, ref.first.Load())
				var vent time.Time
				waitFor(t, 5*time.Second, "vent arrives", func() bool { vent, _ = firstVentAfter(b.rig, over); return !vent.IsZero() })
				// One reference poll of wall time (100 ms of clock at 10×)
				// plus a loopback round trip.
				if d := vent.Sub(over); d > 100*time.Millisecond {
					t.Errorf("vent arrived %s after the first reading above the limit", d)
				}
				if _, sp := firstVentAfter(b.rig, over); sp {
					t.Error("a setpoint reached the controller after the trip")
				}
				if s := b.rig.Sample(); !s.Vented {
					t.Errorf("simulator not vented: setpoint %.3f bar", s.Setpoint/1e5)
				}
				waitFor(t, 10*time.Second, "paused", func() bool { return b.eng.Status().State == string(store.StatePaused) })
			}
			reads := b.eng.Status().Instruments[0].Reads
			waitFor(t, 5*time.Second, "pollers keep polling", func() bool { return b.eng.Status().Instruments[0].Reads > reads+5 })
			if mode == "healthy" {
				found := false
				for _, ev := range b.events(t, id) {
					if ev.Level == slog.LevelError && ev.Type == "safety" && strings.Contains(ev.Message, "over-pressure") {
						found = true
					}
				}
				if !found {
					t.Error("no error event names the over-pressure")
				}
			}
			if mode == "blocking" {
				close(fake.block) // let the test's clean-up close the store
			} else {
				fake.on.Store(false)
			}
			if err := b.eng.Stop("test done"); err != nil {
				t.Fatal(err)
			}
		})
	}
}

// The reference falls silent while the source holds pressure: the guard
// vents within the configured silence plus one poll, and the controller
// receives no setpoint after the silence began.
func TestSilentReferenceVents(t *testing.T) {
	t.Parallel()
	const silence = time.Second
	b := bench(t, func(c *config.Config) {
		c.Safety.Silence = silence
		c.Simulator.Speed = 10
		for i := range c.Instruments {
			if c.Instruments[i].Role == config.RoleReference {
				c.Instruments[i].SimVia = config.LinkSerial // a line instrument the rig can mute
			}
		}
	})
	if _, err := b.eng.Start(t.Name()); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 30*time.Second, "pressure up", func() bool {
		st := b.eng.Status()
		return st.Instruments[0].Last.Pa > 4e5 && st.Instruments[0].LastErr == ""
	})
	mutedAt := time.Now()
	b.rig.Mute(sim.PartReference, true)
	waitFor(t, 10*time.Second, "guard tripped", func() bool { return b.eng.Status().Trip != "" })
	if st := b.eng.Status(); !strings.Contains(st.Trip, "no good reading") {
		t.Fatalf("tripped for %q, want the silent reference", st.Trip)
	}
	var vent time.Time
	waitFor(t, 5*time.Second, "vent arrives", func() bool { vent, _ = firstVentAfter(b.rig, mutedAt); return !vent.IsZero() })
	poll := instrumentNamed(t, b.cfg, config.RoleReference).Poll
	// The last good reading may have come up to one poll before the mute;
	// the guard looks every tick (at most one poll) and the vent is one
	// loopback round trip.
	if d := vent.Sub(mutedAt); d > silence+2*poll+200*time.Millisecond {
		t.Errorf("vented %s after the reference fell silent, want within %s plus a poll", d, silence)
	}
	// A setpoint in flight when the reference fell silent may land; none
	// may be sent later than one reference poll after the mute.
	for _, w := range b.rig.Writes() {
		if !w.Vent && w.Wall.After(mutedAt.Add(poll+50*time.Millisecond)) {
			t.Errorf("setpoint %.3f bar arrived %s after the reference fell silent", w.Pa/1e5, w.Wall.Sub(mutedAt))
		}
	}
	b.rig.Mute(sim.PartReference, false)
	if err := b.eng.Stop("test done"); err != nil {
		t.Fatal(err)
	}
}
