package acquire

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"strconv"
	"sync"
	"time"

	"plateau/acquire/poll"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/balance"
	"plateau/drivers/clock"
)

// Ambient instruments are polled like the others but only observed: no
// reading of theirs reaches the safety guard, and a failed one is a
// warning event (link lost), never a stop. Their readings go to the
// store, and each point carries their means over its window.
//
// A barometer also converts a reference or a pressure controller whose
// mode differs from the devices' (p_abs = p_gauge + p_baro), sample by
// sample, with its latest reading.

// freshBarometric is how old the barometer's latest reading may be when
// it converts a reading (why: config.BarometerFresh). An older one makes
// the converted reading fail: a silent barometer is a silent reference,
// and the guard acts on it.
const freshBarometric = config.BarometerFresh

// ambientRing bounds the readings kept per ambient instrument for the
// window means: enough for windows of an hour at a poll of a second.
const ambientRing = 4096

var errNoBarometric = errors.New("no fresh barometric reading to convert between gauge and absolute pressure")

// ambientBook keeps the recent good readings of every ambient
// instrument. Pollers write to it, the procedure reads window means.
type ambientBook struct {
	clk   clock.Clock
	cfg   *config.Config
	byKey map[string]*ambientTrack // instrument name →
	order []*ambientTrack
	baro  *ambientTrack // the barometer, nil when there is none
}

// ambientTrack is one instrument's recent readings in a ring.
type ambientTrack struct {
	name string
	kind units.AmbientKind
	poll time.Duration

	mu      sync.Mutex
	t       []time.Time
	v       []float64
	next    int
	n       int
	outside bool // the last point's mean lay outside the reference conditions
}

func newAmbientBook(cfg *config.Config, others []Instrument, clk clock.Clock) *ambientBook {
	b := &ambientBook{clk: clk, cfg: cfg, byKey: map[string]*ambientTrack{}}
	polls := map[string]time.Duration{}
	for _, o := range others {
		polls[o.Name] = o.Poll
		if o.ByPerson {
			polls[o.Name] = enteredHolds
		}
	}
	for _, a := range cfg.Ambient() {
		poll, opened := polls[a.Name]
		if !opened {
			continue
		}
		tr := &ambientTrack{name: a.Name, kind: a.Kind, poll: poll, t: make([]time.Time, ambientRing), v: make([]float64, ambientRing)}
		b.byKey[a.Name] = tr
		b.order = append(b.order, tr)
		if a.Kind == units.Barometric {
			b.baro = tr
		}
	}
	return b
}

// observer is what an ambient instrument's poller calls first with every
// reading: it keeps the good ones. nil for an instrument that is not ambient.
func (b *ambientBook) observer(name string) func(drivers.Reading, error) {
	tr := b.byKey[name]
	if tr == nil {
		return nil
	}
	return func(r drivers.Reading, err error) {
		if err != nil || math.IsNaN(r.Pa) || math.IsInf(r.Pa, 0) {
			return
		}
		tr.mu.Lock()
		tr.t[tr.next], tr.v[tr.next] = r.Time, r.Pa
		tr.next = (tr.next + 1) % len(tr.t)
		tr.n = min(tr.n+1, len(tr.t))
		tr.mu.Unlock()
	}
}

// latest is the newest reading and its time.
func (tr *ambientTrack) latest() (float64, time.Time, bool) {
	tr.mu.Lock()
	defer tr.mu.Unlock()
	if tr.n == 0 {
		return 0, time.Time{}, false
	}
	i := (tr.next - 1 + len(tr.t)) % len(tr.t)
	return tr.v[i], tr.t[i], true
}

// over summarises the readings in [start, end]. A window with none takes
// the newest reading before its end if it is at most two polls old (an
// ambient sensor polled slower than the window is still the condition
// of the point).
func (tr *ambientTrack) over(start, end time.Time) (analysis.AmbientMean, bool) {
	tr.mu.Lock()
	defer tr.mu.Unlock()
	m := analysis.AmbientMean{Instrument: tr.name, Kind: tr.kind, Min: math.Inf(1), Max: math.Inf(-1)}
	sum := 0.0
	var before time.Time
	beforeV := 0.0
	for k := 0; k < tr.n; k++ {
		i := (tr.next - 1 - k + 2*len(tr.t)) % len(tr.t)
		t, v := tr.t[i], tr.v[i]
		switch {
		case t.After(end):
			continue
		case t.Before(start):
			if before.IsZero() {
				before, beforeV = t, v
			}
			continue
		}
		m.Count++
		sum += v
		m.Min, m.Max = math.Min(m.Min, v), math.Max(m.Max, v)
	}
	if m.Count == 0 {
		if before.IsZero() || end.Sub(before) > 2*tr.poll {
			return analysis.AmbientMean{}, false
		}
		return analysis.AmbientMean{Instrument: tr.name, Kind: tr.kind, Mean: beforeV, Min: beforeV, Max: beforeV, Count: 1}, true
	}
	m.Mean = sum / float64(m.Count)
	return m, true
}

// barometric is the barometer's latest reading, Pa, if it is fresh.
func (b *ambientBook) barometric() (float64, error) {
	if b.baro == nil {
		return 0, errNoBarometric
	}
	v, at, ok := b.baro.latest()
	if !ok {
		return 0, fmt.Errorf("%w: %s has given none yet", errNoBarometric, b.baro.name)
	}
	if age := b.clk.Now().Sub(at); age > freshBarometric {
		return 0, fmt.Errorf("%w: the last of %s is %s old", errNoBarometric, b.baro.name, age.Round(time.Second))
	}
	// A barometer that reads wrong would move the safety guard's view of
	// the pressure by as much: one outside any laboratory's air is not used.
	if lim := plausible[units.Barometric]; v < lim[0] || v > lim[1] {
		return 0, fmt.Errorf("%w: %s reads %s, which no laboratory's air has: check its unit and scale", errNoBarometric, b.baro.name, analysis.AmbientText(units.Barometric, v))
	}
	return v, nil
}

// convert puts the barometer between the devices' mode and a reference or
// controller that reads the other one.
func (b *ambientBook) convert(in Instruments) Instruments {
	for _, inst := range b.cfg.Instruments {
		if !b.cfg.Converted(inst) {
			continue
		}
		sign := 1.0 // a gauge reading made absolute: p_abs = p_gauge + p_baro
		if config.InstrumentMode(inst) == config.ModeAbsolute {
			sign = -1 // an absolute one made gauge: p_gauge = p_abs − p_baro
		}
		switch {
		case inst.Role == config.RoleReference && inst.Name == in.Reference.Name && in.Reference.Gauge != nil:
			in.Reference.Gauge = &shiftedGauge{Gauge: in.Reference.Gauge, name: inst.Name, book: b, sign: sign}
		case inst.Role == config.RoleSource && in.Source != nil:
			s := shiftedSource{Source: in.Source, book: b, sign: -sign}
			if r, ok := in.Source.(drivers.Reacher); ok {
				in.Source = &shiftedReacher{shiftedSource: s, r: r}
			} else {
				in.Source = &s
			}
		}
	}
	b.lendThermometer(in.Reference)
	return in
}

// thermometerUser is a reference that takes a temperature from an ambient
// instrument: a pressure balance, its piston's (drivers/balance).
type thermometerUser interface {
	UseThermometer(balance.TemperatureSource)
}

// lendThermometer hands a pressure balance reference the ambient
// instrument that balance.piston_thermometer names; the balance reads
// the latest reading the book keeps, nothing else of the engine.
func (b *ambientBook) lendThermometer(ref Instrument) {
	for _, inst := range b.cfg.Instruments {
		if inst.Role != config.RoleReference || inst.Name != ref.Name || inst.Balance == nil || inst.Balance.PistonThermometer == "" {
			continue
		}
		tr := b.byKey[inst.Balance.PistonThermometer]
		g := ref.Gauge
		for {
			w, ok := g.(interface{ Unwrap() drivers.Gauge })
			if !ok {
				break
			}
			g = w.Unwrap()
		}
		if u, ok := g.(thermometerUser); ok && tr != nil && tr.kind == units.Temperature {
			u.UseThermometer(tr)
		}
	}
}

// LatestTemperature is the track's newest reading (°C for a thermometer).
func (tr *ambientTrack) LatestTemperature() (float64, time.Time, bool) { return tr.latest() }

var _ balance.TemperatureSource = (*ambientTrack)(nil)

// shiftedGauge reads an instrument of the other mode in the devices' mode.
// Raw keeps what the instrument gave, for audit.
type shiftedGauge struct {
	drivers.Gauge
	name string
	book *ambientBook
	sign float64 // +1: gauge → absolute, −1: absolute → gauge
}

func (g *shiftedGauge) Read(ctx context.Context) (drivers.Reading, error) {
	r, err := g.Gauge.Read(ctx)
	if err != nil {
		return r, err
	}
	baro, err := g.book.barometric()
	if err != nil {
		return r, drivers.Fail(g.name, drivers.KindLinkDown, err)
	}
	r.Pa += g.sign * baro
	return r, nil
}

// Unwrap gives the instrument itself, for whoever needs its own type (an
// operator's entry gauge).
func (g *shiftedGauge) Unwrap() drivers.Gauge { return g.Gauge }

// shiftedSource sets a controller of the other mode with setpoints in the
// devices' mode. Venting needs no conversion.
type shiftedSource struct {
	drivers.Source
	book *ambientBook
	sign float64
}

func (s *shiftedSource) SetPoint(ctx context.Context, pa float64) error {
	baro, err := s.book.barometric()
	if err != nil {
		return fmt.Errorf("setpoint: %w", err)
	}
	return s.Source.SetPoint(ctx, pa+s.sign*baro)
}

type shiftedReacher struct {
	shiftedSource
	r drivers.Reacher
}

func (s *shiftedReacher) Reached(ctx context.Context) (bool, error) { return s.r.Reached(ctx) }

var (
	_ drivers.Gauge   = (*shiftedGauge)(nil)
	_ drivers.Source  = (*shiftedSource)(nil)
	_ drivers.Reacher = (*shiftedReacher)(nil)
)

// withAmbient gives a point the ambient means over its window, and says
// in the record when an ambient quantity leaves the device's reference
// conditions or comes back within them, or has no reading for the point.
func (e *Engine) withAmbient(run *activeRun, p analysis.Point) analysis.Point {
	b := e.ambient
	if b == nil || len(b.order) == 0 {
		return p
	}
	w := p.Reference
	if w.Start.IsZero() || w.End.IsZero() {
		w = p.DUT
	}
	cond := deviceOf(e.cfg, p.Device).Conditions
	for _, tr := range b.order {
		m, ok := tr.over(w.Start, w.End)
		if !ok {
			e.emit(run.id, slog.LevelWarn, "ambient", tr.name, fmt.Sprintf("%s: no reading for %s; the point carries no %s", tr.name, describePoint(p), tr.kind), nil)
			continue
		}
		p.Ambient = append(p.Ambient, m)
		r := intervalOf(cond, tr.kind)
		if r == nil {
			continue
		}
		outside := !r.Holds(m.Mean)
		tr.mu.Lock()
		changed := outside != tr.outside
		tr.outside = outside
		tr.mu.Unlock()
		switch {
		case outside && changed:
			e.emit(run.id, slog.LevelWarn, "ambient", tr.name, fmt.Sprintf("%s: %s %s at %s is outside the reference conditions %s",
				tr.name, tr.kind, analysis.AmbientText(tr.kind, m.Mean), describePoint(p), r.Text), m)
		case changed:
			e.emit(run.id, slog.LevelInfo, "ambient", tr.name, fmt.Sprintf("%s: %s %s at %s is back within the reference conditions %s",
				tr.name, tr.kind, analysis.AmbientText(tr.kind, m.Mean), describePoint(p), r.Text), m)
		}
	}
	return p
}

func intervalOf(c config.Conditions, k units.AmbientKind) *units.Interval {
	switch k {
	case units.Temperature:
		return c.TemperatureC
	case units.Humidity:
		return c.HumidityPct
	}
	return c.BarometricPa
}

// ambientGauge reads an ambient instrument in its own unit (°C, K, °F,
// %RH, hPa …) and gives the value in its quantity's base unit (°C, %RH,
// Pa) in the reading's value field; Raw keeps the instrument's own.
type ambientGauge struct {
	drivers.Gauge
	unit units.AmbientUnit
}

func (g *ambientGauge) Read(ctx context.Context) (drivers.Reading, error) {
	r, err := g.Gauge.Read(ctx)
	if g.unit.Kind == units.Barometric {
		return r, err // a pressure: the driver converted it
	}
	r.RawUnit = g.unit.Symbol
	if err != nil {
		return r, err
	}
	r.Pa = g.unit.ToBase(r.Raw)
	return r, nil
}

// openAmbient opens an ambient instrument through the driver of its link:
// the driver reads the raw number (a temperature or humidity passes its
// conversion untouched as if it were in pascal), and the value is then
// converted from the instrument's unit; a barometer is a pressure, which
// the driver converts itself (and checks a line reply's unit).
func openAmbient(inst config.Instrument, env drivers.OpenEnv) (drivers.Gauge, error) {
	a, ok := config.AmbientOf(inst)
	if !ok {
		return nil, fmt.Errorf("instrument %q: quantity %q in %q cannot be read", inst.Name, inst.Quantity, inst.Unit)
	}
	raw := inst
	if a.Kind != units.Barometric {
		raw.Unit = units.Pascal.Symbol
	}
	g, err := drivers.OpenGauge(raw, env)
	if err != nil {
		return nil, err
	}
	return &ambientGauge{Gauge: g, unit: a.Unit}, nil
}

// enteredHolds is how long a typed ambient condition stands for the
// points that follow when no newer one is entered (the fallback of over
// takes two "polls").
const enteredHolds = 30 * time.Minute

// plausible bounds typed ambient values: a laboratory's conditions, with
// room for an unheated workshop (common practice). A value outside is a
// wrong unit or a typo: a barometric 1013 typed without its unit is read
// as 1013 bar.
var plausible = map[units.AmbientKind][2]float64{
	units.Temperature: {-30, 60},     // °C
	units.Humidity:    {0, 100},      // %RH
	units.Barometric:  {50e3, 110e3}, // Pa
}

// enterAmbient takes an operator's reading of an ambient instrument with
// link kind manual (handled false for any other name). The value is in
// the unit given, when it is one of the quantity's, else in the
// instrument's own unit (the enter command puts the device's unit on a
// bare number). It is stored as the instrument's sample and stands for
// the points of the next half hour.
func (e *Engine) enterAmbient(en Entry) (handled bool, err error) {
	var inst config.Instrument
	found := false
	for _, in := range e.cfg.Instruments {
		if in.Name == en.Device && in.Role == config.RoleAmbient && in.Link.Kind == config.LinkManual {
			inst, found = in, true
		}
	}
	tr := e.ambient.byKey[en.Device]
	if !found || tr == nil {
		return false, nil
	}
	a, _ := config.AmbientOf(inst)
	// A bare number is in the instrument's own unit; a unit given must be
	// one of its quantity, never silently taken as the instrument's own.
	u := a.Unit
	if en.Unit != "" {
		given, err := units.LookupAmbient(a.Kind, en.Unit)
		if err != nil {
			return true, fmt.Errorf("%s reads %s: unit %q: %w", inst.Name, a.Kind, en.Unit, err)
		}
		u = given
	}
	if math.IsNaN(en.Value) || math.IsInf(en.Value, 0) {
		return true, errors.New("the reading must be a finite number")
	}
	base := u.ToBase(en.Value)
	if lim := plausible[a.Kind]; base < lim[0] || base > lim[1] {
		return true, fmt.Errorf("%s: %s %s is no %s of a laboratory (%s … %s): check the value and give its unit",
			inst.Name, strconv.FormatFloat(en.Value, 'f', -1, 64), u.Symbol, a.Kind, analysis.AmbientText(a.Kind, lim[0]), analysis.AmbientText(a.Kind, lim[1]))
	}
	now := e.clk.Now()
	r := drivers.Reading{Time: now, Pa: base, Raw: a.Unit.FromBase(base), RawUnit: a.Unit.Symbol,
		Wire: fmt.Sprintf("entered %s %s", strconv.FormatFloat(en.Value, 'f', -1, 64), u.Symbol)}
	e.ambient.observer(inst.Name)(r, nil)
	e.samples.Sample(inst.Name, r, nil)
	run := store.RunID(0)
	if ar := e.runs.active(); ar != nil {
		run = ar.id
	}
	e.emit(run, slog.LevelInfo, "entry", inst.Name, fmt.Sprintf("%s: %s entered as %s", inst.Name, a.Kind, analysis.AmbientText(a.Kind, base)),
		map[string]any{"value": en.Value, "unit": u.Symbol, "base": base})
	return true, nil
}

// enteredStates is the status of each ambient instrument an operator reads
// (link kind manual): no poller reports them, so status would not list
// them. Reads counts the entries kept; Last is the newest, in the
// instrument's own unit as Raw.
func (e *Engine) enteredStates() []poll.State {
	var out []poll.State
	for _, in := range e.cfg.Instruments {
		if in.Role != config.RoleAmbient || in.Link.Kind != config.LinkManual {
			continue
		}
		tr := e.ambient.byKey[in.Name]
		if tr == nil {
			continue
		}
		s := poll.State{Name: in.Name, Why: "no entry yet (plateau enter)"}
		if v, at, ok := tr.latest(); ok {
			tr.mu.Lock()
			s.Reads = uint64(tr.n)
			tr.mu.Unlock()
			s.Why = ""
			s.Last = drivers.Reading{Time: at, Pa: v}
			if a, ok := config.AmbientOf(in); ok {
				s.Last.Raw, s.Last.RawUnit = a.Unit.FromBase(v), a.Unit.Symbol
			}
		}
		out = append(out, s)
	}
	return out
}
