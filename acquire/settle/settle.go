// Package settle decides when one instrument's readings have settled on a
// plateau, over a sliding time window, with O(1) work per sample.
//
// A window is settled when all of these hold, checked in this order (the
// first one that fails is reported in Status.Why for the live log):
//
//  1. full: the window spans at least Rules.Window of time and holds at least
//     Rules.MinSamples samples;
//  2. drift: |slope| of the least-squares line through (time, pressure) is at
//     most Rules.MaxDrift (Pa/s; Why writes it per minute, as it is set);
//  3. scatter: the residual standard deviation about that line, with n − 2
//     degrees of freedom, is at most Rules.MaxSpread (Pa);
//  4. range: max − min over the window is at most Rules.MaxRange (Pa), when
//     MaxRange > 0; this catches a single spike that the standard deviation
//     of a long window dilutes;
//  5. target: when a target is set and Rules.Band > 0, |mean − target| is at
//     most Band.
//
// The rule is plateau's own proposal, not a published one: there is no
// numeric stability criterion in the calibration guides we follow; waiting
// times after a pressure change and the drift/scatter idea are common
// practice. The engine adds the hold time since the pressure change.
//
// The window is the shortest run of the most recent samples that spans at
// least Rules.Window, so a full window covers [end − Window − one poll
// interval, end]. Failed reads never enter a detector: the engine passes
// only successful, in-range readings, so a gap in the window means readings
// were lost and Rules.MinSamples guards against judging a sparse window.
//
// A Detector is not safe for concurrent use; each poller owns its own.
package settle

import (
	"errors"
	"fmt"
	"math"
	"time"

	"plateau/analysis"
	"plateau/analysis/readout"
	"plateau/analysis/units"
)

// Rules say when a window counts as settled. Pressures in Pa, drift in Pa/s.
type Rules struct {
	Window     time.Duration // time the window must span
	MinSamples int           // at least this many samples in the window (≥ 3)
	MaxDrift   float64       // largest |slope| of the least-squares line, Pa/s (> 0)
	MaxSpread  float64       // largest residual standard deviation about that line, Pa (> 0)
	MaxRange   float64       // largest max − min over the window, Pa; 0 = not checked
	Band       float64       // largest |mean − target|, Pa; 0 = no target check
	// Show is how Why writes its figures for people; the zero value writes
	// pascal.
	Show Display
}

// Display is the unit people read pressures in and the resolution that
// sets their digits (one more than a reading's, since the figures of a
// window are means and slopes).
type Display struct {
	Unit         units.Unit
	ResolutionPa float64
}

// pa writes a pressure (or a difference) with its unit.
func (d Display) pa(v float64) string {
	u := d.Unit
	if u.Symbol == "" {
		u = units.Pascal
	}
	return readout.MeanWithUnit(v, u, d.ResolutionPa)
}

// perMinute writes a drift given in Pa/s per minute, as the limit is set.
func (d Display) perMinute(paPerS float64) string {
	return d.pa(60*paPerS) + "/min"
}

// Validate lists every rule that cannot work.
func (r Rules) Validate() error {
	var errs []error
	if r.Window <= 0 {
		errs = append(errs, fmt.Errorf("settle window %v: must be longer than zero", r.Window))
	}
	if r.MinSamples < 3 {
		errs = append(errs, fmt.Errorf("settle min samples %d: need at least 3 to fit a line and judge the scatter about it", r.MinSamples))
	}
	pos := func(name string, v float64, zeroOK bool) {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 || (v == 0 && !zeroOK) {
			want := "a positive number"
			if zeroOK {
				want = "zero (off) or a positive number"
			}
			errs = append(errs, fmt.Errorf("settle %s %v: must be %s", name, v, want))
		}
	}
	pos("max drift", r.MaxDrift, false)
	pos("max spread", r.MaxSpread, false)
	pos("max range", r.MaxRange, true)
	pos("band", r.Band, true)
	return errors.Join(errs...)
}

// Status is the detector's verdict on its current window.
type Status struct {
	Settled bool
	// Why names the first unmet rule, with the figures, for the live log;
	// empty when settled.
	Why string
	// Window summarises the current window: mean, SD (n − 1) about the mean,
	// count, first and last sample time and least-squares slope (Pa/s).
	Window analysis.Window
	// ResidualSD is the scatter about the least-squares line (n − 2), Pa.
	ResidualSD float64
	// Range is max − min over the window, Pa.
	Range float64
}

// Errors returned by Add.
var (
	ErrNotFinite  = errors.New("pressure is not a finite number")
	ErrOutOfOrder = errors.New("sample is older than the previous one")
)

type sample struct {
	ns  int64 // time since the detector's base, ns (exact)
	pa  float64
	seq uint64 // position in the stream, for the min/max deques
}

// Detector tracks one instrument's window. The zero value is not usable;
// call New.
type Detector struct {
	rules Rules

	base time.Time // time of the first sample after a reset; ns are relative to it
	win  queue[sample]
	next uint64 // seq of the next sample

	// Running statistics of the window in anchored coordinates
	// x = (ns − anchorNs)·1e-9 s and y = pa − anchorPa, updated with
	// Welford-style add/remove steps; cxx, cxy, cyy are co-moments about the
	// means. Anchoring on the oldest sample keeps x and y small, and a full
	// recomputation every window's worth of samples bounds the rounding error
	// that add/remove steps accumulate (amortised O(1)).
	anchorNs       int64
	anchorPa       float64
	mx, my         float64
	cxx, cxy, cyy  float64
	sinceRecompute int

	lo, hi queue[sample] // monotonic deques: window minimum and maximum

	target    float64
	hasTarget bool
}

// New returns a detector for the rules, or an error that names every bad rule.
func New(r Rules) (*Detector, error) {
	if err := r.Validate(); err != nil {
		return nil, err
	}
	return &Detector{rules: r}, nil
}

// Rules returns the rules the detector was made with.
func (d *Detector) Rules() Rules { return d.rules }

// Reset empties the window, e.g. after the pressure was changed. The target
// is kept; set a new one with SetTarget.
func (d *Detector) Reset() {
	d.win.clear()
	d.lo.clear()
	d.hi.clear()
	d.zeroSums()
	d.base = time.Time{}
}

// SetTarget makes the mean have to lie within Rules.Band of pa (when Band > 0).
func (d *Detector) SetTarget(pa float64) { d.target, d.hasTarget = pa, true }

// ClearTarget removes the target check.
func (d *Detector) ClearTarget() { d.hasTarget = false }

// Add puts one successful reading into the window and drops the samples the
// window no longer needs. A reading that is not finite or is older than the
// previous one is refused with an error and leaves the window unchanged.
// Equal times are accepted.
func (d *Detector) Add(t time.Time, pa float64) error {
	if math.IsNaN(pa) || math.IsInf(pa, 0) {
		return fmt.Errorf("settle add %v at %s: %w", pa, t.Format(time.RFC3339Nano), ErrNotFinite)
	}
	if d.win.len() == 0 {
		d.base = t
		d.anchorNs, d.anchorPa = 0, pa
	}
	ns := int64(t.Sub(d.base))
	if d.win.len() > 0 && ns < d.win.back().ns {
		return fmt.Errorf("settle add at %s, previous at %s: %w",
			t.Format(time.RFC3339Nano), d.base.Add(time.Duration(d.win.back().ns)).Format(time.RFC3339Nano), ErrOutOfOrder)
	}
	s := sample{ns: ns, pa: pa, seq: d.next}
	d.next++
	d.win.push(s)
	d.include(s)
	for d.lo.len() > 0 && d.lo.back().pa >= pa {
		d.lo.popBack()
	}
	d.lo.push(s)
	for d.hi.len() > 0 && d.hi.back().pa <= pa {
		d.hi.popBack()
	}
	d.hi.push(s)

	// Keep the shortest tail of samples that still spans the window.
	span := int64(d.rules.Window)
	for d.win.len() > 1 && ns-d.win.at(1).ns >= span {
		d.exclude(d.win.popFront())
	}
	first := d.win.front().seq
	for d.lo.front().seq < first {
		d.lo.popFront()
	}
	for d.hi.front().seq < first {
		d.hi.popFront()
	}

	d.sinceRecompute++
	if d.sinceRecompute >= max(d.win.len(), 16) {
		d.recompute()
	}
	return nil
}

func (d *Detector) xy(s sample) (x, y float64) {
	return float64(s.ns-d.anchorNs) * 1e-9, s.pa - d.anchorPa
}

func (d *Detector) include(s sample) {
	x, y := d.xy(s)
	n := float64(d.win.len()) // already counts s
	dx, dy := x-d.mx, y-d.my
	d.mx += dx / n
	d.my += dy / n
	d.cxx += dx * (x - d.mx)
	d.cxy += dx * (y - d.my)
	d.cyy += dy * (y - d.my)
}

func (d *Detector) exclude(s sample) {
	n := float64(d.win.len()) // already without s
	if n == 0 {
		d.zeroSums()
		return
	}
	x, y := d.xy(s)
	dx, dy := x-d.mx, y-d.my
	d.mx -= dx / n
	d.my -= dy / n
	d.cxx -= dx * (x - d.mx)
	d.cxy -= dx * (y - d.my)
	d.cyy -= dy * (y - d.my)
}

func (d *Detector) zeroSums() {
	d.mx, d.my, d.cxx, d.cxy, d.cyy = 0, 0, 0, 0, 0
	d.sinceRecompute = 0
}

// recompute re-anchors on the oldest sample and rebuilds the sums with two
// passes over the window, discarding accumulated rounding error.
func (d *Detector) recompute() {
	d.zeroSums()
	n := d.win.len()
	if n == 0 {
		return
	}
	first := d.win.front()
	d.anchorNs, d.anchorPa = first.ns, first.pa
	for i := range n {
		x, y := d.xy(d.win.at(i))
		d.mx += x
		d.my += y
	}
	d.mx /= float64(n)
	d.my /= float64(n)
	for i := range n {
		x, y := d.xy(d.win.at(i))
		dx, dy := x-d.mx, y-d.my
		d.cxx += dx * dx
		d.cxy += dx * dy
		d.cyy += dy * dy
	}
}

// Status judges the current window. It does O(1) work.
func (d *Detector) Status() Status {
	var st Status
	n := d.win.len()
	if n == 0 {
		st.Why = "no samples yet"
		return st
	}
	first, last := d.win.front(), d.win.back()
	w := analysis.Window{
		Mean:  d.anchorPa + d.my,
		Count: n,
		Start: d.base.Add(time.Duration(first.ns)),
		End:   d.base.Add(time.Duration(last.ns)),
	}
	cyy := max(d.cyy, 0)
	if n >= 2 {
		w.StdDev = math.Sqrt(cyy / float64(n-1))
	}
	if d.cxx > 0 {
		w.Slope = d.cxy / d.cxx
	}
	if n >= 3 {
		res := cyy
		if d.cxx > 0 {
			res = cyy - d.cxy*d.cxy/d.cxx
		}
		st.ResidualSD = math.Sqrt(max(res, 0) / float64(n-2))
	}
	st.Range = d.hi.front().pa - d.lo.front().pa
	st.Window = w

	r := d.rules
	span := time.Duration(last.ns - first.ns)
	switch {
	case span < r.Window:
		st.Why = fmt.Sprintf("window not full: %.1f s of %.1f s", span.Seconds(), r.Window.Seconds())
	case n < r.MinSamples:
		st.Why = fmt.Sprintf("too few samples: %d in the window, need %d", n, r.MinSamples)
	case math.Abs(w.Slope) > r.MaxDrift:
		st.Why = fmt.Sprintf("drifting %s, limit %s", r.Show.perMinute(w.Slope), r.Show.perMinute(r.MaxDrift))
	case st.ResidualSD > r.MaxSpread:
		st.Why = fmt.Sprintf("scattered %s about the trend, limit %s", r.Show.pa(st.ResidualSD), r.Show.pa(r.MaxSpread))
	case r.MaxRange > 0 && st.Range > r.MaxRange:
		st.Why = fmt.Sprintf("range %s from lowest to highest, limit %s", r.Show.pa(st.Range), r.Show.pa(r.MaxRange))
	case d.hasTarget && r.Band > 0 && math.Abs(w.Mean-d.target) > r.Band:
		st.Why = fmt.Sprintf("off target: mean %s is %s from %s, band %s",
			r.Show.pa(w.Mean), r.Show.pa(w.Mean-d.target), r.Show.pa(d.target), r.Show.pa(r.Band))
	default:
		st.Settled = true
	}
	return st
}

// Overlap returns how long two windows share, or a negative duration for the
// gap between them.
func Overlap(a, b analysis.Window) time.Duration {
	start, end := a.Start, a.End
	if b.Start.After(start) {
		start = b.Start
	}
	if b.End.Before(end) {
		end = b.End
	}
	return end.Sub(start)
}

// Both reports whether two instruments (reference and device under test) are
// settled over the same stretch of time: both settled, and their windows
// share at least half of the shorter one. The overlap requirement stops a
// detector that stopped receiving samples (link down) from pairing its old
// plateau with a fresh one from the other instrument.
func Both(a, b Status) bool {
	if !a.Settled || !b.Settled {
		return false
	}
	shorter := min(a.Window.End.Sub(a.Window.Start), b.Window.End.Sub(b.Window.Start))
	return Overlap(a.Window, b.Window) >= shorter/2
}
