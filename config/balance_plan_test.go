package config

import (
	"strings"
	"testing"
)

const planKey = "      masses_correlated: true\n"

func withPlan(t *testing.T, loadings string, more ...string) string {
	t.Helper()
	return strings.NewReplacer(append([]string{planKey, planKey + "      loadings: " + loadings + "\n"}, more...)...).Replace(readFile(t, "../testdata/config/balance.yaml"))
}

// The plan's loadings resolve by point, and a step's target finds its
// loading: what the prompt and status tell the operator to load.
func TestBalancePlan(t *testing.T) {
	cfg, err := Parse([]byte(withPlan(t, "[vent, P1+M1+M2, P1+M1+M2+M3, \"P1 + M1 + M2 + M3 + M4\", P1+M1+M2+M3+M4+M5]")), "plan.yaml")
	if err != nil {
		t.Fatal(err)
	}
	b := cfg.ReferenceBalance()
	for _, tc := range []struct {
		target float64
		want   string
		ok     bool
	}{{0, Vent, true}, {4e5, "P1+M1+M2", true}, {12e5, "P1+M1+M2+M3+M4", true}, {16e5, "P1+M1+M2+M3+M4+M5", true}, {5e5, "", false}} {
		if got, ok := b.PlannedLoading(cfg.Procedure, tc.target); got != tc.want || ok != tc.ok {
			t.Errorf("target %v Pa: %q %v, want %q %v", tc.target, got, ok, tc.want, tc.ok)
		}
	}
	// No plan: nothing to say.
	plain, err := Parse([]byte(readFile(t, "../testdata/config/balance.yaml")), "plain.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if got, ok := plain.ReferenceBalance().PlannedLoading(plain.Procedure, 4e5); ok {
		t.Errorf("no plan, yet %q", got)
	}
}

// Every wrong loading of a plan is refused in one pass, with its line,
// key and what is wrong.
func TestBalancePlanProblems(t *testing.T) {
	for _, tc := range []struct {
		name, loadings string
		more           []string
		want           []string
	}{
		{"count", "[vent, P1+M1+M2]", nil, []string{
			`plan.yaml:31: instruments[0].balance.loadings = "2 loadings": needs one loading per point of procedure.points (5)`}},
		{"wrong pieces", "[P1, P1+M1, P1+M1+M2+M3, P1+M1+M9+M3+M4, vent]", nil, []string{
			`instruments[0].balance.loadings[0] = "P1": gives 1.00 bar, but procedure.points[0] is 0.00 bar: the loading must be within 0.16 bar of its point`,
			`instruments[0].balance.loadings[1] = "P1+M1": gives 2.00 bar, but procedure.points[1] is 4.00 bar`,
			`instruments[0].balance.loadings[3] = "P1+M1+M9+M3+M4": piece "M9" is not in the mass set`,
			`instruments[0].balance.loadings[4] = "vent": is the loading of procedure.points[4] = 100 %: vented, the balance gives zero, not 16.00 bar`}},
		{"empty piece", "[vent, P1++M2, P1+M1+M2+M3, P1+M1+M2+M3+M4, P1+M1+M2+M3+M4+M5]", nil, []string{
			`loadings[1] = "P1++M2": "P1++M2": piece 2 is empty`}},
		{"over the limit", "[vent, P1+M1+M2, P1+M1+M2+M3, P1+M1+M2+M3+M4, P1+M1+M2+M3+M4+M5]",
			[]string{"  upper: 16 bar\n  resolution", "  upper: 16 bar\n  resolution", "procedure:\n", "safety:\n  max_pressure: 15 bar\nprocedure:\n"}, []string{
				`loadings[4] = "P1+M1+M2+M3+M4+M5": gives 16.00 bar, above safety.max_pressure (15.00 bar): plateau load would refuse it`}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse([]byte(withPlan(t, tc.loadings, tc.more...)), "plan.yaml")
			ps, ok := AsProblems(err)
			if !ok {
				t.Fatalf("want problems, got %v", err)
			}
			for _, w := range tc.want {
				if !strings.Contains(ps.Error(), w) {
					t.Errorf("missing %q in\n%v", w, ps)
				}
			}
		})
	}
}
