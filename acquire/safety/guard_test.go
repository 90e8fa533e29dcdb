package safety

import (
	"context"
	"errors"
	"math"
	"sync"
	"testing"
	"time"

	"plateau/drivers"
)

// fakeSource records what reaches it; a setpoint can be made to wait until
// its context ends (a request queued on a busy bus).
type fakeSource struct {
	mu      sync.Mutex
	sets    []float64
	vents   int
	hold    bool
	started chan struct{}
}

func (f *fakeSource) SetPoint(ctx context.Context, pa float64) error {
	if f.hold {
		close(f.started)
		<-ctx.Done()
		return ctx.Err()
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	f.sets = append(f.sets, pa)
	return nil
}

func (f *fakeSource) Vent(context.Context) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.vents++
	return nil
}

func (f *fakeSource) counts() (int, int) {
	f.mu.Lock()
	defer f.mu.Unlock()
	return len(f.sets), f.vents
}

func newGuard(t *testing.T, src *fakeSource, silence time.Duration) (*Guard, chan Trip) {
	t.Helper()
	trips := make(chan Trip, 4)
	g := New(src, Options{Limit: 16.5e5, LimitSet: true, Silence: silence, OnTrip: func(tr Trip) { trips <- tr }})
	ctx, cancel := context.WithCancel(context.Background())
	t.Cleanup(cancel)
	go g.Run(ctx, 10*time.Millisecond)
	return g, trips
}

func waitVent(t *testing.T, src *fakeSource) {
	t.Helper()
	deadline := time.Now().Add(2 * time.Second)
	for {
		if _, v := src.counts(); v > 0 {
			return
		}
		if time.Now().After(deadline) {
			t.Fatal("not vented")
		}
		time.Sleep(time.Millisecond)
	}
}

// Each cause trips the guard: it latches, vents and refuses setpoints until
// a person clears it.
func TestGuardTrips(t *testing.T) {
	cases := []struct {
		name string
		r    drivers.Reading
		err  error
	}{
		{"over the limit", drivers.Reading{Pa: 16.6e5}, nil},
		{"not a number", drivers.Reading{Pa: math.NaN()}, nil},
		{"infinite", drivers.Reading{Pa: math.Inf(1)}, nil},
		{"over-range", drivers.Reading{}, drivers.Fail("ref", drivers.KindOverload, errors.New("OL"))},
		{"loop current high", drivers.Reading{Raw: 21.5}, drivers.Fail("ref", drivers.KindOutOfRange, errors.New("21.5 mA"))},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			src := &fakeSource{}
			g, trips := newGuard(t, src, 0)
			g.opt.LoopHigh = 20.5
			g.Observe(drivers.Reading{Pa: 5e5}, nil)
			if _, ok := g.Tripped(); ok {
				t.Fatal("tripped on a good reading")
			}
			g.Observe(c.r, c.err)
			if _, ok := g.Tripped(); !ok {
				t.Fatal("did not trip")
			}
			waitVent(t, src)
			<-trips
			if err := g.Source().SetPoint(context.Background(), 1e5); !errors.Is(err, ErrTripped) {
				t.Errorf("setpoint after the trip: %v", err)
			}
			g.Clear()
			if err := g.Source().SetPoint(context.Background(), 1e5); err != nil {
				t.Errorf("setpoint after clearing: %v", err)
			}
		})
	}
}

// A setpoint waiting on the bus when the guard trips is cancelled before it
// reaches the controller.
func TestTripCancelsASetpointInFlight(t *testing.T) {
	src := &fakeSource{hold: true, started: make(chan struct{})}
	g, _ := newGuard(t, src, 0)
	done := make(chan error, 1)
	go func() { done <- g.Source().SetPoint(context.Background(), 8e5) }()
	<-src.started
	g.Trip("test")
	select {
	case err := <-done:
		if !errors.Is(err, ErrTripped) {
			t.Errorf("in-flight setpoint: %v", err)
		}
	case <-time.After(2 * time.Second):
		t.Fatal("the in-flight setpoint was not cancelled")
	}
}

// While the source is driven, a reference without a good reading for the
// silence time trips the guard; with the source vented it does not.
func TestSilentReference(t *testing.T) {
	src := &fakeSource{}
	g, trips := newGuard(t, src, 50*time.Millisecond)
	g.Observe(drivers.Reading{Pa: 1e5}, nil)
	time.Sleep(100 * time.Millisecond)
	if _, ok := g.Tripped(); ok {
		t.Fatal("tripped while the source was not driven")
	}
	if err := g.Source().SetPoint(context.Background(), 2e5); !errors.Is(err, ErrTripped) {
		t.Fatalf("a setpoint with a silent reference: %v, want it refused", err)
	}
	<-trips
	g.Clear()
	g.Observe(drivers.Reading{Pa: 1e5}, nil)
	if err := g.Source().SetPoint(context.Background(), 2e5); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(time.Second)
	for {
		if tr, ok := g.Tripped(); ok {
			t.Logf("tripped: %s", tr.Reason)
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("a silent reference while driven did not trip")
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// A setpoint above the limit is refused whatever computed it.
func TestSetpointAboveTheLimitRefused(t *testing.T) {
	src := &fakeSource{}
	g, _ := newGuard(t, src, 0)
	if err := g.Source().SetPoint(context.Background(), 17e5); err == nil {
		t.Fatal("accepted")
	}
	if n, _ := src.counts(); n != 0 {
		t.Fatal("sent")
	}
}
