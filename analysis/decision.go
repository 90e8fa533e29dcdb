package analysis

import (
	"fmt"
	"math"
)

// DecisionRule is the ILAC-G8:09/2019 decision rule agreed before measuring.
type DecisionRule string

const (
	// RuleSimple is binary simple acceptance (G8 §4.2.1): the guard band is
	// zero, pass if |error| ≤ MPE.
	RuleSimple DecisionRule = "simple"
	// RuleGuarded is binary acceptance with guard band w = U (G8 §4.2.2):
	// pass if |error| < MPE − U.
	RuleGuarded DecisionRule = "guarded"
	// RuleFourState is the non-binary rule with guard band w = U (G8 §4.2.3):
	// pass, conditional pass, conditional fail, fail.
	RuleFourState DecisionRule = "four-state"
)

// Outcome is a conformity statement at one point or overall.
type Outcome string

const (
	Pass            Outcome = "pass"
	ConditionalPass Outcome = "conditional-pass"
	ConditionalFail Outcome = "conditional-fail"
	Fail            Outcome = "fail"
)

// severity orders outcomes so the overall verdict is the worst point's.
func (o Outcome) severity() int {
	switch o {
	case Pass:
		return 0
	case ConditionalPass:
		return 1
	case ConditionalFail:
		return 2
	default:
		return 3
	}
}

// Worse returns the more severe of two outcomes.
func Worse(a, b Outcome) Outcome {
	if b.severity() > a.severity() {
		return b
	}
	return a
}

// ErrNoRule is returned when no decision rule was chosen. There is no
// default: ILAC-G8:09/2019 asks that the rule be agreed with the customer
// before measuring.
var ErrNoRule = fmt.Errorf("no decision rule chosen: agree one with the customer before measuring (ILAC-G8:09/2019) and give it as %q (|error| ≤ MPE), %q (|error| < MPE − U) or %q (pass, conditional pass, conditional fail, fail)",
	RuleSimple, RuleGuarded, RuleFourState)

func (r DecisionRule) validate() error {
	switch r {
	case RuleSimple, RuleGuarded, RuleFourState:
		return nil
	case "":
		return ErrNoRule
	}
	return fmt.Errorf("unknown decision rule %q (one of %q, %q, %q)", r, RuleSimple, RuleGuarded, RuleFourState)
}

// AcceptanceLimit is AL = TL − w: the MPE itself under simple acceptance,
// MPE − U under the guarded and four-state rules (w = U, as in G8's figure).
// It may be negative when U exceeds the MPE: nothing can then pass.
func AcceptanceLimit(rule DecisionRule, mpe, expanded float64) float64 {
	if rule == RuleSimple {
		return mpe
	}
	return mpe - expanded
}

// boundarySlack is the relative slack (of the MPE) given to every boundary
// comparison, so an error that equals a limit on paper is not pushed to the
// wrong side by the last bit of a float64 subtraction. One part in 10⁹ of a
// tolerance is far below the resolution of any pressure instrument.
const boundarySlack = 1e-9

// TieRule is how a value exactly on a limit is judged, following the
// wording of ILAC-G8:09/2019 §4.2 (pp. 9–10): §4.2.2 and §4.2.3 pass a
// result that is *below* the acceptance limit TL − w, and §4.2.3 reports
// the closed intervals [TL − w, TL] as conditional pass and [TL, TL + w]
// as conditional fail, with conditional fail for results *above* TL. So a
// value on TL − w is not a pass but a conditional pass (guarded: a fail),
// a value on TL is a conditional pass, one on TL + w a conditional fail.
// §4.2.1 (simple acceptance) words only "below" and "above" TL; a value on
// TL is taken as a pass there, as §4.2.3 puts TL on the conforming side and
// a specification limits the error to "not more than" the MPE.
const TieRule = "ties follow ILAC-G8:09/2019 §4.2: under simple acceptance an error equal to the MPE passes; " +
	"under the guarded and four-state rules a pass needs an error below MPE − U, " +
	"so an error equal to MPE − U or to the MPE is a conditional pass (guarded: a fail) and one equal to MPE + U a conditional fail"

// Decide applies rule to the absolute error of indication |Δ| at a point
// with maximum permissible error mpe and expanded uncertainty U (ILAC-G8:2019
// §4.2; REFERENCES.md §4), ties as TieRule says. NaN errors and unknown
// rules fail.
func Decide(rule DecisionRule, absError, mpe, expanded float64) Outcome {
	slack := boundarySlack * math.Abs(mpe)
	atOrBelow := func(v, limit float64) bool { return v <= limit+slack }
	below := func(v, limit float64) bool { return v < limit-slack }
	switch rule {
	case RuleSimple:
		if atOrBelow(absError, mpe) {
			return Pass
		}
		return Fail
	case RuleGuarded:
		if below(absError, mpe-expanded) {
			return Pass
		}
		return Fail
	case RuleFourState:
		switch {
		case below(absError, mpe-expanded):
			return Pass
		case atOrBelow(absError, mpe):
			return ConditionalPass
		case atOrBelow(absError, mpe+expanded):
			return ConditionalFail
		}
	}
	return Fail // also for an unknown rule: nothing passes under a rule nobody agreed
}
