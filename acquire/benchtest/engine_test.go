package benchtest

import (
	"context"
	"math"
	"path/filepath"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
	"plateau/drivers"
	_ "plateau/drivers/all"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

// testBench is a simulated rig over its real transports (Modbus TCP on
// loopback, Modbus RTU and line instruments on pseudo-terminals) with an
// engine and a store on it, all on one scaled clock.
type testBench struct {
	eng *acquire.Engine
	st  *store.Store
	rig *sim.Rig
	cfg *config.Config
	clk clock.Clock
}

// benchOption adjusts what bench builds beyond the configuration.
type benchOption func(*benchSetup)

type benchSetup struct {
	file    string // the configuration (testdata/config/sim.yaml when empty)
	rigOpts []sim.Option
	dial    bool
	store   func(*store.Store) acquire.Store
	ref     func(drivers.Gauge) drivers.Gauge
}

// withStore puts a fake in front of the real store.
func withStore(f func(*store.Store) acquire.Store) benchOption {
	return func(b *benchSetup) { b.store = f }
}

// withReference wraps the opened reference gauge.
func withReference(f func(drivers.Gauge) drivers.Gauge) benchOption {
	return func(b *benchSetup) { b.ref = f }
}

// withFile loads another example configuration than sim.yaml.
func withFile(path string) benchOption { return func(b *benchSetup) { b.file = path } }

// withDial lets the rig's simulated operator read the dial.
func withDial() benchOption { return func(b *benchSetup) { b.dial = true } }

// withRig passes options to the simulated rig.
func withRig(o ...sim.Option) benchOption {
	return func(b *benchSetup) { b.rigOpts = append(b.rigOpts, o...) }
}

// bench loads sim.yaml (or withFile's), shortens the procedure, applies edit and starts the
// simulated rig and an engine serving on it. Everything is stopped, and the
// store checked for consistency, when the test ends.
func bench(t *testing.T, edit func(*config.Config), opts ...benchOption) *testBench {
	t.Helper()
	var setup benchSetup
	for _, o := range opts {
		o(&setup)
	}
	file := "../../testdata/config/sim.yaml"
	if setup.file != "" {
		file = setup.file
	}
	cfg, err := config.Load(file)
	if err != nil {
		t.Fatal(err)
	}
	cfg.Procedure.PointsPa = []float64{0, 8e5, 16e5}
	cfg.Procedure.Cycles = 2
	cfg.Procedure.Exercise = 1
	cfg.Procedure.ExerciseHold = 5 * time.Second
	cfg.Procedure.TopHold = 5 * time.Second
	cfg.Procedure.Hold = 3 * time.Second
	cfg.Simulator.Speed = 40
	// The guard's silence limit is wall time (a few seconds by default): a
	// machine loaded by the whole suite under -race can starve the
	// reference's poller that long, and the trip would end the run. Whole
	// runs here are not about that promise (safety_test.go sets its own
	// limit and tests it), so they get a generous one.
	cfg.Safety.Silence = 20 * time.Second
	// Link time-outs are wall time too while the clock runs 40× faster: a
	// 500 ms time-out (and the resync grace after it) would be 20 s of
	// bench time, twice a settle window, each time a unit is silent. The
	// simulated units answer within milliseconds; 150 ms serves them as
	// well and keeps a silent one from eating the window of the others.
	for i := range cfg.Instruments {
		if cfg.Instruments[i].SimVia == config.LinkModbusRTU {
			cfg.Instruments[i].Link.Timeout = 150 * time.Millisecond
		}
	}
	if edit != nil {
		edit(cfg)
	}
	clk := clock.NewScaled(cfg.Simulator.Speed)
	ctx, cancel := context.WithCancel(context.Background())
	rig, err := sim.New(cfg.Simulator, clk, setup.rigOpts...)
	if err != nil {
		cancel()
		t.Fatal(err)
	}
	if _, err := rig.Start(ctx); err != nil {
		cancel()
		t.Fatal(err)
	}
	st, err := store.Open(filepath.Join(t.TempDir(), "run.db"), store.Options{})
	if err != nil {
		cancel()
		rig.Stop()
		t.Fatal(err)
	}
	in, closeInstruments, err := acquire.Open(cfg, drivers.OpenEnv{Clock: clk}, rig)
	if err != nil {
		cancel()
		rig.Stop()
		st.Close()
		t.Fatal(err)
	}
	if setup.ref != nil {
		in.Reference.Gauge = setup.ref(in.Reference.Gauge)
	}
	var est acquire.Store = st
	if setup.store != nil {
		est = setup.store(st)
	}
	eng, err := acquire.New(acquire.Options{Config: cfg, Store: est, Clock: clk, Instruments: in})
	if err != nil {
		cancel()
		closeInstruments()
		rig.Stop()
		st.Close()
		t.Fatal(err)
	}
	served := make(chan struct{})
	go func() { eng.Serve(ctx); close(served) }()
	t.Cleanup(func() {
		cancel()
		<-served
		closeInstruments()
		rig.Stop()
		path := st.Path()
		if err := st.Close(); err != nil {
			t.Errorf("store close: %v", err)
		}
		again, err := store.Open(path, store.Options{})
		if err != nil {
			t.Fatalf("reopen: %v", err)
		}
		if err := again.Check(); err != nil {
			t.Errorf("store check: %v", err)
		}
		again.Close()
	})
	// Serve must have started before Start.
	for i := 0; i < 100; i++ {
		if eng.Status().Instruments[0].Reads > 0 {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	return &testBench{eng: eng, st: st, rig: rig, cfg: cfg, clk: clk}
}

// run starts a run and waits (at most limit of wall time) for it to end.
func (b *testBench) run(t *testing.T, limit time.Duration) (store.RunID, store.State, string) {
	t.Helper()
	id, err := b.eng.Start(t.Name())
	if err != nil {
		t.Fatal(err)
	}
	state, reason := b.wait(t, limit)
	return id, state, reason
}

// wait waits for the active run to end and returns its final state.
func (b *testBench) wait(t *testing.T, limit time.Duration) (store.State, string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), limit)
	defer cancel()
	state, reason := b.eng.Wait(ctx)
	if state == "" {
		b.logInstruments(t)
		st := b.eng.Status()
		t.Logf("status: %s %s (%s) step %d/%d phase %q trip %q store %q", st.Run, st.State, st.Reason, st.Step+1, st.Steps, st.Phase, st.Trip, st.StoreFault)
		if evs, err := b.st.Events(0, 0); err == nil {
			for _, ev := range evs[max(0, len(evs)-8):] {
				t.Logf("event %d %s %s: %s", ev.ID, ev.Type, ev.Instrument, ev.Message)
			}
		}
		t.Fatalf("run still going after %s: %s", limit, reason)
	}
	return state, reason
}

func (b *testBench) logInstruments(t *testing.T) {
	t.Helper()
	for _, in := range b.eng.Status().Instruments {
		t.Logf("%s: reads %d failures %v last error %s", in.Name, in.Reads, in.Failures, in.LastErr)
	}
}

// points returns the run's captured points once the run has ended.
func (b *testBench) points(t *testing.T, id store.RunID) []analysis.Point {
	t.Helper()
	pts, err := b.st.Points(id)
	if err != nil {
		t.Fatal(err)
	}
	return pts
}

// events returns every stored event of the run.
func (b *testBench) events(t *testing.T, id store.RunID) []store.Event {
	t.Helper()
	var out []store.Event
	var since uint64
	for {
		evs, err := b.st.Events(since, 1000)
		if err != nil {
			t.Fatal(err)
		}
		if len(evs) == 0 {
			return out
		}
		for _, ev := range evs {
			if ev.Run == id {
				out = append(out, ev)
			}
		}
		since = evs[len(evs)-1].ID
	}
}

// eventsOf returns the run's events of one type.
func eventsOf(evs []store.Event, typ string) []store.Event {
	var out []store.Event
	for _, ev := range evs {
		if ev.Type == typ {
			out = append(out, ev)
		}
	}
	return out
}

// checkErrors compares each captured measurement point's error of
// indication with the simulator's model: the device's systematic error on
// the branch of the point's direction minus the reference's own error,
// within tol. At the turning points (the bottom of an ascending series, the
// top of a descending one) the pressure has not moved in the series'
// direction yet, so friction may still hold the pointer on the side of the
// previous motion: either branch is physical there.
func checkErrors(t *testing.T, rig *sim.Rig, pts []analysis.Point, top int, tol float64) {
	t.Helper()
	for _, p := range pts {
		if p.Kind != analysis.Measurement {
			continue
		}
		got := p.DUT.Mean - p.Reference.Mean
		want := rig.DeviceError(p.Reference.Mean, p.Direction) - rig.ReferenceError(p.Reference.Mean)
		turning := (p.Direction == analysis.Ascending && p.Index == 0) || (p.Direction == analysis.Descending && p.Index == top)
		if turning {
			other := analysis.Ascending
			if p.Direction == analysis.Ascending {
				other = analysis.Descending
			}
			alt := rig.DeviceError(p.Reference.Mean, other) - rig.ReferenceError(p.Reference.Mean)
			if math.Abs(got-alt) < math.Abs(got-want) {
				want = alt
			}
		}
		if math.Abs(got-want) > tol {
			t.Errorf("cycle %d %s point %d: error %.0f Pa, simulator says %.0f Pa", p.Cycle, p.Direction, p.Index, got, want)
		}
	}
}

// A full procedure over real transports on an accelerated clock: every
// planned point is captured and the device's error at each point agrees with
// the simulator's configured zero, span, non-linearity and friction within
// its noise and resolution.
func TestFullProcedureAgainstSimulator(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a whole procedure")
	}
	t.Parallel()
	b := bench(t, nil)
	id, state, reason := b.run(t, 60*time.Second)
	if state != store.StateFinished {
		b.logInstruments(t)
		t.Fatalf("run ended %q: %s", state, reason)
	}
	pts := b.points(t, id)
	if want := 2 * (1 + 3 + 3 + 1); len(pts) != want {
		t.Fatalf("%d points, want %d", len(pts), want)
	}
	// Resolution 0.01 bar of the device plus its noise: a point's error may
	// differ from the model's by about one digit.
	checkErrors(t, b.rig, pts, 2, 0.012e5)
	for _, p := range pts {
		if p.Reference.Count < 3 || p.DUT.Count < 3 {
			t.Errorf("point %+v: windows too small", p)
		}
		if p.DUT.End.Sub(p.DUT.Start) < 9*time.Second {
			t.Errorf("point %+v: window shorter than the settle window", p)
		}
	}
}
