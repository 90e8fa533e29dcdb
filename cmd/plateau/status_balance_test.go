package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/analysis/units"
)

// With a pressure balance as the reference, status names the loading the
// step plans (the configuration's loadings, one per point) on the progress line.
func TestStatusShowsPlannedLoading(t *testing.T) {
	src := readFile(filepath.Join(mustWd(t), "../../testdata/config/balance.yaml"))
	yaml := strings.NewReplacer(
		"      masses_correlated: true\n", "      masses_correlated: true\n      loadings: [vent, P1+M1+M2+M3, P1+M1+M2+M3+M4+M5]\n",
		"  points: [0 %, 25 %, 50 %, 75 %, 100 %]\n", "  points: [0 %, 50 %, 100 %]\n",
	).Replace(src)
	if yaml == src {
		t.Fatal("testdata/config/balance.yaml changed; update this test")
	}
	path := filepath.Join(t.TempDir(), "balance.yaml")
	if err := os.WriteFile(path, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	old := configPath
	configPath = path
	t.Cleanup(func() { configPath = old })

	cur := &api.StepNow{Index: 1, Of: 6, Phase: "cycle 1 up point 2", TargetPa: 8e5}
	load := balanceHint(cur, units.Bar)
	if !strings.HasPrefix(load, "load P1+M1+M2+M3 (≈ 8") {
		t.Fatalf("balanceHint = %q, want the planned loading of the 8 bar step", load)
	}
	if got := balanceHint(&api.StepNow{}, units.Bar); got != "" {
		t.Errorf("balanceHint with no step = %q, want nothing", got)
	}
	st := api.Status{Version: "test", Since: time.Unix(0, 0), Run: &api.RunInfo{ID: "r000001"}, Step: "step 2 of 6, cycle 1 up point 2", Current: cur}
	var b strings.Builder
	printStatusLoading(&b, st, display{unit: units.Bar, res: 1e3}, time.Unix(60, 0), load)
	if !strings.Contains(b.String(), "— step 2 of 6, cycle 1 up point 2 · "+load+"\n") {
		t.Errorf("status does not show the loading on the step line:\n%s", b.String())
	}
}
