package poll

import (
	"context"
	"math"
	"testing"
	"time"

	"plateau/acquire/settle"
	"plateau/drivers"
	"plateau/drivers/clock"
)

type nopGauge struct{}

func (nopGauge) Read(context.Context) (drivers.Reading, error) { return drivers.Reading{}, nil }
func (nopGauge) Close() error                                  { return nil }

type sinkFunc func(string, drivers.Reading, error)

func (f sinkFunc) Sample(n string, r drivers.Reading, err error) { f(n, r, err) }

func newTestPoller(t *testing.T, o Options) *Poller {
	t.Helper()
	o.Name, o.Gauge, o.Interval = "ref", nopGauge{}, 100*time.Millisecond
	o.Rules = settle.Rules{Window: time.Second, MinSamples: 5, MaxDrift: 1, MaxSpread: 1}
	o.Clock = clock.NewManual(time.Unix(1e9, 0))
	p, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// The observer sees every reading before the sink, and a value that is not
// a finite number reaches neither as a number.
func TestRecordOrderAndNonFinite(t *testing.T) {
	var order []string
	var seen []error
	p := newTestPoller(t, Options{
		First: func(r drivers.Reading, err error) { order = append(order, "first"); seen = append(seen, err) },
		Sink:  sinkFunc(func(string, drivers.Reading, error) { order = append(order, "sink") }),
	})
	at := time.Unix(1e9, 0)
	for i, v := range []float64{1, math.NaN(), math.Inf(1), 2} {
		r, err := p.Record(drivers.Reading{Time: at.Add(time.Duration(i) * 100 * time.Millisecond), Pa: v}, nil)
		bad := math.IsNaN(v) || math.IsInf(v, 0)
		if bad != (err != nil) || (bad && (r.Pa != 0 || drivers.KindOf(err) != drivers.KindBadReply)) {
			t.Errorf("value %v: reading %v, error %v", v, r.Pa, err)
		}
	}
	want := []string{"first", "sink", "first", "sink", "first", "sink", "first", "sink"}
	if len(order) != len(want) {
		t.Fatalf("order %v", order)
	}
	for i := range want {
		if order[i] != want[i] {
			t.Fatalf("order %v, want %v", order, want)
		}
	}
	if seen[1] == nil || seen[2] == nil {
		t.Error("the observer was given a non-finite value as good")
	}
}

// A reading stamped before the previous one (the clock stepped back) is
// reported, and the settling window starts afresh.
func TestClockSteppingBackRestartsTheWindow(t *testing.T) {
	var back time.Duration
	p := newTestPoller(t, Options{ClockBack: func(_ string, by time.Duration) { back = by }})
	at := time.Unix(1e9, 0)
	for i := 0; i < 20; i++ {
		p.Record(drivers.Reading{Time: at.Add(time.Duration(i) * 100 * time.Millisecond), Pa: 5}, nil)
	}
	if !p.State().Settled {
		t.Fatal("a steady reading did not settle")
	}
	p.Record(drivers.Reading{Time: at.Add(-time.Minute), Pa: 5}, nil)
	if back < time.Minute {
		t.Errorf("step back reported as %s", back)
	}
	if st := p.State(); st.Settled || st.Window.Count > 1 {
		t.Errorf("window after the step: settled %v, %d readings", st.Settled, st.Window.Count)
	}
}

// Repeated warnings are let through once per interval, with a count.
func TestWarnLimit(t *testing.T) {
	var w warnLimit
	now := time.Unix(0, 0)
	if _, ok := w.allow(now); !ok {
		t.Fatal("first warning held back")
	}
	for i := 0; i < 5; i++ {
		if _, ok := w.allow(now.Add(time.Second)); ok {
			t.Fatal("a repeat within the interval was let through")
		}
	}
	n, ok := w.allow(now.Add(warnInterval + time.Second))
	if !ok || n != 5 {
		t.Errorf("after the interval: %v, %d suppressed, want 5", ok, n)
	}
}

// While the hold after a pressure change runs, the detector is empty and
// the poller says it is holding, with the time to go, rather than "no
// samples yet".
func TestWhyDuringTheHold(t *testing.T) {
	p := newTestPoller(t, Options{})
	clk := p.clk.(*clock.Manual)
	p.Restart(clk.Now().Add(5*time.Second), 1e5, true)
	p.Record(drivers.Reading{Time: clk.Now(), Pa: 1e5}, nil)
	if why := p.State().Why; why != "holding after the pressure change, 5.0 s to go" {
		t.Errorf("why %q during the hold", why)
	}
	clk.Advance(6 * time.Second)
	p.Record(drivers.Reading{Time: clk.Now(), Pa: 1e5}, nil)
	if why := p.State().Why; why == "" || why[:7] == "holding" {
		t.Errorf("why %q after the hold: the detector's own reason", why)
	}
}
