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
		})
	}
}

// Each file in testdata/config/bad starts with "# want: fragment"; loading
// it must fail with an error that contains the fragment.
func TestBrokenConfigs(t *testing.T) {
	files, err := filepath.Glob("../testdata/config/bad/*.yaml")
	if err != nil || len(files) < 10 {
		t.Fatalf("bad configs: %v (%d files)", err, len(files))
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			data, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			first, _, _ := strings.Cut(string(data), "\n")
			want, ok := strings.CutPrefix(first, "# want: ")
			if !ok {
				t.Fatalf("%s: first line must be '# want: fragment'", f)
			}
			_, err = Load(f)
			if err == nil {
				t.Fatalf("loaded without error; want %q", want)
			}
			if !strings.Contains(err.Error(), want) {
				t.Fatalf("error does not contain %q:\n%v", want, err)
			}
			if !strings.Contains(err.Error(), f) {
				t.Fatalf("error does not name the file %s:\n%v", f, err)
			}
		})
	}
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
	for _, s := range []string{"", "device: {upper: 16 bar}", "instruments: [1, 2]", "a: [", "procedure: {points: 3}"} {
		f.Add([]byte(s))
	}
	if data, err := os.ReadFile("../testdata/config/sim.yaml"); err == nil {
		f.Add(data)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		cfg, err := Parse(data, "fuzz.yaml")
		if err == nil && cfg == nil {
			t.Fatal("nil config without error")
		}
	})
}
