package analysis

import (
	"testing"

	"plateau/analysis/units"
)

// Source: ILAC-G8:09/2019 §4.2.1–4.2.3 (REFERENCES.md §4, [C]); cases on
// each side of each boundary with MPE = 10 and U = 3. Ties follow the
// document's wording (pp. 9–10): pass is "below" MPE − U; [MPE − U, MPE] is
// conditional pass and [MPE, MPE + U] conditional fail for values "above"
// the MPE; under simple acceptance an error equal to the MPE passes.
func TestDecideBoundaries(t *testing.T) {
	const mpe, U = 10.0, 3.0
	cases := []struct {
		err                     float64
		simple, guarded, states Outcome
	}{
		{0, Pass, Pass, Pass},
		{6.999, Pass, Pass, Pass},
		{7, Pass, Fail, ConditionalPass}, // on MPE − U: not below the acceptance limit
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
	// TG 13 accepts a correction up to and including 15 kPa; ILAC-G8 §4.2.2,
	// whose wording the guarded rule follows, passes only one below it.
	if Decide(RuleGuarded, 14.99*kPa, mpe, 25*kPa) != Pass || Decide(RuleGuarded, 15.01*kPa, mpe, 25*kPa) != Fail {
		t.Error("a 14.99 kPa correction must pass and 15.01 kPa must fail")
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
