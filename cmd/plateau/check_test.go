package main

import (
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"plateau/config"
)

// runCheck runs the built program's check on path with extra environment
// variables and returns its output and exit status.
func runCheck(t *testing.T, path string, env ...string) (string, int) {
	t.Helper()
	cmd := exec.Command(plateauBinary(t), "check", "-c", path)
	cmd.Env = append(cleanEnv(), env...)
	out, err := cmd.CombinedOutput()
	var ee *exec.ExitError
	switch {
	case err == nil:
		return string(out), 0
	case errors.As(err, &ee):
		return string(out), ee.ExitCode()
	}
	t.Fatalf("check %s: %v", path, err)
	return "", 0
}

// cleanEnv is the test's environment without PLATEAU_* variables, which
// would change what check finds.
func cleanEnv() []string {
	var out []string
	for _, kv := range os.Environ() {
		if !strings.HasPrefix(kv, "PLATEAU_") {
			out = append(out, kv)
		}
	}
	return out
}

// Every broken configuration makes check exit 2 and name the problem; the
// first line of each file is "# want: fragment", then "# env: NAME=value"
// lines for the environment it needs.
func TestCheckBrokenConfigs(t *testing.T) {
	files, err := filepath.Glob("../../testdata/config/bad/*.yaml")
	if err != nil || len(files) < 50 {
		t.Fatalf("broken configs: %v (%d files)", err, len(files))
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			t.Parallel()
			data, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			lines := strings.Split(string(data), "\n")
			want, ok := strings.CutPrefix(lines[0], "# want: ")
			if !ok {
				t.Fatalf("first line must be '# want: fragment'")
			}
			var env []string
			for _, l := range lines[1:] {
				kv, ok := strings.CutPrefix(l, "# env: ")
				if !ok {
					break
				}
				env = append(env, kv)
			}
			out, code := runCheck(t, f, env...)
			if code != checkFound {
				t.Errorf("exit status %d, want %d; output:\n%s", code, checkFound, out)
			}
			if !strings.Contains(out, want) {
				t.Errorf("output does not contain %q:\n%s", want, out)
			}
			if strings.Contains(out, "unconvertible") || strings.Contains(out, "mapstructure") || strings.Contains(out, "strconv.") {
				t.Errorf("library jargon in the output:\n%s", out)
			}
		})
	}
}

func TestCheckExitStatus(t *testing.T) {
	dir := t.TempDir()
	clean := simConfig(t, dir, "clean")
	tests := []struct {
		name string
		path string
		env  []string
		code int
		want string
	}{
		{"clean file", clean, nil, 0, ": OK\n"},
		{"points in fixed notation", clean, nil, 0, "points             0.00 bar, 3.20 bar, 6.40 bar"},
		// sim.yaml: one exercise (10s dwell, 5s hold at the bottom), 2 cycles × 14 captures × (5s hold + 10s window or 5m time-out), 20s at the top of each cycle.
		{"duration of the run", clean, nil, 0, "duration           at least 7m55s (holds and settle windows), at most 2h23m (every point to its time-out)"},
		{"duration at the simulator's speed", clean, nil, 0, "runs 60× faster: at least 8s of wall time"},
		{"file missing", filepath.Join(dir, "none.yaml"), nil, 1, "no such file"},
		{"a variable that sets nothing", clean, []string{"PLATEAU_STORE_PAHT=/tmp/x.db"}, checkFound, "did you mean PLATEAU_STORE_PATH?"},
		{"a command's own variable is no key and no problem", clean, []string{"PLATEAU_SOCKET=/tmp/x.sock"}, 0, ": OK\n"},
		{"a good override", clean, []string{"PLATEAU_PROCEDURE_CYCLES=3"}, 0, "6 points × 3 cycle(s)"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			out, code := runCheck(t, tc.path, tc.env...)
			if code != tc.code || !strings.Contains(out, tc.want) {
				t.Errorf("exit %d (want %d), output should contain %q:\n%s", code, tc.code, tc.want, out)
			}
		})
	}
}

func TestVersionCommand(t *testing.T) {
	bin := plateauBinary(t)
	flag, err := exec.Command(bin, "--version").Output()
	if err != nil {
		t.Fatal(err)
	}
	cmd, err := exec.Command(bin, "version").Output()
	if err != nil {
		t.Fatal(err)
	}
	first, _, _ := strings.Cut(string(cmd), "\n")
	if strings.TrimSpace(string(flag)) != first || !strings.Contains(string(cmd), "go1.") {
		t.Fatalf("plateau version:\n%s\nplateau --version:\n%s", cmd, flag)
	}
}

// What check prints of a clean file, whole: pressures in the device's unit
// with the digits of its resolution, each instrument's mode or ambient
// quantity, the barometer that converts between modes, the plan's
// duration, the store.
func TestCheckDescribesGolden(t *testing.T) {
	// Both files: one exercise (10s dwell, 5s hold at the bottom), 2 cycles
	// × 14 captures × (5s hold + 10s window, or 5m time-out), 20s at the
	// top of each cycle; the simulated clock runs 20× faster.
	for _, c := range []struct{ file, want string }{
		{"sim.yaml", `  device under test  DEMO-16, gauge, 0.00 bar … 16.00 bar, resolution 0.01 bar
  reference          SIM-REF, U = 0.01 % of reading + 0.1 mbar (k = 2)
  instrument         ref          reference gauge            sim
  instrument         dut          device    gauge            sim
  instrument         controller   source    gauge            sim
  procedure          plan: 6 points × 2 cycle(s), 1 exercise cycle(s), decision rule four-state
  points             0.00 bar, 3.20 bar, 6.40 bar, 9.60 bar, 12.80 bar, 16.00 bar
  safety limit       16.50 bar
  duration           at least 7m55s (holds and settle windows), at most 2h23m (every point to its time-out); reaching each pressure comes on top
                     the simulated bench runs 20× faster: at least 24s of wall time
  RTU line           the simulator's RTU line at 19200 Bd: 1 instrument(s), 10.0 reads/s asked, about 72.7 carried
  store              plateau-sim.db
`},
		{"ambient.yaml", `  device under test  DEMO-16G, gauge, 0.00 bar … 16.00 bar, resolution 0.01 bar
  reference          SIM-REF-A, U = 0.01 % of reading + 0.1 mbar (k = 2)
  instrument         ref          reference absolute         sim
  instrument         dut          device    gauge            sim
  instrument         controller   source    gauge            sim
  instrument         baro         ambient   barometric, hPa  sim
  instrument         room         ambient   temperature, °C  sim
  instrument         humidity     ambient   humidity, %RH    sim
  barometer          baro converts ref (absolute) to the devices' gauge pressure, sample by sample
  procedure          plan: 6 points × 2 cycle(s), 1 exercise cycle(s), decision rule four-state
  points             0.00 bar, 3.20 bar, 6.40 bar, 9.60 bar, 12.80 bar, 16.00 bar
  safety limit       16.50 bar
  duration           at least 7m55s (holds and settle windows), at most 2h23m (every point to its time-out); reaching each pressure comes on top
                     the simulated bench runs 20× faster: at least 24s of wall time
  RTU line           the simulator's RTU line at 19200 Bd: 1 instrument(s), 10.0 reads/s asked, about 72.7 carried
  store              plateau-ambient.db
`},
	} {
		cfg, err := config.Load("../../testdata/config/" + c.file)
		if err != nil {
			t.Fatal(err)
		}
		var b strings.Builder
		describe(&b, cfg)
		if got := trimTrailing(b.String()); got != c.want {
			t.Errorf("%s: got\n%s\nwant\n%s", c.file, got, c.want)
		}
	}
}
