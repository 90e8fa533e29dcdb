package manual

import (
	"context"
	"errors"
	"math"
	"sync"
	"testing"
	"time"

	"plateau/drivers"
)

func TestEntryLifecycle(t *testing.T) {
	g, err := New("dial", "bar")
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if _, err := g.Read(ctx); !errors.Is(err, drivers.ErrTimeout) || !errors.Is(err, ErrNoEntry) {
		t.Fatalf("read before entry: %v", err)
	}
	at := time.Date(2026, 3, 1, 9, 0, 0, 0, time.UTC)
	if err := g.Enter(2.4, "bar", at); err != nil {
		t.Fatal(err)
	}
	if err := g.Enter(2.5, "bar", at.Add(time.Second)); err != nil { // correction
		t.Fatal(err)
	}
	r, err := g.Read(ctx)
	if err != nil || r.Raw != 2.5 || r.Pa != 2.5e5 || !r.Time.Equal(at.Add(time.Second)) || r.RawUnit != "bar" {
		t.Fatalf("read: %+v %v", r, err)
	}
	if _, err := g.Read(ctx); !errors.Is(err, ErrNoEntry) {
		t.Fatalf("an entry was read twice: %v", err)
	}
	// An entry in psi on a bar dial: 1 psi = 6894.757293168361 Pa (NIST SP 811 B.8).
	if err := g.Enter(14.5, "psi", at); err != nil {
		t.Fatal(err)
	}
	r, _ = g.Read(ctx)
	if math.Abs(r.Pa-14.5*6894.757293168361) > 1e-6 || math.Abs(r.Raw-r.Pa/1e5) > 1e-12 {
		t.Errorf("psi entry: %+v", r)
	}
}

func TestEntryErrors(t *testing.T) {
	if _, err := New("dial", "furlong"); err == nil {
		t.Error("unknown unit accepted")
	}
	g, _ := New("dial", "kPa")
	now := time.Now()
	for _, c := range []struct {
		v    float64
		unit string
		at   time.Time
	}{{math.NaN(), "kPa", now}, {math.Inf(1), "kPa", now}, {1, "stone", now}, {1, "kPa", time.Time{}},
		{1e305, "MPa", now}, // finite as typed, infinite in pascal
	} {
		if err := g.Enter(c.v, c.unit, c.at); err == nil {
			t.Errorf("Enter(%v, %q, %v) accepted", c.v, c.unit, c.at)
		}
	}
	g.Close()
	if err := g.Enter(1, "kPa", now); err == nil {
		t.Error("entry after Close accepted")
	}
}

func TestWaitWakesOnEntry(t *testing.T) {
	g, _ := New("dial", "bar")
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		if err := g.Wait(ctx); err != nil {
			t.Error(err)
			return
		}
		if r, err := g.Read(ctx); err != nil || r.Raw != 1 {
			t.Errorf("after wait: %v %v", r, err)
		}
	}()
	time.Sleep(10 * time.Millisecond)
	if err := g.Enter(1, "bar", time.Now()); err != nil {
		t.Fatal(err)
	}
	wg.Wait()
	short, c2 := context.WithTimeout(context.Background(), 10*time.Millisecond)
	defer c2()
	if err := g.Wait(short); !errors.Is(err, context.DeadlineExceeded) {
		t.Errorf("wait without entry: %v", err)
	}
}
