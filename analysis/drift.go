package analysis

import (
	"math"
	"time"
)

// drift summarises the cycle-to-cycle behaviour of a run with two or more
// cycles. Trends need at least three timed values (so the slope has a
// standard uncertainty) and are left out otherwise.
func drift(points []PointResult, zeros []zeroReading) *Drift {
	d := &Drift{Points: make([]PointDrift, 0, len(points))}
	var t0 time.Time
	early := func(t time.Time) {
		if !t.IsZero() && (t0.IsZero() || t.Before(t0)) {
			t0 = t
		}
	}
	for _, p := range points {
		for _, r := range p.Readings {
			early(r.Time)
		}
	}
	for _, z := range zeros {
		early(z.t)
	}

	for _, p := range points {
		pd := PointDrift{Index: p.Index, NominalPa: p.NominalPa}
		// Readings are sorted by cycle, so one pass groups them.
		for i := 0; i < len(p.Readings); {
			j, sum, timed := i, 0.0, true
			var tsum time.Duration
			for ; j < len(p.Readings) && p.Readings[j].Cycle == p.Readings[i].Cycle; j++ {
				sum += p.Readings[j].ErrorPa
				timed = timed && !p.Readings[j].Time.IsZero()
				tsum += p.Readings[j].Time.Sub(t0)
			}
			ce := CycleError{Cycle: p.Readings[i].Cycle, ErrorPa: sum / float64(j-i)}
			if timed {
				ce.Time = t0.Add(tsum / time.Duration(j-i))
			}
			pd.CycleErrors = append(pd.CycleErrors, ce)
			i = j
		}
		errs := make([]float64, len(pd.CycleErrors))
		times := make([]time.Time, len(pd.CycleErrors))
		for i, ce := range pd.CycleErrors {
			errs[i], times[i] = ce.ErrorPa, ce.Time
			if i > 0 {
				pd.LargestCycleChangePa = math.Max(pd.LargestCycleChangePa, math.Abs(ce.ErrorPa-errs[i-1]))
			}
		}
		pd.StdDevPa = sampleSD(errs)
		pd.Trend = trend(t0, times, errs)
		d.LargestCycleChangePa = math.Max(d.LargestCycleChangePa, pd.LargestCycleChangePa)
		d.Points = append(d.Points, pd)
	}

	zt := make([]time.Time, len(zeros))
	ze := make([]float64, len(zeros))
	for i, z := range zeros {
		zt[i], ze[i] = z.t, z.err
	}
	d.ZeroTrend = trend(t0, zt, ze)
	return d
}

// trend fits value against hours since t0; nil when any time is missing,
// fewer than three values exist or all times are equal.
func trend(t0 time.Time, times []time.Time, values []float64) *Trend {
	if len(times) < 3 {
		return nil
	}
	hours := make([]float64, len(times))
	for i, t := range times {
		if t.IsZero() {
			return nil
		}
		hours[i] = t.Sub(t0).Hours()
	}
	f, err := FitLeastSquares(hours, values)
	if err != nil {
		return nil
	}
	return &Trend{SlopePaPerHour: f.Slope, SlopeStdUncertaintyPerHour: f.SlopeSD, N: f.N}
}
