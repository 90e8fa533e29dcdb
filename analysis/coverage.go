package analysis

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// CoverageMethod says how the coverage factor k is chosen.
type CoverageMethod string

const (
	// CoverageConventional is the calibration guidelines' convention: the
	// hysteresis, repeatability and zero terms are rectangular, and a fixed
	// k (2 unless set) is taken as giving about 95 %.
	CoverageConventional CoverageMethod = "conventional"
	// CoverageStudentT computes the effective degrees of freedom by the
	// Welch–Satterthwaite formula (JCGM 100:2008 G.4.1) and takes k from
	// Student's t at 95.45 %, the probability k = 2 gives for a normal
	// distribution.
	CoverageStudentT CoverageMethod = "student-t"
)

// coverageProbability is the two-sided probability of ±2σ of a normal
// distribution, % (JCGM 100:2008 Table G.1 lists 95.45 % for k = 2; from
// memory, and checked by TestStudentTAgainstGUMTableG2's ν = ∞ row).
const coverageProbability = 95.45

// StudentT returns the coverage factor t_p(ν) for a two-sided coverage
// probability p (in %) and ν degrees of freedom; ν = +Inf gives the normal
// quantile. A fractional ν is used as it is; callers that follow JCGM 100
// G.4.1 truncate it first.
func StudentT(probabilityPercent, nu float64) (float64, error) {
	if !(probabilityPercent > 0 && probabilityPercent < 100) {
		return 0, fmt.Errorf("coverage probability %g %%: must lie between 0 and 100", probabilityPercent)
	}
	q := 0.5 + probabilityPercent/200
	if math.IsInf(nu, 1) {
		return distuv.UnitNormal.Quantile(q), nil
	}
	if !(nu >= 1) || math.IsNaN(nu) {
		return 0, fmt.Errorf("degrees of freedom %g: must be at least 1", nu)
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(q), nil
}

// EffectiveDOF is the Welch–Satterthwaite ν_eff = u_c⁴ / Σ(u_i⁴/ν_i) of
// the evaluated contributions (JCGM 100:2008 G.4.1, eq. G.2b); a term
// without degrees of freedom counts as infinite. It returns +Inf when every
// term is Type B, and NaN when u_c is 0.
func EffectiveDOF(terms []Contribution) float64 {
	var v, d float64
	for _, c := range terms {
		if !c.Evaluated {
			continue
		}
		u2 := c.StandardUncertaintyPa * c.StandardUncertaintyPa
		v += u2
		if c.DegreesOfFreedom != nil && u2 > 0 {
			d += u2 * u2 / *c.DegreesOfFreedom
		}
	}
	if v == 0 {
		return math.NaN()
	}
	if d == 0 {
		return math.Inf(1)
	}
	return v * v / d
}

// combined is u_c = √Σu² over the evaluated terms, leaving out the named one.
func combined(terms []Contribution, without string) float64 {
	var v float64
	for _, c := range terms {
		if c.Evaluated && (without == "" || c.Name != without) {
			v += c.StandardUncertaintyPa * c.StandardUncertaintyPa
		}
	}
	return math.Sqrt(v)
}

// coverageFor returns k and ν_eff (nil when not computed or infinite) for a
// budget, leaving out the named term.
func coverageFor(opt Options, terms []Contribution, without string) (float64, *float64) {
	if opt.Coverage != CoverageStudentT {
		return opt.CoverageFactor, nil
	}
	var kept []Contribution
	for _, c := range terms {
		if without == "" || c.Name != without {
			kept = append(kept, c)
		}
	}
	nu := EffectiveDOF(kept)
	if math.IsNaN(nu) || math.IsInf(nu, 1) {
		return 2, nil // all Type B (or nothing): the normal distribution's k = 2 at 95.45 %
	}
	// JCGM 100:2008 G.4.1 note: truncate ν_eff to the next lower integer
	// (from memory, not yet confirmed against the primary document).
	used := math.Max(math.Floor(nu), 1)
	k, err := StudentT(coverageProbability, used)
	if err != nil {
		return 2, nil // unreachable: used ≥ 1
	}
	return k, &nu
}

// coverageStatement is the sentence the report prints about U.
func coverageStatement(opt Options) Coverage {
	if opt.Coverage == CoverageStudentT {
		return Coverage{Method: CoverageStudentT, Probability: coverageProbability,
			Statement: fmt.Sprintf("The expanded uncertainty U is the combined standard uncertainty multiplied by the coverage factor k of each point, "+
				"taken from Student's t for the effective degrees of freedom ν_eff (Welch–Satterthwaite) at a coverage probability of %g %%.", coverageProbability)}
	}
	c := Coverage{Method: CoverageConventional,
		Statement: fmt.Sprintf("The expanded uncertainty U is the combined standard uncertainty multiplied by the coverage factor k = %g "+
			"(the calibration guidelines' convention: hysteresis, repeatability and zero deviation as rectangular terms)", opt.CoverageFactor)}
	if opt.CoverageFactor == 2 {
		c.Probability = coverageProbability
		c.Statement += "; for a normal distribution this covers about 95 % of the values that could reasonably be attributed to the error."
	} else {
		c.Statement += ", as chosen for this run."
	}
	return c
}
