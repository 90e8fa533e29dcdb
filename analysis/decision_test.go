package analysis

import (
	"testing"

	"plateau/analysis/units"
)

// Source: ILAC-G8:09/2019 §4.2.1–4.2.3 (REFERENCES.md §4, [C]); cases on
// each side of each boundary with MPE = 10 and U = 3.
func TestDecideBoundaries(t *testing.T) {
	const mpe, U = 10.0, 3.0
	cases := []struct {
		err                     float64
		simple, guarded, states Outcome
	}{
		{0, Pass, Pass, Pass},
		{6.999, Pass, Pass, Pass},
		{7, Pass, Pass, Pass}, // on MPE − U: acceptance limit belongs to pass
		{7.001, Pass, Fail, ConditionalPass},
		{10, Pass, Fail, ConditionalPass}, // on the MPE
		{10.001, Fail, Fail, ConditionalFail},
		{13, Fail, Fail, ConditionalFail}, // on MPE + U
		{13.001, Fail, Fail, Fail},
	}
	for _, c := range cases {
		for rule, want := range map[DecisionRule]Outcome{RuleSimple: c.simple, RuleGuarded: c.guarded, RuleFourState: c.states} {
			if got := Decide(rule, c.err, mpe, U); got != want {
				t.Errorf("%s rule, |Δ| = %g: %s, want %s", rule, c.err, got, want)
			}
		}
	}
	if got := Decide("coin-toss", 0, mpe, U); got != Fail {
		t.Errorf("unknown rule gave %s", got)
	}
}

// Source: MSL Technical Guide 13, compliance example (REFERENCES.md §1.4, [C]):
// class 1 gauge, span 4000 kPa → MPE 40 kPa; with U = 25 kPa every
// correction must be ≤ 15 kPa.
func TestMSLComplianceExample(t *testing.T) {
	kPa := units.Kilopascal.Pa
	d := Device{LowerPa: 0, UpperPa: 4000 * kPa, ResolutionPa: 1 * kPa, Accuracy: Accuracy{EN837Class: 1}}
	mpe := d.MPE(2000 * kPa)
	if mpe != 40*kPa {
		t.Fatalf("MPE %g Pa, want 40 kPa", mpe)
	}
	if al := AcceptanceLimit(RuleGuarded, mpe, 25*kPa); al != 15*kPa {
		t.Fatalf("acceptance limit %g Pa, want 15 kPa", al)
	}
	if Decide(RuleGuarded, 15*kPa, mpe, 25*kPa) != Pass || Decide(RuleGuarded, 15.01*kPa, mpe, 25*kPa) != Fail {
		t.Error("a 15 kPa correction must pass and 15.01 kPa must fail")
	}
}

func TestWorse(t *testing.T) {
	order := []Outcome{Pass, ConditionalPass, ConditionalFail, Fail}
	for i, a := range order {
		for j, b := range order {
			want := order[max(i, j)]
			if got := Worse(a, b); got != want {
				t.Errorf("Worse(%s, %s) = %s, want %s", a, b, got, want)
			}
		}
	}
}
