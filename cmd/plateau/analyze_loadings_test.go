package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// plateau analyze on a table of loadings (an invented run on the invented
// dead-weight tester of testdata/config/balance.yaml): the reference of
// each reading is the balance's pressure at the dial, written out here by
// hand from the equation, and the reference uncertainty is the balance's.
func TestAnalyzeLoadings(t *testing.T) {
	cfg := filepath.Join(mustWd(t), "../../testdata/config/balance.yaml")
	table := filepath.Join(mustWd(t), "../../testdata/recorded/balance-loadings.csv")
	t.Chdir(t.TempDir())
	out, err := runPlateau(t, "analyze", "--config", cfg, table, "--format", "json")
	if err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	var doc struct {
		Result struct {
			Points []struct {
				Readings []struct {
					Direction string  `json:"direction"`
					Reference float64 `json:"reference_pa"`
				} `json:"readings"`
			} `json:"points"`
		} `json:"result"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	// P1+M1+M2 rising at 21.3 °C: conventional masses in air of 1.19 kg/m³
	// (P1 of density 7900, the others taken as 8000), g = 9.81075,
	// A0 = 98.0665 mm² at 20 °C with 22.5 ppm/K, λ = 0.5 ppm/MPa, and the
	// dial 0.20 m above the piston in oil of 860 kg/m³.
	const g = 9.81075
	w := 1.00003*(1-1.2/8000)*(7900-1.19)/(7900-1.2) + (0.99998+2.00004)*(1-1.19/8000)
	q := w * g / (98.0665e-6 * (1 + 22.5e-6*1.3))
	p := q
	for range 5 {
		p = q / (1 + 0.5e-12*p)
	}
	want := p - (860-1.19)*g*0.20
	got := doc.Result.Points[1].Readings[0]
	if got.Direction != "up" || math.Abs(got.Reference-want) > 1e-3 {
		t.Errorf("4 bar rising: reference %.4f Pa, want %.4f Pa", got.Reference, want)
	}

	out, err = runPlateau(t, "analyze", "--config", cfg, table)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"Reference uncertainty  0.0087 % of reading + 0.00076 bar (k = 2)", "3.984   4.025  0.041", "VERDICT: PASS"} {
		if !strings.Contains(out, want) {
			t.Errorf("missing %q in\n%s", want, out)
		}
	}
}

// A table of loadings needs a balance: without a configuration, or with a
// reference that is not a balance, analyze says so; a bad row is named by
// line and column.
func TestAnalyzeLoadingsRefused(t *testing.T) {
	table := filepath.Join(mustWd(t), "../../testdata/recorded/balance-loadings.csv")
	sim := filepath.Join(mustWd(t), "../../testdata/config/sim.yaml")
	cfg := filepath.Join(mustWd(t), "../../testdata/config/balance.yaml")
	dir := t.TempDir()
	t.Chdir(dir)
	bad := filepath.Join(dir, "bad.csv")
	if err := os.WriteFile(bad, []byte("cycle,direction,nominal,loading,piston_temperature,dut,unit\n1,up,4,P1+M7,21.3,4.00,bar\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"analyze", table, "--rule", "simple", "--upper", "16 bar", "--resolution", "0.05 bar", "--class", "1", "--ref-uncertainty", "0.01 %"},
			"is a table of loadings (it has a loading column): its reference pressures are worked out from the pressure balance of the configuration file"},
		{[]string{"analyze", "--config", sim, table}, "the reference of " + sim + " is not a pressure balance"},
		{[]string{"analyze", "--config", cfg, bad}, `line 2, column D (loading): piece "M7" is not in the mass set`},
		{[]string{"analyze", "--config", cfg, table, "--as-found", table}, "tables of loadings are evaluated as the main table only"},
	} {
		out, err := runPlateau(t, tc.args...)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%v: error %v, want %q\n%s", tc.args, err, tc.want, out)
		}
	}
}
