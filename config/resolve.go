package config

import (
	"fmt"
	"math"
	"strings"
	"time"

	"plateau/analysis/units"
)

// maxPressurePa bounds every pressure in the file. The highest ranges in
// trade use are a few thousand bar (common practice); a value beyond this
// is a wrong unit or a typo, and would overflow nothing but help no one.
const maxPressurePa = 1e10 // 100 000 bar

// resolve converts every quantity, date and derived default of the file to
// its typed value (the …Pa fields and the like), once. Problems here are
// values that cannot be read; validate then judges the typed values only.
func (c *Config) resolve(p *Problems) {
	c.resolveReference(p)
	c.resolveLoopMeter(p)
	for i := range c.Instruments {
		c.Instruments[i].resolve(p, fmt.Sprintf("instruments[%d]", i))
	}
	c.resolveDevices(p) // fills c.Devices and c.Device
	c.resolveModes(p)
	c.resolveSafety(p)
	c.resolveProcedure(p)
	c.resolveSimulator(p)
	c.resolveCertificate(p)
}

// pressure parses a quantity that must be a pressure; "" is reported as
// missing when required.
func pressure(p *Problems, key, val string, required bool) (float64, bool) {
	if strings.TrimSpace(val) == "" {
		if required {
			p.bad(key, "", "is required: give a pressure with its unit, e.g. \"16 bar\"")
		}
		return 0, false
	}
	q, err := units.ParseQuantity(val)
	if err != nil {
		p.bad(key, val, "%v", err)
		return 0, false
	}
	if q.Percent {
		p.bad(key, val, "must be a pressure with a unit, not a percentage")
		return 0, false
	}
	pa, _ := q.Pa()
	if !(math.Abs(pa) <= maxPressurePa) {
		p.bad(key, val, "is beyond any pressure plateau calibrates (more than 100 000 bar): check the unit")
		return 0, false
	}
	return pa, true
}

// percent parses a quantity that must be a percentage within [0, most].
func percent(p *Problems, key, val string, most float64) (float64, bool) {
	if strings.TrimSpace(val) == "" {
		return 0, false
	}
	q, err := units.ParseQuantity(val)
	if err != nil {
		p.bad(key, val, "%v", err)
		return 0, false
	}
	if !q.Percent {
		p.bad(key, val, "must be a percentage such as \"0.25 %%\"")
		return 0, false
	}
	if q.Value < 0 || q.Value > most {
		p.bad(key, val, "must be from 0 %% to %s %%", fmtNum(most))
		return 0, false
	}
	return q.Value, true
}

// pressureOrSpan parses a quantity given as a pressure or as a percentage
// of span; pct says which it was.
func pressureOrSpan(p *Problems, key, val string, span float64) (pa float64, pct, ok bool) {
	q, err := units.ParseQuantity(val)
	if err != nil {
		p.bad(key, val, "%v", err)
		return 0, false, false
	}
	if q.Percent {
		if q.Value < 0 || q.Value > 100 {
			p.bad(key, val, "must be from 0 %% to 100 %% of span")
			return 0, true, false
		}
		return q.Value / 100 * span, true, true
	}
	pa, ok = pressure(p, key, val, true)
	return pa, false, ok
}

// resolve reads a device's range, resolution and accuracy. keyOf names
// the key each field came from ("device.upper", or
// "instruments[3].device.upper" for a device of its own).
func (d *Device) resolve(p *Problems, keyOf func(string) string) {
	d.LowerPa, d.okLower = pressure(p, keyOf("lower"), d.Lower, true)
	d.UpperPa, d.okUpper = pressure(p, keyOf("upper"), d.Upper, true)
	if d.Unit == "" {
		if q, err := units.ParseQuantity(d.Upper); err == nil && !q.Percent {
			d.Unit = q.Unit.Symbol
		}
	}
	d.ResolutionPa, d.okResolution = pressure(p, keyOf("resolution"), d.Resolution, true)
	d.Grade = strings.ToUpper(strings.TrimSpace(d.Grade))
	lim := &d.Limit
	lim.SpanPct, _ = percent(p, keyOf("limit.span"), lim.Span, 100)
	lim.ReadingPct, _ = percent(p, keyOf("limit.reading"), lim.Reading, 100)
	lim.FloorPa, _ = pressure(p, keyOf("limit.floor"), lim.Floor, false)
	d.resolveMode(p, keyOf)
	d.resolveConditions(p, keyOf)
}

func (c *Config) resolveReference(p *Problems) {
	r := &c.Reference
	r.UncertaintyPct, _ = percent(p, "reference.uncertainty", r.Uncertainty, 10)
	r.FloorPa, _ = pressure(p, "reference.floor", r.Floor, false)
	r.ExpiresAt = time.Time{}
	if r.Expires != "" {
		t, err := time.Parse("2006-01-02", strings.TrimSpace(r.Expires))
		if err != nil {
			p.bad("reference.expires", r.Expires, "must be a date YYYY-MM-DD")
		}
		r.ExpiresAt = t
	}
	r.LowerPa, r.okLower = pressure(p, "reference.lower", r.Lower, false)
	r.UpperPa, r.okUpper = pressure(p, "reference.upper", r.Upper, false)
	r.StabilityFloorPa, _ = pressure(p, "reference.stability_floor", r.StabilityFloor, false)
	r.ResolutionPa, _ = pressure(p, "reference.resolution", r.Resolution, false)
}

func (in *Instrument) resolve(p *Problems, key string) {
	if in.Link.Kind == LinkSim && in.SimVia == "" {
		in.SimVia = LinkModbusTCP
	}
	in.resolveMeasures(p, key)
	if in.Loop.Enabled {
		in.Loop.LowerPa, _ = pressure(p, key+".current_loop.lower", in.Loop.Lower, true)
		in.Loop.UpperPa, _ = pressure(p, key+".current_loop.upper", in.Loop.Upper, true)
	}
}

// The safety limit sits a little above full scale, as a fraction of span:
// room for noise and a small overshoot at the top point, not a real
// over-range (common practice; gauges take full scale only briefly). The
// default is defaultOverRange; an explicit limit may go up to maxOverRange.
const (
	defaultOverRange = 0.02
	maxOverRange     = 0.05
)

// safetyCeiling is the highest limit allowed: the lowest full scale of
// every device and of the reference, each with an over-range allowance.
func (c *Config) safetyCeiling(allow float64) float64 {
	l := math.Inf(1)
	for _, dut := range c.Devices {
		d := dut.Device
		l = math.Min(l, d.UpperPa+allow*(d.UpperPa-d.LowerPa))
	}
	if r := c.Reference; r.UpperPa > r.LowerPa {
		// in the devices' mode: an absolute reference's full scale is 1 atm lower in gauge
		l = math.Min(l, r.UpperPa-c.referenceShiftPa()+allow*(r.UpperPa-r.LowerPa))
	}
	return l
}

func (c *Config) resolveSafety(p *Problems) {
	s := &c.Safety
	s.Set, s.MaxPressurePa = false, 0
	if !c.rangesKnown() {
		return // a device range is wrong and reported; no limit can be worked out
	}
	if s.MaxPressure == "" {
		s.MaxPressurePa, s.Set = c.safetyCeiling(defaultOverRange), true
		return
	}
	s.MaxPressurePa, s.Set = pressure(p, "safety.max_pressure", s.MaxPressure, true)
}

// rangesKnown says every device has a range that could be read and is
// the right way round, so that limits and points can be judged.
func (c *Config) rangesKnown() bool {
	if len(c.Devices) == 0 {
		return false
	}
	for _, dut := range c.Devices {
		if d := dut.Device; !d.okLower || !d.okUpper || d.UpperPa <= d.LowerPa {
			return false
		}
	}
	return true
}

func (c *Config) resolveProcedure(p *Problems) {
	pr := &c.Procedure
	d := c.Device
	span := d.UpperPa - d.LowerPa
	pr.PointsPa, pr.pointIndex = pr.PointsPa[:0], pr.pointIndex[:0]
	if !c.rangesKnown() || len(pr.Points) > maxPoints {
		return // the range is wrong or the list too long: reported by validate
	}
	for i, s := range pr.Points {
		if pa, pct, ok := pressureOrSpan(p, fmt.Sprintf("procedure.points[%d]", i), s, span); ok {
			if pct {
				pa += d.LowerPa
			}
			pr.PointsPa = append(pr.PointsPa, pa)
			pr.pointIndex = append(pr.pointIndex, i)
		}
	}
	st := &pr.Settle
	tol := c.smallestPermissiblePa()
	if st.MaxDrift == "" {
		// Our own default: a tenth of the permissible error per minute.
		st.MaxDriftPaPerS = 0.1 * tol / 60
	} else if drift, ok := pressure(p, "procedure.settle.max_drift", st.MaxDrift, false); ok {
		st.MaxDriftPaPerS = drift / 60
	}
	if st.MaxSpread == "" {
		st.MaxSpreadPa = math.Max(0.1*tol, d.ResolutionPa)
	} else if spread, ok := pressure(p, "procedure.settle.max_spread", st.MaxSpread, false); ok {
		st.MaxSpreadPa = spread
	}
	if st.Band != "" {
		st.BandPa, _, _ = pressureOrSpan(p, "procedure.settle.band", st.Band, span)
	}
}

// resolveSimulator makes the simulated device the configured one unless
// told otherwise, and reads its quantities once to report those that
// cannot be read (the simulator keeps them as text).
func (c *Config) resolveSimulator(p *Problems) {
	s := &c.Simulator
	if s.Device.Kind == "" {
		s.Device.Kind = c.Device.Kind
	}
	if s.Device.Lower == "" {
		s.Device.Lower = c.Device.Lower
	}
	if s.Device.Upper == "" {
		s.Device.Upper = c.Device.Upper
	}
	for _, q := range []struct{ key, val string }{
		{"simulator.source.leak", s.Source.Leak}, {"simulator.source.max", s.Source.Max},
		{"simulator.reference.noise", s.Reference.Noise}, {"simulator.reference.resolution", s.Reference.Resolution},
		{"simulator.device.zero", s.Device.Zero}, {"simulator.device.nonlinearity", s.Device.Nonlinearity},
		{"simulator.device.dead_band", s.Device.DeadBand}, {"simulator.device.resolution", s.Device.Resolution},
		{"simulator.device.noise", s.Device.Noise}, {"simulator.device.lower", s.Device.Lower},
		{"simulator.device.upper", s.Device.Upper},
	} {
		pressure(p, q.key, q.val, false)
	}
	percent(p, "simulator.reference.error", s.Reference.Error, 100)
	percent(p, "simulator.device.span", s.Device.Span, 100)
	c.resolveSimulatedDevices(p)
}
