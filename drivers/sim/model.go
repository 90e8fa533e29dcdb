package sim

import (
	"math"
	"sync"
	"time"

	"plateau/analysis"
)

// Timing of the model, in model (clock) seconds.
const (
	stepSeconds   = 0.010 // integration step of the friction state
	updateSeconds = 0.100 // instruments refresh their value ten times a second
	ventSpeedup   = 4     // venting is this much faster than a controlled step
	reachedFrac   = 2e-4  // "setpoint reached" within 0.02 % of the controller's ceiling
)

// Noise streams, so each instrument draws its own independent sequence.
// The first device keeps the streams it had when the bench held one, so a
// seed gives the numbers it always gave.
const (
	streamReference uint64 = iota + 1
	streamDevice
	streamOperator
	streamDevices   = 0x100 // + device index, from the second device on
	streamOperators = 0x200
)

func deviceStream(k int) uint64 {
	if k == 0 {
		return streamDevice
	}
	return streamDevices + uint64(k)
}

func operatorStream(k int) uint64 {
	if k == 0 {
		return streamOperator
	}
	return streamOperators + uint64(k)
}

// Sample is what every simulated instrument shows at one instant, in the
// units each reports in; the device fields are those of one device.
type Sample struct {
	At        time.Time
	Reference float64 // reference transducer, reference unit
	Device    float64 // device under test indication, device unit
	Current   float64 // loop current of the transmitter, mA (NAMUR saturation 3.8–20.5)
	Source    float64 // the controller's own pressure reading, reference unit
	Setpoint  float64 // reference unit
	Reached   bool    // the controller says it holds its setpoint
	Vented    bool
	Over      bool // the device indication is outside its range by more than 10 % of span
}

// model is the physics of the bench. It is evaluated at clock times: the
// source follows a closed-form step response from the last setpoint change,
// the device's friction state is integrated in fixed steps on a grid from
// the model's epoch, and every noise value is a hash of (seed, instrument,
// update index). The same seed and the same clock times give the same
// numbers, whatever order or how often the transports ask. It is safe for
// concurrent use.
type model struct {
	p     params
	epoch time.Time

	mu sync.Mutex
	// The current source segment: a step from `from` to `to` starting at t0.
	t0, from, to float64
	tau, shape   float64
	vented       bool
	setpoint     float64
	// Friction (play operator) state of each device on the integration grid.
	step int64     // index of the last grid point evaluated (time = step × stepSeconds)
	play []float64 // indication after friction, Pa, per device
}

func newModel(p params, epoch time.Time) *model {
	m := &model{p: p, epoch: epoch, tau: p.tau / ventSpeedup, vented: true, play: make([]float64, len(p.devs))}
	for k := range p.devs {
		m.play[k] = m.shaped(k, 0)
	}
	return m
}

func (m *model) seconds(t time.Time) float64 { return t.Sub(m.epoch).Seconds() }

// shapeFor solves overshoot = a·exp(−1−1/a) for the shape factor a of the
// response p(s) = to + Δ·e^(−s)·(a·s − 1), s = t/τ. With a = 0 it is the
// plain first-order lag; its peak lies at s = 1 + 1/a.
func shapeFor(overshoot float64) float64 {
	if overshoot <= 0 {
		return 0
	}
	lo, hi := 0.0, 50.0
	for range 100 {
		mid := (lo + hi) / 2
		if mid*math.Exp(-1-1/mid) < overshoot {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2
}

// pressure is the true pressure at model time t (not before t0).
func (m *model) pressure(t float64) float64 {
	el := max(t-m.t0, 0)
	s := el / m.tau
	p := m.to + (m.to-m.from)*math.Exp(-s)*(m.shape*s-1)
	if m.p.leak > 0 && !m.vented { // a leak pulls toward atmosphere, never past it
		sag := min(m.p.leak*el, math.Abs(p))
		p -= math.Copysign(sag, p)
	}
	return p
}

// shaped is device k's indication before friction, resolution and noise:
// zero offset, span (gain) error and a parabolic bow over the range.
func (m *model) shaped(k int, p float64) float64 {
	d := &m.p.devs[k]
	x := (p - d.lower) / (d.upper - d.lower)
	return p + d.zero + d.span*p + d.bow*4*x*(1-x)
}

// advance integrates the friction state up to model time t on a grid of
// whole steps from the epoch (an integer index, so the grid is the same
// however the calls fall). Before a segment changes, the grid is brought up
// to the change, so a grid point always sees the segment active at its time.
func (m *model) advance(t float64) {
	last := int64(math.Floor(t / stepSeconds))
	for k := m.step + 1; k <= last; k++ {
		tk := float64(k) * stepSeconds
		still := m.still(tk) // the pressure has stopped: one step stands for the rest
		p := m.to
		if !still {
			p = m.pressure(tk)
		}
		for i := range m.play {
			h := m.p.devs[i].band / 2
			f := m.shaped(i, p)
			m.play[i] = min(max(m.play[i], f-h), f+h)
		}
		if still {
			break
		}
	}
	m.step = max(m.step, last)
}

// still says the source has come to rest at its target by model time t:
// 40 time constants after the step (e^-40 of it left) with nothing leaking.
func (m *model) still(t float64) bool {
	return (t-m.t0)/m.tau > 40 && (m.p.leak == 0 || m.vented)
}

func (m *model) gridTime() float64 { return float64(m.step) * stepSeconds }

// friction is device k's indication after friction at t (which must not
// be earlier than the grid): the play operator applied to the state.
func (m *model) friction(k int, t float64) float64 {
	h := m.p.devs[k].band / 2
	f := m.shaped(k, m.pressure(t))
	return min(max(m.play[k], f-h), f+h)
}

// restart begins a new segment at t from the current pressure. The new
// step starts from rest (the old segment's rate is not carried over), which
// is close enough for steps that are seconds apart.
func (m *model) restart(t, to, tau, shape float64) {
	m.advance(t)
	from := m.pressure(max(t, m.t0))
	m.t0, m.from, m.to, m.tau, m.shape = max(t, m.t0), from, to, tau, shape
}

// setPoint moves the source toward pa and ends a vent.
func (m *model) setPoint(at time.Time, pa float64) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.restart(m.seconds(at), pa, m.p.tau, m.p.shape)
	m.setpoint, m.vented = pa, false
}

// vent opens the system to atmosphere: quick, no overshoot, no leak.
func (m *model) vent(at time.Time) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.restart(m.seconds(at), 0, m.p.tau/ventSpeedup, 0)
	m.setpoint, m.vented = 0, true
}

// sample evaluates the reference, the source and device k at clock time at.
func (m *model) sample(at time.Time, k int) Sample {
	m.mu.Lock()
	t := max(m.seconds(at), m.gridTime())
	m.advance(t)
	p := m.pressure(t)
	y := m.friction(k, t)
	s := m.status(t, p)
	m.mu.Unlock()

	d := &m.p.devs[k]
	idx := int64(math.Floor(t / updateSeconds))
	ref := p*(1+m.p.refErr) + m.p.refNoise*gauss(m.p.seed, streamReference, idx)
	dev := y + d.devNoise*gauss(m.p.seed, deviceStream(k), idx)
	s.At = at
	s.Reference = quantize(m.p.refUnit.FromPa(ref), m.p.refUnit.FromPa(m.p.refRes))
	s.Device = quantize(d.devUnit.FromPa(dev), d.devUnit.FromPa(d.devRes))
	s.Current = d.current(d.devUnit.ToPa(s.Device))
	span := d.upper - d.lower
	s.Over = dev > d.upper+0.1*span || dev < d.lower-0.1*span
	return s
}

// status fills the controller's side of a sample.
func (m *model) status(t, p float64) Sample {
	u := m.p.refUnit
	s := Sample{Source: u.FromPa(p), Setpoint: u.FromPa(m.setpoint), Vented: m.vented}
	pastPeak := m.shape == 0 || (t-m.t0)/m.tau >= 1+1/m.shape
	s.Reached = pastPeak && math.Abs(p-m.setpoint) <= reachedFrac*m.p.maxPa
	return s
}

// current converts an indication (Pa) to loop current with NAMUR NE 43
// saturation: 4 mA + 16 mA × (p − LRV)/(URV − LRV), held inside 3.8–20.5 mA
// (REFERENCES.md §7).
func (d *devParams) current(pa float64) float64 {
	i := 4 + 16*(pa-d.lower)/(d.upper-d.lower)
	return min(max(i, 3.8), 20.5)
}

// needle is dial k's pointer (friction included, no display rounding) at
// at, in its unit, and the operator's reading scatter for that instant.
func (m *model) needle(at time.Time, k int) (pointer, scatter float64) {
	m.mu.Lock()
	t := max(m.seconds(at), m.gridTime())
	m.advance(t)
	y := m.friction(k, t)
	m.mu.Unlock()
	d := &m.p.devs[k]
	idx := int64(math.Floor(t / updateSeconds))
	return d.devUnit.FromPa(y), d.devUnit.FromPa(d.devNoise * gauss(m.p.seed, operatorStream(k), idx))
}

// deviceError is device k's systematic error of indication at true
// pressure p approached from direction dir, in pascal: what a perfect
// comparison would find, before resolution and noise. The dead band makes
// the indication lag by half its width behind the direction of motion.
func (m *model) deviceError(k int, p float64, dir analysis.Direction) float64 {
	h := m.p.devs[k].band / 2
	if dir == analysis.Descending {
		h = -h
	}
	return m.shaped(k, p) - h - p
}

// quantize rounds v to the nearest multiple of step (no rounding for step 0).
func quantize(v, step float64) float64 {
	if step <= 0 {
		return v
	}
	return math.Round(v/step) * step
}

// gauss is a standard normal deviate that depends only on its arguments
// (splitmix64 hashing and the Box–Muller transform), so noise is the same
// for the same seed and time however often an instrument is read.
func gauss(seed, stream uint64, idx int64) float64 {
	a := splitmix(seed ^ splitmix(stream) ^ splitmix(uint64(idx)+0x632BE59BD9B4E019))
	b := splitmix(a)
	u1 := (float64(a>>11) + 0.5) / (1 << 53)
	u2 := float64(b>>11) / (1 << 53)
	return math.Sqrt(-2*math.Log(u1)) * math.Cos(2*math.Pi*u2)
}

func splitmix(x uint64) uint64 {
	x += 0x9E3779B97F4A7C15
	x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9
	x = (x ^ (x >> 27)) * 0x94D049BB133111EB
	return x ^ (x >> 31)
}
