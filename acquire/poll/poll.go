// Package poll reads one instrument at its interval. Every reading goes
// first to the instrument's observer (the safety guard, for the reference),
// synchronously and before anything else; then to the sample sink, which
// must not wait; then, when good, into the instrument's settle detector.
package poll

import (
	"context"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"time"

	"plateau/acquire/settle"
	"plateau/analysis"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// Sink receives every reading, good or failed, for storage. It must return
// at once: the poll loop never waits on storage.
type Sink interface {
	Sample(instrument string, r drivers.Reading, err error)
}

// Observer sees every reading before the sink and the detector do.
type Observer func(drivers.Reading, error)

// Poller reads one instrument and feeds its settle detector. Only good
// readings enter the detector; failures are counted by reason.
type Poller struct {
	Name     string
	gauge    drivers.Gauge
	interval time.Duration
	clk      clock.Clock
	sink     Sink
	first    Observer
	log      *slog.Logger

	mu        sync.Mutex
	det       *settle.Detector
	last      drivers.Reading
	lastErr   error
	reads     uint64
	failures  map[drivers.Kind]uint64
	beat      time.Time     // wall time of the last completed read attempt
	done      time.Time     // clock time of the last completed read attempt
	cycle     time.Duration // clock time between the last two completed attempts
	since     time.Time     // clock time from which samples count (after a pressure change)
	down      bool          // the link is down (for link lost / restored events)
	waiting   string        // what an instrument read by a person is waiting for
	wantPa    float64       // the target of the step waiting for an entry
	link      func(name string, down bool, err error)
	clockBack func(name string, by time.Duration)
	stamped   time.Time // time of the last reading, to notice a clock that steps back
	unusable  warnLimit // "not usable for settling" warnings, at most one per interval
}

// Options wire a poller.
type Options struct {
	Name     string
	Gauge    drivers.Gauge
	Interval time.Duration
	Rules    settle.Rules
	Clock    clock.Clock
	Sink     Sink     // may be nil
	First    Observer // may be nil
	Log      *slog.Logger
	// Link is told when the instrument's link goes down and comes back.
	Link func(name string, down bool, err error)
	// ClockBack is told when a reading is stamped earlier than the one
	// before it (the system clock stepped back); the settling window starts
	// afresh, so readings from before and after are never paired.
	ClockBack func(name string, by time.Duration)
}

// New prepares a poller; it polls once Run is called.
func New(o Options) (*Poller, error) {
	det, err := settle.New(o.Rules)
	if err != nil {
		return nil, err
	}
	if o.Log == nil {
		o.Log = slog.New(slog.DiscardHandler)
	}
	p := &Poller{Name: o.Name, gauge: o.Gauge, interval: o.Interval, clk: o.Clock, sink: o.Sink, first: o.First,
		log: o.Log, det: det, failures: map[drivers.Kind]uint64{}}
	p.link, p.clockBack = o.Link, o.ClockBack
	return p, nil
}

// Interval is the configured poll interval.
func (p *Poller) Interval() time.Duration { return p.interval }

// Run polls until ctx ends.
func (p *Poller) Run(ctx context.Context) {
	timer := clock.NewTimer(p.clk) // one wait re-armed per read, not one made
	defer timer.Stop()
	for {
		start := p.clk.Now()
		r, err := p.gauge.Read(ctx)
		if ctx.Err() != nil {
			return
		}
		p.Record(r, err)
		wait := p.interval - p.clk.Now().Sub(start)
		if wait < p.interval/10 {
			wait = p.interval / 10 // never spin on a slow instrument
		}
		timer.Reset(wait)
		select {
		case <-ctx.Done():
			return
		case <-timer.C():
		}
	}
}

// Read takes one reading now, outside the poll loop (an instrument read by
// a person, once per point), and records it like a polled one. No entry
// yet (a time-out) is waiting, not a failed read: it is neither stored nor
// counted.
func (p *Poller) Read(ctx context.Context) (drivers.Reading, error) {
	r, err := p.gauge.Read(ctx)
	if ctx.Err() != nil {
		return drivers.Reading{}, ctx.Err()
	}
	if drivers.KindOf(err) == drivers.KindTimeout {
		return drivers.Reading{}, err
	}
	return p.Record(r, err)
}

// Record handles one reading: the observer first, then the sink, then the
// detector. A value that is not a finite number is a failed read whatever
// the driver said. It returns the reading and error as recorded.
func (p *Poller) Record(r drivers.Reading, err error) (drivers.Reading, error) {
	if r.Time.IsZero() {
		r.Time = p.clk.Now() // a failed read is stored at the time it failed
	}
	if err == nil && (math.IsNaN(r.Pa) || math.IsInf(r.Pa, 0)) {
		err = drivers.Fail(p.Name, drivers.KindBadReply, errNotFinite)
	}
	if err != nil && drivers.KindOf(err) == 0 {
		// A driver that forgot to classify its error still must not
		// produce a value; count it as a bad reply.
		err = drivers.Fail(p.Name, drivers.KindBadReply, err)
	}
	if err != nil {
		r.Pa, r.Raw = 0, 0
	}
	if p.first != nil {
		p.first(r, err)
	}
	if p.sink != nil {
		p.sink.Sample(p.Name, r, err)
	}
	p.mu.Lock()
	p.beat = time.Now()
	if now := p.clk.Now(); !p.done.IsZero() {
		p.cycle, p.done = now.Sub(p.done), now
	} else {
		p.done = now
	}
	p.reads++
	wasDown := p.down
	var back time.Duration
	if !p.stamped.IsZero() && r.Time.Before(p.stamped) {
		back = p.stamped.Sub(r.Time)
		p.det.Reset()
		p.since = r.Time
	}
	p.stamped = r.Time
	if err != nil {
		p.lastErr = err
		p.failures[drivers.KindOf(err)]++
		p.down = drivers.KindOf(err) == drivers.KindLinkDown
	} else {
		p.lastErr, p.down = nil, false
		p.last = r
		if !r.Time.Before(p.since) {
			if aerr := p.det.Add(r.Time, r.Pa); aerr != nil {
				if n, ok := p.unusable.allow(time.Now()); ok {
					p.log.Warn("reading not usable for settling", "err", aerr, "suppressed", n)
				}
			}
		}
	}
	down := p.down
	p.mu.Unlock()
	if p.link != nil && down != wasDown {
		p.link(p.Name, down, err)
	}
	if back > 0 && p.clockBack != nil {
		p.clockBack(p.Name, back)
	}
	return r, err
}

// warnLimit lets one warning of a kind through per interval and counts the
// ones it holds back, so a fault repeated at every poll does not flood the log.
type warnLimit struct {
	last       time.Time
	suppressed int
}

const warnInterval = 10 * time.Second

// allow reports whether a warning may be logged now, and how many were held
// back since the last one.
func (w *warnLimit) allow(now time.Time) (int, bool) {
	if !w.last.IsZero() && now.Sub(w.last) < warnInterval {
		w.suppressed++
		return 0, false
	}
	n := w.suppressed
	w.last, w.suppressed = now, 0
	return n, true
}

type notFinite struct{}

func (notFinite) Error() string { return "the value is not a finite number" }

var errNotFinite error = notFinite{}

// Restart empties the detector after a pressure change: samples taken
// before from are never part of a settled window.
func (p *Poller) Restart(from time.Time, target float64, hasTarget bool) {
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

// SetWaiting says what an instrument read by a person is waiting for and
// the target pressure of that step ("" when nothing).
func (p *Poller) SetWaiting(what string, targetPa float64) {
	p.mu.Lock()
	p.waiting, p.wantPa = what, targetPa
	p.mu.Unlock()
}

// State is a snapshot for the procedure, status and metrics.
type State struct {
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
	// Waiting says what an instrument read by a person waits for; such an
	// instrument is not down while it waits.
	Waiting string `json:"waiting,omitempty"`
	// WaitingForPa is the target of the step waiting for an entry.
	WaitingForPa float64 `json:"waiting_for_pa,omitempty"`
	// ReadsPerSecond is the rate the instrument actually reads at (on a
	// shared line it can be less than its poll interval asks), when its
	// driver measures it; Asked is what the poll interval asks.
	ReadsPerSecond float64 `json:"reads_per_second,omitempty"`
	Asked          float64 `json:"asked_per_second,omitempty"`
}

// State returns a snapshot.
func (p *Poller) State() State {
	p.mu.Lock()
	defer p.mu.Unlock()
	st := p.det.Status()
	f := map[string]uint64{}
	for k, n := range p.failures {
		f[k.String()] = n
	}
	s := State{Name: p.Name, Last: p.last, Reads: p.reads, Failures: f, Settle: st,
		Settled: st.Settled, Why: st.Why, Window: st.Window, Beat: p.beat, Every: max(p.interval, p.cycle), Waiting: p.waiting, WaitingForPa: p.wantPa}
	if p.lastErr != nil {
		s.LastErr = p.lastErr.Error()
	}
	if left := p.since.Sub(p.clk.Now()); st.Window.Count == 0 && left > 0 {
		// The detector is empty because the step's hold is still running.
		s.Why = fmt.Sprintf("holding after the pressure change, %.1f s to go", left.Seconds())
	}
	if rr, ok := p.gauge.(drivers.RateReporter); ok {
		s.ReadsPerSecond = rr.ReadRate().PerSecond
	}
	if p.interval > 0 {
		s.Asked = float64(time.Second) / float64(p.interval)
	}
	return s
}

// Live says whether a settled window is still current at now: its last
// read succeeded and the window reaches to within about two readings (plus
// slack) of now. A detector whose instrument stopped answering keeps its
// last window, which must never be paired with a fresh one.
func (s State) Live(now time.Time, slack time.Duration) bool {
	return s.LastErr == "" && now.Sub(s.Window.End) <= 2*s.Every+slack
}

// Paired says whether a reference and a device state form a point at now:
// both settled over shared windows and both live. Planned captures and free
// runs use this one rule.
func Paired(ref, dev State, now time.Time, slack time.Duration) bool {
	return settle.Both(ref.Settle, dev.Settle) && ref.Live(now, slack) && dev.Live(now, slack)
}
