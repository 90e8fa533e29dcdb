package drivers

import (
	"context"
	"errors"
	"math"
	"slices"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"plateau/config"
)

// Requests from many goroutines never overlap on the bus, and a pause
// separates consecutive requests.
func TestBusSerialisesAndPauses(t *testing.T) {
	const pause = 5 * time.Millisecond
	b := NewBus(pause)
	defer b.Close()
	var inside atomic.Int32
	var mu sync.Mutex
	var ends, starts []time.Time
	var wg sync.WaitGroup
	for range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			err := b.Do(context.Background(), func() error {
				if inside.Add(1) != 1 {
					t.Error("two requests on the bus at once")
				}
				mu.Lock()
				starts = append(starts, time.Now())
				mu.Unlock()
				time.Sleep(time.Millisecond)
				mu.Lock()
				ends = append(ends, time.Now())
				mu.Unlock()
				inside.Add(-1)
				return nil
			})
			if err != nil {
				t.Error(err)
			}
		}()
	}
	wg.Wait()
	for i := 1; i < len(starts); i++ {
		if gap := starts[i].Sub(ends[i-1]); gap < pause {
			t.Errorf("gap %d = %s, want ≥ %s", i, gap, pause)
		}
	}
}

func TestBusContextAndClose(t *testing.T) {
	b := NewBus(0)
	release := make(chan struct{})
	go b.Do(context.Background(), func() error { <-release; return nil })
	time.Sleep(5 * time.Millisecond)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Millisecond)
	defer cancel()
	ran := false
	if err := b.Do(ctx, func() error { ran = true; return nil }); !errors.Is(err, context.DeadlineExceeded) {
		t.Errorf("queued request past its deadline: %v", err)
	}
	close(release)
	b.Close()
	if ran {
		t.Error("a request that gave up still ran")
	}
	if err := b.Do(context.Background(), func() error { return nil }); !errors.Is(err, ErrBusClosed) {
		t.Errorf("after Close: %v", err)
	}
}

type closer struct{ closed *atomic.Int32 }

func (c closer) Close() error { c.closed.Add(1); return nil }

func TestSharedOnePerKey(t *testing.T) {
	var s Shared[closer]
	var made, closed atomic.Int32
	mk := func() (closer, error) { made.Add(1); return closer{&closed}, nil }
	_, r1, _ := s.Acquire("rtu:///dev/ttyUSB0", mk)
	_, r2, _ := s.Acquire("rtu:///dev/ttyUSB0", mk)
	_, r3, _ := s.Acquire("tcp://10.0.0.5:502", mk)
	if made.Load() != 2 || s.Users("rtu:///dev/ttyUSB0") != 2 {
		t.Fatalf("made %d, users %d", made.Load(), s.Users("rtu:///dev/ttyUSB0"))
	}
	r1()
	r1() // a second release is harmless
	if closed.Load() != 0 {
		t.Fatal("closed while still in use")
	}
	r2()
	r3()
	if closed.Load() != 2 || s.Users("rtu:///dev/ttyUSB0") != 0 {
		t.Fatalf("closed %d", closed.Load())
	}
	if _, _, err := s.Acquire("x", func() (closer, error) { return closer{}, errors.New("no port") }); err == nil {
		t.Error("make error lost")
	}
}

type nopGauge struct{}

func (nopGauge) Read(context.Context) (Reading, error) { return Reading{}, nil }
func (nopGauge) Close() error                          { return nil }

func TestRegistry(t *testing.T) {
	Register("test-only", Opener{Gauge: func(config.Instrument, OpenEnv) (Gauge, error) { return nopGauge{}, nil }})
	defer func() {
		regMu.Lock()
		delete(registry, "test-only")
		regMu.Unlock()
	}()
	in := config.Instrument{Name: "x", Link: config.Link{Kind: "test-only"}}
	if _, err := OpenGauge(in, OpenEnv{}); err != nil {
		t.Error(err)
	}
	if _, err := OpenSource(in, OpenEnv{}); err == nil {
		t.Error("source opened through a gauge-only kind")
	}
	in.Link.Kind = "carrier-pigeon"
	if _, err := OpenGauge(in, OpenEnv{}); err == nil {
		t.Error("unknown kind opened")
	}
	defer func() {
		if recover() == nil {
			t.Error("duplicate registration did not panic")
		}
	}()
	Register("test-only", Opener{Gauge: func(config.Instrument, OpenEnv) (Gauge, error) { return nopGauge{}, nil }})
}

// Work whose context has ended never starts: not when it ended before the
// call, not while waiting for the line, not during the pause after the
// previous request.
func TestBusNeverStartsEndedWork(t *testing.T) {
	cancelled, cancel := context.WithCancel(context.Background())
	cancel()
	cases := []struct {
		name  string
		pause time.Duration
		busy  time.Duration // how long an earlier request holds the line
		ctx   func() (context.Context, context.CancelFunc)
		want  error
	}{
		{"cancelled before the call", 0, 0, func() (context.Context, context.CancelFunc) { return cancelled, func() {} }, context.Canceled},
		{"ends while the line is busy", 0, 50 * time.Millisecond,
			func() (context.Context, context.CancelFunc) {
				return context.WithTimeout(context.Background(), 10*time.Millisecond)
			}, context.DeadlineExceeded},
		{"ends during the pause", 200 * time.Millisecond, time.Millisecond,
			func() (context.Context, context.CancelFunc) {
				return context.WithTimeout(context.Background(), 30*time.Millisecond)
			}, context.DeadlineExceeded},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b := NewBus(c.pause)
			defer b.Close()
			if c.busy > 0 {
				held := make(chan struct{})
				go b.Do(context.Background(), func() error { close(held); time.Sleep(c.busy); return nil })
				<-held
			}
			ctx, cancel := c.ctx()
			defer cancel()
			var ran atomic.Int32
			if err := b.Do(ctx, func() error { ran.Add(1); return nil }); !errors.Is(err, c.want) {
				t.Errorf("err = %v, want %v", err, c.want)
			}
			if ran.Load() != 0 {
				t.Error("ended work ran")
			}
			// The line is free again for live work.
			if err := b.Do(context.Background(), func() error { ran.Add(1); return nil }); err != nil || ran.Load() != 1 {
				t.Errorf("live work after: %v, ran %d", err, ran.Load())
			}
		})
	}
}

func TestRateMeter(t *testing.T) {
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	cases := []struct {
		name  string
		marks []time.Duration
		want  float64
	}{
		{"none", nil, 0},
		{"one", []time.Duration{0}, 0},
		{"4 Hz", []time.Duration{0, 250 * time.Millisecond, 500 * time.Millisecond, 750 * time.Millisecond}, 4},
		{"same instant", []time.Duration{time.Second, time.Second}, 0},
	}
	for _, c := range cases {
		var m RateMeter
		for _, d := range c.marks {
			m.Mark(t0.Add(d))
		}
		r := m.Rate()
		if math.Abs(r.PerSecond-c.want) > 1e-9 || r.Reads != uint64(len(c.marks)) {
			t.Errorf("%s: %+v, want %g/s", c.name, r, c.want)
		}
	}
	// The rate follows the recent reads: 100 reads at 10 Hz, then 40 at 2 Hz.
	var m RateMeter
	at := t0
	for range 100 {
		m.Mark(at)
		at = at.Add(100 * time.Millisecond)
	}
	for range 40 {
		at = at.Add(500 * time.Millisecond)
		m.Mark(at)
	}
	if r := m.Rate(); math.Abs(r.PerSecond-2) > 1e-9 || !r.Last.Equal(at) || r.Reads != 140 {
		t.Errorf("after a slow-down: %+v, want 2/s", r)
	}
}

// Waiting requests get the line in the order they asked, except that an
// urgent one (a vent) goes ahead of every ordinary one still waiting.
func TestBusOrderAndUrgent(t *testing.T) {
	b := NewBus(0)
	defer b.Close()
	held := make(chan struct{})
	release := make(chan struct{})
	go b.Do(context.Background(), func() error { close(held); <-release; return nil })
	<-held

	var mu sync.Mutex
	var order []string
	queue := func(name string, urgent bool, wg *sync.WaitGroup) {
		defer wg.Done()
		ctx := context.Background()
		acquire := b.Acquire
		if urgent {
			acquire = b.AcquireUrgent
		}
		if err := acquire(ctx); err != nil {
			t.Error(err)
			return
		}
		mu.Lock()
		order = append(order, name)
		mu.Unlock()
		b.Release()
	}
	var wg sync.WaitGroup
	for i, name := range []string{"read 1", "setpoint", "read 2", "vent", "read 3"} {
		wg.Add(1)
		go queue(name, name == "vent", &wg)
		// Each asks after the one before (the queue is what is tested, not goroutine start-up).
		waitQueued(t, b, i+1)
	}
	close(release)
	wg.Wait()
	want := []string{"vent", "read 1", "setpoint", "read 2", "read 3"}
	if !slices.Equal(order, want) {
		t.Errorf("order %v, want %v", order, want)
	}
}

// waitQueued waits until n requests wait for the line.
func waitQueued(t *testing.T, b *Bus, n int) {
	t.Helper()
	for deadline := time.Now().Add(5 * time.Second); time.Now().Before(deadline); time.Sleep(time.Millisecond) {
		b.mu.Lock()
		k := len(b.urgent) + len(b.normal)
		b.mu.Unlock()
		if k >= n {
			return
		}
	}
	t.Fatalf("%d requests did not queue", n)
}

// Close fails every waiting request and waits for the one on the wire.
func TestBusCloseFailsWaiters(t *testing.T) {
	b := NewBus(0)
	held := make(chan struct{})
	var finished atomic.Bool
	go b.Do(context.Background(), func() error { close(held); time.Sleep(30 * time.Millisecond); finished.Store(true); return nil })
	<-held
	errs := make(chan error, 3)
	for range 3 {
		go func() { errs <- b.Do(context.Background(), func() error { t.Error("ran after Close"); return nil }) }()
	}
	waitQueued(t, b, 3)
	b.Close()
	if !finished.Load() {
		t.Error("Close returned before the running request finished")
	}
	for range 3 {
		if err := <-errs; !errors.Is(err, ErrBusClosed) {
			t.Errorf("waiter: %v, want ErrBusClosed", err)
		}
	}
}

// Many requests, urgent and ordinary, many of them cancelled while they
// wait: never two on the line at once, every call returns, and the line is
// free at the end (a hand-off to a waiter that just gave up is not lost).
func TestBusStress(t *testing.T) {
	b := NewBus(100 * time.Microsecond)
	var inside, ran, gaveUp atomic.Int32
	var wg sync.WaitGroup
	for g := range 40 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range 100 {
				ctx, cancel := context.WithTimeout(context.Background(), time.Duration((g*7+i*13)%400)*time.Microsecond)
				acquire := b.Acquire
				if (g+i)%17 == 0 {
					acquire = b.AcquireUrgent
				}
				if err := acquire(ctx); err != nil {
					if !errors.Is(err, context.DeadlineExceeded) {
						t.Errorf("acquire: %v", err)
					}
					gaveUp.Add(1)
					cancel()
					continue
				}
				if inside.Add(1) != 1 {
					t.Error("two requests on the line at once")
				}
				time.Sleep(20 * time.Microsecond)
				inside.Add(-1)
				ran.Add(1)
				b.Release()
				cancel()
			}
		}()
	}
	wg.Wait()
	if ran.Load()+gaveUp.Load() != 4000 || ran.Load() == 0 || gaveUp.Load() == 0 {
		t.Errorf("ran %d, gave up %d, of 4000", ran.Load(), gaveUp.Load())
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Second)
	defer cancel()
	if err := b.Do(ctx, func() error { return nil }); err != nil {
		t.Fatalf("the line was not free at the end: %v", err)
	}
	closed := make(chan struct{})
	go func() { b.Close(); close(closed) }()
	select {
	case <-closed:
	case <-time.After(5 * time.Second):
		t.Fatal("Close hangs: the line is still held")
	}
}
