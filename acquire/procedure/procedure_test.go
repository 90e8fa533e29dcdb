package procedure

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"strings"
	"sync"
	"testing"
	"testing/synctest"
	"time"

	"plateau/acquire/poll"
	"plateau/acquire/settle"
	"plateau/analysis"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// A fake bench for procedure tests: a first-order pressure source, a
// reference that reads the pressure, a device with a known error, all run
// by real pollers and settle detectors on the virtual time of a synctest
// bubble, so a whole procedure takes milliseconds. The numbers are a
// scenario of our own, not a real instrument.
type fakeRig struct {
	mu        sync.Mutex
	from, to  float64   // pressure moves from → to
	since     time.Time // since this time
	tau       time.Duration
	overshoot float64 // fraction of each step the pressure passes the setpoint by, then returns
	sets      []float64
	vents     int
	failNext  int // setpoints that fail before one succeeds
}

func (f *fakeRig) pressure(now time.Time) float64 {
	f.mu.Lock()
	defer f.mu.Unlock()
	x := now.Sub(f.since).Seconds() / f.tau.Seconds()
	step := f.to - f.from
	// A damped rise that overshoots by overshoot×step around x ≈ 2.
	shape := 1 - math.Exp(-x) + f.overshoot*x*x*math.Exp(2-x)/4
	return f.from + step*shape
}

func (f *fakeRig) move(to float64) {
	now := time.Now()
	p := f.pressure(now)
	f.mu.Lock()
	f.from, f.to, f.since = p, to, now
	f.mu.Unlock()
}

func (f *fakeRig) SetPoint(ctx context.Context, pa float64) error {
	f.mu.Lock()
	if f.failNext > 0 {
		f.failNext--
		f.mu.Unlock()
		return errors.New("no reply (injected)")
	}
	f.sets = append(f.sets, pa)
	f.mu.Unlock()
	f.move(pa)
	return nil
}

func (f *fakeRig) Vent(ctx context.Context) error {
	f.mu.Lock()
	f.vents++
	f.mu.Unlock()
	f.move(0)
	return nil
}

// gauge reads the rig through fn.
type gauge struct {
	fn func(now time.Time) (float64, error)
}

func (g gauge) Read(ctx context.Context) (drivers.Reading, error) {
	now := time.Now()
	v, err := g.fn(now)
	if err != nil {
		return drivers.Reading{}, err
	}
	return drivers.Reading{Time: now, Pa: v}, nil
}
func (gauge) Close() error { return nil }

// memRecord keeps what the procedure records.
type memRecord struct {
	mu     sync.Mutex
	points []analysis.Point
	events []string
	cursor int
	phases []string // every progress report: "step target phase"
}

func (m *memRecord) Captured() ([]analysis.Point, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	return append([]analysis.Point(nil), m.points...), nil
}
func (m *memRecord) Point(p analysis.Point) error {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.points = append(m.points, p)
	return nil
}
func (m *memRecord) Cursor(step int) error { m.cursor = step; return nil }
func (m *memRecord) Event(level slog.Level, typ, instrument, msg string, data any) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.events = append(m.events, typ+": "+msg)
}
func (m *memRecord) Progress(step, points int, target float64, phase string) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.phases = append(m.phases, fmt.Sprintf("%d %.0f %s", step, target, phase))
}

func (m *memRecord) count(typ string) int {
	m.mu.Lock()
	defer m.mu.Unlock()
	n := 0
	for _, e := range m.events {
		if strings.HasPrefix(e, typ+":") {
			n++
		}
	}
	return n
}

// openGate is a pause gate a test can close and open.
type openGate struct {
	mu     sync.Mutex
	paused bool
	ch     chan struct{}
}

func (g *openGate) Paused() bool { g.mu.Lock(); defer g.mu.Unlock(); return g.paused }
func (g *openGate) Wait(ctx context.Context) error {
	for {
		g.mu.Lock()
		p, ch := g.paused, g.ch
		g.mu.Unlock()
		if !p {
			return ctx.Err()
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-ch:
		}
	}
}
func (g *openGate) set(p bool) {
	g.mu.Lock()
	defer g.mu.Unlock()
	if p && !g.paused {
		g.ch = make(chan struct{})
	}
	if !p && g.paused {
		close(g.ch)
	}
	g.paused = p
}

const bar = 1e5

type fixture struct {
	rig  *fakeRig
	rec  *memRecord
	gate *openGate
	proc *Procedure
	// devErr is the device's error of indication at a pressure and direction.
	devErr func(p float64, rising bool) float64
}

// newFixture builds a 0–16 bar bench with points 0, 8, 16 bar, one cycle.
func newFixture(t *testing.T, ctx context.Context, devNoise float64, edit func(*fixture)) *fixture {
	f := &fixture{rig: &fakeRig{tau: 2 * time.Second, since: time.Now()}, rec: &memRecord{}, gate: &openGate{},
		devErr: func(p float64, rising bool) float64 { return 0.002*p + 500 }}
	if edit != nil {
		edit(f)
	}
	rules := settle.Rules{Window: 5 * time.Second, MinSamples: 10, MaxDrift: 0.002 * bar / 60, MaxSpread: 0.001 * bar, Band: 0.16 * bar}
	mk := func(name string, fn func(time.Time) (float64, error), r settle.Rules) *poll.Poller {
		p, err := poll.New(poll.Options{Name: name, Gauge: gauge{fn}, Interval: 100 * time.Millisecond, Rules: r, Clock: clock.Wall{}})
		if err != nil {
			t.Fatal(err)
		}
		go p.Run(ctx)
		return p
	}
	prev := 0.0
	ref := mk("ref", func(now time.Time) (float64, error) { return f.rig.pressure(now), nil }, rules)
	devRules := rules
	devRules.Band = 0
	devRules.MaxSpread = math.Max(devRules.MaxSpread, devNoise*2)
	n := 0
	dev := mk("dev", func(now time.Time) (float64, error) {
		p := f.rig.pressure(now)
		rising := p >= prev
		prev = p
		n++
		jitter := devNoise * float64(n%7-3)
		return p + f.devErr(p, rising) + jitter, nil
	}, devRules)
	f.proc = &Procedure{
		Steps: Plan(planOf([]float64{0, 8 * bar, 16 * bar}, 1), 0),
		Settings: Settings{LowerPa: 0, UpperPa: 16 * bar, ResolutionPa: 0.001 * bar, Hold: 2 * time.Second, TopHold: 5 * time.Second,
			ExerciseHold: 5 * time.Second, Timeout: 60 * time.Second, OnTimeout: Skip, Compare: SetByReference},
		Source: f.rig, Ref: ref, Devices: []Device{{Inst: dev}}, Rec: f.rec, Gate: f.gate, Clock: clock.Wall{}, Tick: 100 * time.Millisecond,
	}
	return f
}

// Every planned point is captured once, in plan order, and each captured
// error of indication is the device's own within its noise.
func TestProcedureCapturesEveryPoint(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		ctx, cancel := context.WithCancel(t.Context())
		defer cancel()
		f := newFixture(t, ctx, 0, nil)
		start := time.Now()
		if err := f.proc.Run(ctx, 0); err != nil {
			t.Fatal(err)
		}
		if want := CaptureCount(f.proc.Steps); len(f.rec.points) != want {
			t.Fatalf("%d points, want %d: %v", len(f.rec.points), want, f.rec.events)
		}
		for i, p := range f.rec.points {
			s := nthCapture(f.proc.Steps, i)
			if PointKey(p) != s.Key() {
				t.Errorf("point %d is %s, want %s", i, PointKey(p), s.Key())
			}
			got := p.DUT.Mean - p.Reference.Mean
			want := f.devErr(p.Reference.Mean, true)
			if math.Abs(got-want) > 50 {
				t.Errorf("%s: error %.0f Pa, device's own %.0f Pa", s, got, want)
			}
		}
		if f.rec.cursor != len(f.proc.Steps) {
			t.Errorf("cursor %d, want %d", f.rec.cursor, len(f.proc.Steps))
		}
		// The exercise step reports its second half's own target, so that
		// status (and a person at a hand pump) sees "back to zero".
		if got := strings.Join(f.rec.phases[:3], "; "); !strings.Contains(got, "0 1600000 exercise") ||
			!strings.Contains(got, "0 0 exercise 1 to full scale, back to 0") {
			t.Errorf("progress of the exercise step: %s", got)
		}
		t.Logf("a whole cycle in %s of virtual time", time.Since(start))
	})
}

func nthCapture(steps []Step, n int) Step {
	for _, s := range steps {
		if s.Kind == StepCapture {
			if n == 0 {
				return s
			}
			n--
		}
	}
	return Step{}
}

func planOf(points []float64, cycles int) (p config.Procedure) {
	p.PointsPa, p.Cycles, p.Zero, p.Exercise = points, cycles, true, 1
	return p
}

// A controller that overshoots carries the pressure past an ascending
// point: the procedure notices from the reference window and approaches
// again from below, so every ascending point is taken on the rising branch.
func TestProcedureApproachesAgainAfterAnOvershoot(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		ctx, cancel := context.WithCancel(t.Context())
		defer cancel()
		f := newFixture(t, ctx, 0, func(f *fixture) { f.rig.overshoot = 0.4; f.rig.tau = 1500 * time.Millisecond })
		if err := f.proc.Run(ctx, 0); err != nil {
			t.Fatal(err)
		}
		if f.rec.count("approach") == 0 {
			t.Error("no overshoot noticed")
		}
		if len(f.rec.points) != CaptureCount(f.proc.Steps) {
			t.Errorf("%d points: %v", len(f.rec.points), f.rec.events)
		}
	})
}

// A device that never settles: with skip its points are missed and the
// run goes on to the end; with stop the run ends at the first one.
func TestProcedurePointTimeout(t *testing.T) {
	for _, mode := range []OnTimeout{Skip, Stop} {
		t.Run(string(mode), func(t *testing.T) {
			synctest.Test(t, func(t *testing.T) {
				ctx, cancel := context.WithCancel(t.Context())
				defer cancel()
				// The device's error swings too fast to settle; set before
				// the pollers start reading.
				f := newFixture(t, ctx, 0, func(f *fixture) {
					f.devErr = func(p float64, _ bool) float64 { return 0.5 * bar * math.Sin(float64(time.Now().UnixMilli())/300) }
				})
				f.proc.Settings.OnTimeout = mode
				f.proc.Settings.Timeout = 20 * time.Second
				err := f.proc.Run(ctx, 0)
				switch mode {
				case Skip:
					if err != nil || len(f.rec.points) != 0 || f.rec.count("missed") != CaptureCount(f.proc.Steps) {
						t.Errorf("err %v, %d points, %d missed", err, len(f.rec.points), f.rec.count("missed"))
					}
				case Stop:
					if err == nil || !strings.Contains(err.Error(), "not captured") || f.rec.count("missed") != 1 {
						t.Errorf("err %v, %d missed", err, f.rec.count("missed"))
					}
				}
			})
		})
	}
}

// A pause in the middle of a step holds the procedure; after the resume the
// step is done again from its approach, and no point is lost or doubled.
func TestProcedurePauseRedoesTheStep(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		ctx, cancel := context.WithCancel(t.Context())
		defer cancel()
		f := newFixture(t, ctx, 0, nil)
		done := make(chan error, 1)
		go func() { done <- f.proc.Run(ctx, 0) }()
		time.Sleep(40 * time.Second) // into the first cycle
		f.gate.set(true)
		sets := len(f.rig.sets)
		time.Sleep(10 * time.Minute)
		if len(f.rig.sets) != sets {
			t.Errorf("%d setpoints sent while paused", len(f.rig.sets)-sets)
		}
		f.gate.set(false)
		if err := <-done; err != nil {
			t.Fatal(err)
		}
		keys := map[string]bool{}
		for _, p := range f.rec.points {
			if keys[PointKey(p)] {
				t.Errorf("point %s twice", PointKey(p))
			}
			keys[PointKey(p)] = true
		}
		if len(keys) != CaptureCount(f.proc.Steps) {
			t.Errorf("%d points", len(keys))
		}
	})
}

// A setpoint lost once is sent again; the point is still captured.
func TestProcedureSendsALostSetpointAgain(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		ctx, cancel := context.WithCancel(t.Context())
		defer cancel()
		f := newFixture(t, ctx, 0, func(f *fixture) { f.rig.failNext = 2 })
		if err := f.proc.Run(ctx, 0); err != nil {
			t.Fatal(err)
		}
		if f.rec.count("source") == 0 || len(f.rec.points) != CaptureCount(f.proc.Steps) {
			t.Errorf("%d source events, %d points", f.rec.count("source"), len(f.rec.points))
		}
	})
}

// A resumed run skips the points it has and goes on from its cursor.
func TestProcedureResumesFromItsCursor(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		ctx, cancel := context.WithCancel(t.Context())
		defer cancel()
		f := newFixture(t, ctx, 0, nil)
		first := nthCapture(f.proc.Steps, 0)
		f.rec.points = []analysis.Point{{Cycle: first.Cycle, Direction: first.Direction, Kind: first.PointKind, Index: first.Index}}
		if err := f.proc.Run(ctx, 1); err != nil {
			t.Fatal(err)
		}
		if len(f.rec.points) != CaptureCount(f.proc.Steps) {
			t.Errorf("%d points, want %d", len(f.rec.points), CaptureCount(f.proc.Steps))
		}
	})
}

// Free run: every plateau held for a window becomes one point, in the
// direction the pressure went.
func TestProcedureFreeRun(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		ctx, cancel := context.WithCancel(t.Context())
		f := newFixture(t, ctx, 0, nil)
		f.proc.Steps = nil
		f.proc.Source = nil
		done := make(chan error, 1)
		go func() { done <- f.proc.Run(ctx, 0) }()
		time.Sleep(2 * time.Minute) // the vented start is the first plateau
		for _, p := range []float64{4, 8, 4} {
			f.rig.move(p * bar) // a person turns the screw press
			time.Sleep(2 * time.Minute)
		}
		cancel()
		if err := <-done; !errors.Is(err, context.Canceled) {
			t.Fatalf("free run ended %v", err)
		}
		dirs := ""
		for _, p := range f.rec.points {
			dirs += fmt.Sprintf("%.0f%s ", p.Reference.Mean/bar, p.Direction)
		}
		if len(f.rec.points) != 4 || f.rec.points[3].Direction != analysis.Descending {
			t.Errorf("points %s, want 0, 4 and 8 rising and 4 falling", dirs)
		}
	})
}
