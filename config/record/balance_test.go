package record

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"plateau/analysis/balance"
	"plateau/config"
)

// loadBalance loads the invented dead-weight tester example, with the
// replacements applied, from a temporary copy.
func loadBalance(t *testing.T, pairs ...string) *config.Config {
	t.Helper()
	src, err := os.ReadFile("../../testdata/config/balance.yaml")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "balance.yaml")
	if err := os.WriteFile(path, []byte(strings.NewReplacer(pairs...).Replace(string(src))), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load(path)
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

// With a pressure balance as the reference, the frozen record's reference
// uncertainty is the balance's own budget, not the reference: section's
// 0.01 %: the line covers the expanded uncertainty of every loading the run
// can use, and at the top it is that loading's own uncertainty.
func TestRecordTakesTheBalanceBudget(t *testing.T) {
	for _, tc := range []struct {
		name     string
		pairs    []string
		loadings int // the loadings the line must cover
	}{
		// No plan of loadings: every loading with the piston P1 (2⁵).
		{"every loading", nil, 32},
		{"the plan's loadings", []string{"      masses_correlated: true\n",
			"      masses_correlated: true\n      loadings: [vent, P1+M1+M2, P1+M1+M2+M3, P1+M1+M2+M3+M4, P1+M1+M2+M3+M4+M5]\n"}, 4},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cfg := loadBalance(t, tc.pairs...)
			b := cfg.ReferenceBalance()
			results, err := b.PlannedResults()
			if err != nil {
				t.Fatal(err)
			}
			if len(results) != tc.loadings {
				t.Fatalf("%d loadings, want %d", len(results), tc.loadings)
			}
			ref := Of(cfg).Reference
			if ref.PercentOfReading == cfg.Reference.UncertaintyPct || ref.K != 2 {
				t.Fatalf("reference %+v: still the reference: section's", ref)
			}
			top := 0.0
			for _, r := range results {
				line := ref.PercentOfReading/100*r.LevelPa + ref.FloorPa
				if line < r.Expanded(2)*(1-1e-12) {
					t.Errorf("%v: the line gives %.2f Pa, below the budget's %.2f Pa", r.Loaded, line, r.Expanded(2))
				}
				if r.LevelPa > top {
					top = r.LevelPa
					// At the top the line is the budget's, up to rounding to two digits.
					if d := line/r.Expanded(2) - 1; d > 0.03 {
						t.Errorf("%v: the line is %.1f %% above the budget", r.Loaded, 100*d)
					}
				}
			}
			// A hand estimate at 16 bar (every piece, at 20 °C; standard
			// uncertainties from the example's certificate values): area 25 ppm,
			// the correlated masses 10 ppm, gravity 2.5 ppm, air buoyancy
			// 0.015/8000 = 1.9 ppm, piston temperature 22.5 ppm/K × 0.1 K =
			// 2.25 ppm, distortion 0.4 ppm: √Σ² ≈ 27.2 ppm, k = 2 gives 54 ppm.
			if got := 1e4 * (ref.PercentOfReading + ref.FloorPa/top*100); math.Abs(got-54.4) > 2 {
				t.Errorf("the line at 16 bar is %.1f ppm of reading, the hand estimate 54.4 ppm", got)
			}
			// The head to the dial stays the run's head correction.
			if ref.Head.ZDUT != 1.10 || ref.Head.ZRef != 0.90 {
				t.Errorf("head %+v", ref.Head)
			}
		})
	}
}

// The record of a balance run is the same when frozen and read back, so
// every later report of the run is computed with the balance's budget.
func TestBalanceRecordRoundTrip(t *testing.T) {
	cfg := loadBalance(t)
	run := Of(cfg)
	back, err := Decode(run.Encode())
	if err != nil {
		t.Fatal(err)
	}
	results, err := cfg.ReferenceBalance().PlannedResults()
	if err != nil {
		t.Fatal(err)
	}
	pct, floor := balance.Cover(results, 2)
	if back.Reference.PercentOfReading != pct || back.Reference.FloorPa != floor || back.Reference.K != 2 {
		t.Errorf("read back %+v, want %g %% + %g Pa at k = 2", back.Reference, pct, floor)
	}
}
