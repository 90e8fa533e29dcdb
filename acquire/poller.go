package acquire

import (
	"context"
	"log/slog"
	"sync"
	"time"

	"plateau/acquire/settle"
	"plateau/analysis"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// SampleSink receives every reading, good or failed, for storage.
type SampleSink interface {
	Sample(instrument string, r drivers.Reading, err error)
}

// Poller reads one instrument at its interval and feeds its settle detector.
// Only successful readings enter the detector; failures go to the sink and
// to the failure counter with their reason.
type Poller struct {
	Name     string
	gauge    drivers.Gauge
	interval time.Duration
	clk      clock.Clock
	sink     SampleSink
	log      *slog.Logger
	// onRead is called for every reading, good or failed, before a good one
	// enters the detector (the safety check runs here, on the poller's
	// goroutine).
	onRead func(drivers.Reading, error)

	mu       sync.Mutex
	det      *settle.Detector
	last     drivers.Reading
	lastErr  error
	reads    uint64
	failures map[drivers.Kind]uint64
	beat     time.Time     // wall time of the last completed read attempt
	done     time.Time     // clock time of the last completed read attempt
	cycle    time.Duration // clock time between the last two completed attempts
	since    time.Time     // clock time from which samples count (after a pressure change)
}

func newPoller(name string, g drivers.Gauge, interval time.Duration, rules settle.Rules, clk clock.Clock, sink SampleSink, log *slog.Logger) (*Poller, error) {
	det, err := settle.New(rules)
	if err != nil {
		return nil, err
	}
	return &Poller{Name: name, gauge: g, interval: interval, clk: clk, sink: sink, log: log,
		det: det, failures: map[drivers.Kind]uint64{}}, nil
}

// run polls until ctx ends.
func (p *Poller) run(ctx context.Context) {
	for {
		start := p.clk.Now()
		r, err := p.gauge.Read(ctx)
		if ctx.Err() != nil {
			return
		}
		p.record(r, err)
		wait := p.interval - p.clk.Now().Sub(start)
		if wait < p.interval/10 {
			wait = p.interval / 10 // never spin on a slow instrument
		}
		select {
		case <-ctx.Done():
			return
		case <-p.clk.After(wait):
		}
	}
}

func (p *Poller) record(r drivers.Reading, err error) {
	if r.Time.IsZero() {
		r.Time = p.clk.Now() // a failed read is stored at the time it failed
	}
	if err != nil && drivers.KindOf(err) == 0 {
		// A driver that forgot to classify its error still must not
		// produce a value; count it as a bad reply.
		err = drivers.Fail(p.Name, drivers.KindBadReply, err)
	}
	if p.sink != nil {
		p.sink.Sample(p.Name, r, err)
	}
	if p.onRead != nil {
		p.onRead(r, err)
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.beat = time.Now()
	if now := p.clk.Now(); !p.done.IsZero() {
		p.cycle, p.done = now.Sub(p.done), now
	} else {
		p.done = now
	}
	p.reads++
	if err != nil {
		p.lastErr = err
		p.failures[drivers.KindOf(err)]++
		return
	}
	p.lastErr = nil
	p.last = r
	if r.Time.Before(p.since) {
		return
	}
	if aerr := p.det.Add(r.Time, r.Pa); aerr != nil {
		p.log.Warn("reading not usable for settling", "err", aerr)
	}
}

// restart empties the detector after a pressure change: samples taken
// before from are never part of a settled window.
func (p *Poller) restart(from time.Time, target float64, hasTarget bool) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.det.Reset()
	p.since = from
	if hasTarget {
		p.det.SetTarget(target)
	} else {
		p.det.ClearTarget()
	}
}

// PollerState is a snapshot for status and metrics.
type PollerState struct {
	Name     string            `json:"name"`
	Last     drivers.Reading   `json:"last"`
	LastErr  string            `json:"last_error,omitempty"`
	Reads    uint64            `json:"reads"`
	Failures map[string]uint64 `json:"failures"`
	Settle   settle.Status     `json:"-"`
	Settled  bool              `json:"settled"`
	Why      string            `json:"why,omitempty"`
	Window   analysis.Window   `json:"window"`
	Beat     time.Time         `json:"-"`
	// Every is how often readings arrive: the poll interval, or the time
	// the last read took when the instrument is slower than that.
	Every time.Duration `json:"-"`
	// Polled is false for a dial read once per point: it has no poll loop.
	Polled bool `json:"polled"`
}

func (p *Poller) State() PollerState {
	p.mu.Lock()
	defer p.mu.Unlock()
	st := p.det.Status()
	f := map[string]uint64{}
	for k, n := range p.failures {
		f[k.String()] = n
	}
	s := PollerState{Name: p.Name, Last: p.last, Reads: p.reads, Failures: f, Settle: st,
		Settled: st.Settled, Why: st.Why, Window: st.Window, Beat: p.beat, Every: max(p.interval, p.cycle)}
	if p.lastErr != nil {
		s.LastErr = p.lastErr.Error()
	}
	return s
}
