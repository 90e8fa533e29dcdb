package config

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func TestExamplesValidate(t *testing.T) {
	for _, path := range []string{"../systemd/plateau.yaml", "../testdata/config/sim.yaml"} {
		t.Run(filepath.Base(path), func(t *testing.T) {
			cfg, err := Load(path)
			if err != nil {
				t.Fatalf("example config must validate:\n%v", err)
			}
			if len(cfg.Instruments) < 2 || cfg.Device.UpperPa <= 0 || len(cfg.Procedure.PointsPa) == 0 {
				t.Fatalf("incomplete: %+v", cfg)
			}
			if len(cfg.Devices) != 1 || cfg.Devices[0].Device != cfg.Device {
				t.Fatalf("one device expected, the device section: %+v", cfg.Devices)
			}
		})
	}
}

// Each file in testdata/config/bad starts with "# want: fragment", then
// optionally "# env: NAME=value" lines to set before loading. Loading it
// must report a problem (an error, or a warning when the fragment says
// "warning:") whose text contains the fragment, naming the file.
func TestBrokenConfigs(t *testing.T) {
	files, err := filepath.Glob("../testdata/config/bad/*.yaml")
	if err != nil || len(files) < 50 {
		t.Fatalf("bad configs: %v (%d files)", err, len(files))
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			want, env := brokenHeader(t, f)
			for k, v := range env {
				t.Setenv(k, v)
			}
			cfg, err := Load(f)
			text := ""
			switch {
			case err != nil:
				text = err.Error()
				if !strings.Contains(text, f) {
					t.Fatalf("error does not name the file %s:\n%v", f, err)
				}
			case strings.Contains(want, "warning:"):
				for _, w := range cfg.Warnings {
					text += w.String() + "\n"
				}
			default:
				t.Fatalf("loaded without error; want %q", want)
			}
			if !strings.Contains(text, want) {
				t.Fatalf("problems do not contain %q:\n%s", want, text)
			}
		})
	}
}

// brokenHeader reads the "# want:" and "# env:" lines of a broken file.
func brokenHeader(t *testing.T, path string) (string, map[string]string) {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(string(data), "\n")
	want, ok := strings.CutPrefix(lines[0], "# want: ")
	if !ok {
		t.Fatalf("%s: first line must be '# want: fragment'", path)
	}
	env := map[string]string{}
	for _, l := range lines[1:] {
		kv, ok := strings.CutPrefix(l, "# env: ")
		if !ok {
			break
		}
		k, v, _ := strings.Cut(kv, "=")
		env[k] = v
	}
	return want, env
}

// Every problem is reported at once, not only the first.
func TestAllProblemsAtOnce(t *testing.T) {
	_, err := Parse([]byte(`
device: {upper: 16 bar, resolution: 0 bar, class: "7"}
reference: {uncertainty: 0.01 bar, coverage: 0}
instruments:
  - {name: ref, role: referee, link: {kind: sim}, sim_part: reference}
`), "many.yaml")
	p, ok := AsProblems(err)
	if !ok {
		t.Fatalf("want *Problems, got %v", err)
	}
	for _, frag := range []string{
		`device.class = "7": must be one of`,
		"device.resolution",
		`reference.uncertainty = "0.01 bar": must be a percentage`,
		"reference.coverage",
		`instruments[0].role = "referee": must be one of reference, device, source, ambient; did you mean "reference"?`,
		"no instrument has role: device",
	} {
		if !strings.Contains(p.Error(), frag) {
			t.Errorf("missing %q in\n%v", frag, p)
		}
	}
}

func TestEnvironmentOverrides(t *testing.T) {
	t.Setenv("PLATEAU_STORE_PATH", "/tmp/elsewhere.db")
	t.Setenv("PLATEAU_PROCEDURE_CYCLES", "5")
	t.Setenv("PLATEAU_PROCEDURE_SETTLE_WINDOW", "45s")
	t.Setenv("PLATEAU_LOG_LEVEL", "debug")
	cfg, err := Load("../testdata/config/sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Store.Path != "/tmp/elsewhere.db" || cfg.Procedure.Cycles != 5 ||
		cfg.Procedure.Settle.Window != 45*time.Second || cfg.Log.Level != "debug" {
		t.Fatalf("overrides not applied: store %q cycles %d window %v level %q",
			cfg.Store.Path, cfg.Procedure.Cycles, cfg.Procedure.Settle.Window, cfg.Log.Level)
	}
	t.Setenv("PLATEAU_PROCEDURE_CYCLES", "lots")
	if _, err := Load("../testdata/config/sim.yaml"); err == nil || !strings.Contains(err.Error(), "procedure.cycles") {
		t.Fatalf("a bad override must be reported with its key, got %v", err)
	}
}

func TestResolvedValues(t *testing.T) {
	cfg, err := Load("../testdata/config/sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{0, 3.2e5, 6.4e5, 9.6e5, 12.8e5, 16e5}
	if len(cfg.Procedure.PointsPa) != len(want) {
		t.Fatalf("points %v", cfg.Procedure.PointsPa)
	}
	for i, w := range want {
		if d := cfg.Procedure.PointsPa[i] - w; d > 1e-6 || d < -1e-6 {
			t.Errorf("point %d = %v Pa, want %v", i, cfg.Procedure.PointsPa[i], w)
		}
	}
	if cfg.Safety.MaxPressurePa != 16.5e5 || cfg.Procedure.Settle.BandPa != 0.01*16e5 {
		t.Errorf("safety %v band %v", cfg.Safety.MaxPressurePa, cfg.Procedure.Settle.BandPa)
	}
	if cfg.Procedure.Settle.MaxDriftPaPerS != 500.0/60 {
		t.Errorf("drift %v Pa/s", cfg.Procedure.Settle.MaxDriftPaPerS)
	}
}

func TestEmptyFileNeedsInstruments(t *testing.T) {
	_, err := Parse(nil, "empty.yaml")
	if err == nil || !strings.Contains(err.Error(), "no instrument has role: reference") {
		t.Fatalf("got %v", err)
	}
}

func FuzzParse(f *testing.F) {
	for _, s := range []string{"", "device: {upper: 16 bar}", "instruments: [1, 2]", "a: [", "procedure: {points: 3}",
		"a: &x {b: *x}", "<<: {store: {path: x}}", "procedure: {cycles: .nan}"} {
		f.Add([]byte(s))
	}
	files, _ := filepath.Glob("../testdata/config/*.yaml")
	bad, _ := filepath.Glob("../testdata/config/bad/*.yaml")
	for _, path := range append(files, bad...) {
		if data, err := os.ReadFile(path); err == nil {
			f.Add(data)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		cfg, err := Parse(data, "fuzz.yaml")
		if err == nil && cfg == nil {
			t.Fatal("nil config without error")
		}
		if p, ok := AsProblems(err); ok && p.Errors() == 0 {
			t.Fatalf("refused without an error: %v", p)
		}
		if err == nil && len(cfg.Devices) == 0 {
			t.Fatal("accepted without a device")
		}
	})
}
