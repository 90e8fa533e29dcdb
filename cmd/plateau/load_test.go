package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// plateau load as a technician types it, on a copy of the invented
// dead-weight tester's configuration: the loading file next to the
// configuration holds what the run reads.
func TestLoad(t *testing.T) {
	src, err := os.ReadFile(filepath.Join(mustWd(t), "../../testdata/config/balance.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cfg := filepath.Join(dir, "balance.yaml")
	if err := os.WriteFile(cfg, src, 0o644); err != nil {
		t.Fatal(err)
	}
	sim := filepath.Join(mustWd(t), "../../testdata/config/sim.yaml")
	t.Chdir(t.TempDir()) // elsewhere: the file is found next to the configuration
	loading := filepath.Join(dir, "plateau-balance.loading")

	out, err := runPlateau(t, "load", "-c", cfg, "P1+M1+M2", "--temperature", "21,3")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out, "P1+M1+M2 at 21.3 °C: 4.0010 bar at the balance's reference level (0.9 m), standard uncertainty 0.00011 bar") {
		t.Errorf("output %q", out)
	}
	if b, _ := os.ReadFile(loading); string(b) != "# plateau loading\nloading P1+M1+M2\ntemperature 21.3\n" {
		t.Errorf("loading file %q", b)
	}
	if _, err := runPlateau(t, "load", "-c", cfg, "--vent"); err != nil {
		t.Fatal(err)
	}
	if b, _ := os.ReadFile(loading); string(b) != "# plateau loading\nvented\n" {
		t.Errorf("loading file %q", b)
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"P1+M9", "--temperature", "21"}, `piece "M9" is not in the mass set (P1, M1, M2, M3, M4, M5)`},
		{[]string{"P1+M1"}, "give the piston temperature with --temperature"},
		{[]string{"P1+M1", "--temperature", "warm"}, `--temperature "warm": give the piston temperature in °C`},
		{[]string{"--vent", "P1"}, "--vent takes no pieces"},
		{[]string{}, "no pieces"},
	} {
		_, err := runPlateau(t, append([]string{"load", "-c", cfg}, tc.args...)...)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%v: %v, want %q", tc.args, err, tc.want)
		}
	}
	// A refused loading leaves the file as it was.
	if b, _ := os.ReadFile(loading); string(b) != "# plateau loading\nvented\n" {
		t.Errorf("loading file changed by a refused loading: %q", b)
	}
	// A 12 bar dial with its limit at 12.2 bar: the whole set (16 bar) is refused and
	// the file keeps the last loading.
	limited := filepath.Join(dir, "limited.yaml")
	text := strings.Replace(string(src), "  upper: 16 bar\n  resolution", "  upper: 12 bar\n  resolution", 1) + "safety:\n  max_pressure: 12.2 bar\n"
	if err := os.WriteFile(limited, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = runPlateau(t, "load", "-c", limited, "P1+M1+M2+M3+M4+M5", "--temperature", "21")
	if err == nil || !strings.Contains(err.Error(), "load P1+M1+M2+M3+M4+M5: 16.0041 bar is above safety.max_pressure (12.2000 bar): take weights off") {
		t.Errorf("over the limit: %v", err)
	}
	if b, _ := os.ReadFile(loading); string(b) != "# plateau loading\nvented\n" {
		t.Errorf("loading file changed by a refused loading: %q", b)
	}
	if _, err := runPlateau(t, "load", "-c", limited, "P1+M1+M2+M3+M4", "--temperature", "21"); err != nil {
		t.Errorf("12 bar under a 12.2 bar limit: %v", err)
	}
	if _, err := runPlateau(t, "load", "-c", sim, "P1"); err == nil || !strings.Contains(err.Error(), "is not a pressure balance") {
		t.Errorf("sim config: %v", err)
	}
}
