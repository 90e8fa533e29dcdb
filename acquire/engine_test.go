package acquire_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
	"plateau/drivers/manual"
)

// Engine tests on fake instruments: a first-order pressure source, a
// reference that reads it and a device with a fixed error, on an
// accelerated clock and a real store. The numbers are a scenario of our
// own. Whole runs on the simulated bench over real transports are in
// acquire/benchtest.

const fakeYAML = `
device: {upper: 16 bar, resolution: 0.001 bar, class: "1", unit: bar}
reference: {uncertainty: 0.01 %}
instruments:
  - {name: ref, role: reference, unit: bar, poll: 100ms, link: {kind: sim}, sim_part: reference}
  - {name: dut, role: device, unit: bar, poll: 100ms, link: {kind: sim}, sim_part: device}
procedure:
  points: [0 %, 50 %, 100 %]
  cycles: 1
  exercise: 0
  hold: 1s
  top_hold: 1s
  timeout: 2m
  decision: simple
  settle: {window: 2s, min_count: 5, max_drift: 0.01 bar, max_spread: 0.01 bar, band: 1 %}
safety:
  silence: 5s
`

type fakeModel struct {
	clk      clock.Clock
	mu       sync.Mutex
	from, to float64
	since    time.Time
	vents    atomic.Int32
}

func (m *fakeModel) pressure() float64 {
	m.mu.Lock()
	defer m.mu.Unlock()
	x := m.clk.Now().Sub(m.since).Seconds() / 0.5
	return m.to + (m.from-m.to)*math.Exp(-x)
}

func (m *fakeModel) move(to float64) {
	p := m.pressure()
	m.mu.Lock()
	m.from, m.to, m.since = p, to, m.clk.Now()
	m.mu.Unlock()
}

func (m *fakeModel) SetPoint(_ context.Context, pa float64) error { m.move(pa); return nil }
func (m *fakeModel) Vent(context.Context) error                   { m.vents.Add(1); m.move(0); return nil }
func (m *fakeModel) Close() error                                 { return nil }

type fakeGauge struct {
	m      *fakeModel
	offset float64
}

func (g fakeGauge) Read(context.Context) (drivers.Reading, error) {
	return drivers.Reading{Time: g.m.clk.Now(), Pa: g.m.pressure() + g.offset}, nil
}
func (fakeGauge) Close() error { return nil }

const devOffset = 0.004e5 // the fake device reads 4 mbar high

type fakeBench struct {
	eng *acquire.Engine
	st  *store.Store
	m   *fakeModel
	cfg *config.Config
}

func newFakeBench(t *testing.T, edit func(*config.Config), dev drivers.Gauge, wrap func(*store.Store) acquire.Store) *fakeBench {
	t.Helper()
	return newFakeBenchOf(t, edit, wrap, func(m *fakeModel) []acquire.Instrument {
		if dev != nil {
			return []acquire.Instrument{{Name: "dut", Gauge: dev, Poll: 100 * time.Millisecond, ByPerson: true}}
		}
		return []acquire.Instrument{{Name: "dut", Gauge: fakeGauge{m: m, offset: devOffset}, Poll: 100 * time.Millisecond}}
	})
}

func newFakeBenchOf(t *testing.T, edit func(*config.Config), wrap func(*store.Store) acquire.Store, devices func(*fakeModel) []acquire.Instrument) *fakeBench {
	t.Helper()
	cfg, err := config.Parse([]byte(fakeYAML), "fake.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		edit(cfg)
	}
	clk := clock.NewScaled(20)
	m := &fakeModel{clk: clk, since: clk.Now()}
	st, err := store.Open(filepath.Join(t.TempDir(), "fake.db"), store.Options{Clock: clk})
	if err != nil {
		t.Fatal(err)
	}
	in := acquire.Instruments{
		Reference: acquire.Instrument{Name: "ref", Gauge: fakeGauge{m: m}, Poll: 100 * time.Millisecond},
		Devices:   devices(m),
		Source:    m,
	}
	var est acquire.Store = st
	if wrap != nil {
		est = wrap(st)
	}
	eng, err := acquire.New(acquire.Options{Config: cfg, Store: est, Clock: clk, Instruments: in})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	served := make(chan struct{})
	go func() { eng.Serve(ctx); close(served) }()
	t.Cleanup(func() {
		cancel()
		<-served
		if err := st.Check(); err != nil {
			t.Errorf("store check: %v", err)
		}
		st.Close()
	})
	select {
	case <-eng.Ready():
	case <-time.After(5 * time.Second):
		t.Fatal("the engine did not start serving")
	}
	return &fakeBench{eng: eng, st: st, m: m, cfg: cfg}
}

func waitUntil(t *testing.T, limit time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(limit)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not within %s", what, limit)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

func (b *fakeBench) waitEnd(t *testing.T) (store.State, string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	st, why := b.eng.Wait(ctx)
	if st == "" {
		t.Fatalf("run still going: %+v", b.eng.Status())
	}
	return st, why
}

// A whole plan on fake instruments: every point captured once, each error
// the device's own, the source vented at the end.
func TestEngineRunsAPlan(t *testing.T) {
	t.Parallel()
	b := newFakeBench(t, nil, nil, nil)
	id, err := b.eng.Start("plan")
	if err != nil {
		t.Fatal(err)
	}
	if st, why := b.waitEnd(t); st != store.StateFinished {
		t.Fatalf("run ended %s: %s", st, why)
	}
	pts, err := b.st.Points(id)
	if err != nil {
		t.Fatal(err)
	}
	if want := procedure.CaptureCount(procedure.Plan(b.cfg.Procedure, 0)); len(pts) != want {
		t.Fatalf("%d points, want %d", len(pts), want)
	}
	for _, p := range pts {
		if e := p.DUT.Mean - p.Reference.Mean; math.Abs(e-devOffset) > 20 { // see TestEngineSeveralDevices
			t.Errorf("%s: error %.1f Pa, the device's own is %.1f Pa", procedure.PointKey(p), e, devOffset)
		}
	}
	if b.m.vents.Load() == 0 {
		t.Error("the source was not vented at the end")
	}
	if st := b.eng.Status(); st.PointsCommitted < uint64(len(pts)) || st.Last == nil || st.Last.State != string(store.StateFinished) {
		t.Errorf("status after the run: %+v", st)
	}
}

// putFails makes sample writes fail while on.
type putFails struct {
	acquire.Store
	on atomic.Bool
}

func (p *putFails) Put(run store.RunID, instrument string, smp store.Sample) error {
	if p.on.Load() {
		return errors.New("no space left on device (injected)")
	}
	return p.Store.Put(run, instrument, smp)
}

// A store that cannot take samples pauses the run with the reason and
// vents; a resume is refused until it writes again, then the run finishes
// and no point lacks its samples.
func TestEngineStoreFaultPausesTheRun(t *testing.T) {
	t.Parallel()
	fake := &putFails{}
	b := newFakeBench(t, nil, nil, func(st *store.Store) acquire.Store { fake.Store = st; return fake })
	if _, err := b.eng.Start("store fault"); err != nil {
		t.Fatal(err)
	}
	waitUntil(t, 10*time.Second, "first point", func() bool { return b.eng.Status().Points > 0 })
	vents := b.m.vents.Load()
	fake.on.Store(true)
	waitUntil(t, 10*time.Second, "paused", func() bool { return b.eng.Status().State == string(store.StatePaused) })
	st := b.eng.Status()
	if !strings.Contains(st.Reason, "store cannot write") || st.StoreFault == "" {
		t.Fatalf("paused for %q (store fault %q)", st.Reason, st.StoreFault)
	}
	waitUntil(t, 5*time.Second, "vented", func() bool { return b.m.vents.Load() > vents })
	if err := b.eng.Resume(); err == nil {
		t.Fatal("resumed while the store still fails")
	}
	fake.on.Store(false)
	waitUntil(t, 10*time.Second, "store writes again", func() bool { return b.eng.Healthy() == nil })
	if err := b.eng.Resume(); err != nil {
		t.Fatal(err)
	}
	if st, why := b.waitEnd(t); st != store.StateFinished {
		t.Fatalf("run ended %s: %s", st, why)
	}
}

// Dial entries: refused with the reason when no step waits; an entry far
// from the target needs confirming; a run read by an operator completes.
func TestEngineDialEntries(t *testing.T) {
	t.Parallel()
	dial, err := manual.New("dut", "bar")
	if err != nil {
		t.Fatal(err)
	}
	b := newFakeBench(t, func(c *config.Config) { c.Device.Kind = "dial"; c.Device.ResolutionPa = 0.01e5 }, dial, nil)
	if err := b.eng.Enter(acquire.Entry{Value: 1, Unit: "bar"}); !errors.Is(err, acquire.ErrNoStepWaiting) {
		t.Fatalf("entry with no run: %v", err)
	}
	if _, err := b.eng.Start("dial"); err != nil {
		t.Fatal(err)
	}
	checked := false
	done := make(chan struct{})
	go func() { b.eng.Wait(context.Background()); close(done) }()
	for {
		select {
		case <-done:
			if st := b.eng.Status(); st.Last == nil || st.Last.State != string(store.StateFinished) {
				t.Fatalf("run ended: %+v", st.Last)
			}
			if !checked {
				t.Error("no implausible entry was tried")
			}
			return
		case <-time.After(20 * time.Millisecond):
		}
		var want string
		var target float64
		for _, in := range b.eng.Status().Instruments {
			if in.Name == "dut" {
				want, target = in.Waiting, in.WaitingForPa
			}
		}
		if want == "" {
			continue
		}
		if !checked {
			var imp *acquire.ImplausibleError
			if err := b.eng.Enter(acquire.Entry{Value: target/1e5 + 5, Unit: "bar"}); !errors.As(err, &imp) {
				t.Fatalf("an entry 5 bar off the target: %v, want a request to confirm", err)
			}
			checked = true
		}
		reading := math.Round((b.m.pressure()+devOffset)/0.01e5) * 0.01 // the operator reads to the division
		if err := b.eng.Enter(acquire.Entry{Value: reading, Unit: "bar"}); err != nil && !errors.Is(err, acquire.ErrNoStepWaiting) {
			t.Fatal(err)
		}
	}
}

// fallible is a fake device whose link can be cut.
type fallible struct {
	fakeGauge
	cut *atomic.Bool
}

func (f fallible) Read(ctx context.Context) (drivers.Reading, error) {
	if f.cut.Load() {
		return drivers.Reading{}, drivers.Fail("d4", drivers.KindLinkDown, errors.New("cable pulled (injected)"))
	}
	return f.fakeGauge.Read(ctx)
}

// Four devices on one manifold with different errors: each gets its own
// point at every step, with its own error; one whose link is cut mid-run
// is marked missed from then on and the others complete.
func TestEngineSeveralDevices(t *testing.T) {
	t.Parallel()
	offsets := []float64{0.002e5, -0.003e5, 0.006e5, 0.001e5}
	cut := &atomic.Bool{}
	b := newFakeBenchOf(t, nil, nil, func(m *fakeModel) []acquire.Instrument {
		var out []acquire.Instrument
		for i, off := range offsets {
			name := fmt.Sprintf("d%d", i+1)
			var g drivers.Gauge = fakeGauge{m: m, offset: off}
			if i == 3 {
				g = fallible{fakeGauge{m: m, offset: off}, cut}
			}
			out = append(out, acquire.Instrument{Name: name, Gauge: g, Poll: 100 * time.Millisecond, ResolutionPa: 100})
		}
		return out
	})
	id, err := b.eng.Start("four devices")
	if err != nil {
		t.Fatal(err)
	}
	waitUntil(t, 20*time.Second, "a few steps", func() bool { return b.eng.Status().Step >= 3 })
	cut.Store(true)
	if st, why := b.waitEnd(t); st != store.StateFinished {
		t.Fatalf("run ended %s: %s", st, why)
	}
	pts, err := b.st.Points(id)
	if err != nil {
		t.Fatal(err)
	}
	steps := procedure.CaptureCount(procedure.Plan(b.cfg.Procedure, 0))
	per := map[string]int{}
	for _, p := range pts {
		per[p.Device]++
		i := int(p.Device[1] - '1')
		if e := p.DUT.Mean - p.Reference.Mean; math.Abs(e-offsets[i]) > 20 { // the windows of two instruments are not the same instants while the tail of a step still moves
			t.Errorf("%s %s: error %.1f Pa, its own is %.1f Pa", p.Device, procedure.PointKey(p), e, offsets[i])
		}
	}
	for _, d := range []string{"d1", "d2", "d3"} {
		if per[d] != steps {
			t.Errorf("%s: %d points, want %d", d, per[d], steps)
		}
	}
	if per["d4"] == 0 || per["d4"] >= steps {
		t.Errorf("d4: %d points, want some before the cut and none after", per["d4"])
	}
	missed := 0
	evs, _ := b.st.Events(0, 10000)
	for _, ev := range evs {
		if ev.Type == "missed" {
			if ev.Instrument != "d4" {
				t.Errorf("missed event for %q: %s", ev.Instrument, ev.Message)
			}
			missed++
		}
	}
	if missed != steps-per["d4"] {
		t.Errorf("%d missed events for d4, want %d", missed, steps-per["d4"])
	}
}
