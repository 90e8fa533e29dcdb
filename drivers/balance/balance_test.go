package balance

import (
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/analysis"
	model "plateau/analysis/balance"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

// openExample opens the balance of testdata/config/balance.yaml (an
// invented scenario) through the driver registry, with its loading file in
// a temporary directory.
func openExample(t *testing.T) (*Gauge, string, *config.Config) {
	t.Helper()
	cfg, err := config.Load("../../testdata/config/balance.yaml")
	if err != nil {
		t.Fatal(err)
	}
	inst := cfg.Instruments[0]
	inst.Link.Address = filepath.Join(t.TempDir(), "loading")
	g, err := drivers.OpenGauge(inst, drivers.OpenEnv{Clock: clock.NewManual(time.Date(2026, 2, 12, 9, 0, 0, 0, time.UTC))})
	if err != nil {
		t.Fatal(err)
	}
	return g.(*Gauge), inst.Link.Address, cfg
}

func TestGaugeFollowsTheLoading(t *testing.T) {
	g, path, cfg := openExample(t)
	ctx := context.Background()
	if _, err := g.Read(ctx); !errors.Is(err, drivers.ErrTimeout) || !errors.Is(err, ErrNoLoading) {
		t.Fatalf("before any loading: %v", err)
	}
	b := cfg.ReferenceBalance()
	for _, l := range []Loading{
		{Pieces: []string{"P1", "M1", "M2"}, TemperatureC: 21.3, HasTemperature: true},
		{Pieces: []string{"P1", "M1", "M2", "M3"}, TemperatureC: 21.4, HasTemperature: true},
		{Pieces: []string{"P1"}, TemperatureC: 21.4, HasTemperature: true}, // same size of file as none before it
	} {
		if err := WriteLoading(path, l); err != nil {
			t.Fatal(err)
		}
		r, err := g.Read(ctx)
		if err != nil {
			t.Fatal(err)
		}
		c := b.LevelConditions()
		c.Loaded, c.PistonTempC = l.Pieces, l.TemperatureC
		want, err := b.Setup().Pressure(c)
		if err != nil {
			t.Fatal(err)
		}
		if r.Pa != want.LevelPa || r.RawUnit != "bar" || math.Abs(r.Raw-want.LevelPa/1e5) > 1e-12 ||
			!strings.Contains(r.Wire, "loading "+l.Text()) || r.Time.IsZero() {
			t.Errorf("%s: reading %+v, want %v Pa", l.Text(), r, want.LevelPa)
		}
	}
	if err := WriteLoading(path, Loading{Vented: true}); err != nil {
		t.Fatal(err)
	}
	if r, err := g.Read(ctx); err != nil || r.Pa != 0 || r.Wire != "vented" {
		t.Errorf("vented: %+v %v", r, err)
	}
	// A piece not in the set, or a loading without the piston temperature
	// the configuration does not enter: a bad reply, never a number.
	for _, tc := range []struct {
		file, want string
	}{
		{"loading P1+M9\ntemperature 21\n", `piece "M9" is not in the mass set`},
		{"loading P1+M1\n", "no piston temperature"},
		{"loading P1++M1\n", "piece 2 is empty"},
	} {
		if err := os.WriteFile(path, []byte(tc.file), 0o644); err != nil {
			t.Fatal(err)
		}
		_, err := g.Read(ctx)
		if !errors.Is(err, drivers.ErrBadReply) || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: %v, want a bad reply with %q", tc.file, err, tc.want)
		}
	}
	if err := os.Remove(path); err != nil {
		t.Fatal(err)
	}
	if _, err := g.Read(ctx); !errors.Is(err, ErrNoLoading) {
		t.Errorf("file removed: %v", err)
	}
}

// transmitter is a simulated device under test of our own (invented): it
// reads the true pressure with a zero offset and a span error, rounded to
// its resolution.
type transmitter struct{ zeroPa, span, resolutionPa float64 }

func (x transmitter) read(truePa float64) float64 {
	return math.Round((x.zeroPa+truePa*(1+x.span))/x.resolutionPa) * x.resolutionPa
}

// A run with the balance as the reference, the loadings entered one by
// one as plateau load writes them, and a simulated transmitter on the
// balance's level: the errors of indication come out as the transmitter's
// known zero and span errors.
func TestBalanceAsReferenceGivesTheTransmitterErrors(t *testing.T) {
	g, path, _ := openExample(t)
	dut := transmitter{zeroPa: 120, span: 0.0015, resolutionPa: 1}
	seq := [][]string{{"P1", "M1", "M2"}, {"P1", "M1", "M2", "M3"}, {"P1", "M1", "M2", "M3", "M4"}, {"P1", "M1", "M2", "M3", "M4", "M5"}}
	var points []analysis.Point
	for cycle := 1; cycle <= 2; cycle++ {
		for dir, order := range [][]int{{0, 1, 2, 3}, {3, 2, 1, 0}} {
			for _, i := range order {
				if err := WriteLoading(path, Loading{Pieces: seq[i], TemperatureC: 21.3, HasTemperature: true}); err != nil {
					t.Fatal(err)
				}
				ref, err := g.Read(context.Background())
				if err != nil {
					t.Fatal(err)
				}
				d := analysis.Ascending
				if dir == 1 {
					d = analysis.Descending
				}
				points = append(points, analysis.Point{Cycle: cycle, Direction: d, Kind: analysis.Measurement, Index: i,
					Nominal:   float64(4*(i+1)) * 1e5,
					Reference: analysis.Window{Mean: ref.Pa, Count: 1}, DUT: analysis.Window{Mean: dut.read(ref.Pa), Count: 1}})
			}
		}
	}
	res, err := analysis.Analyze(points, analysis.Device{UpperPa: 16e5, ResolutionPa: 1, Accuracy: analysis.Accuracy{PercentOfSpan: 0.25}},
		analysis.Reference{PercentOfReading: 0.0087, FloorPa: 76, K: 2}, analysis.Options{Rule: analysis.RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Points) != 4 {
		t.Fatalf("%d points", len(res.Points))
	}
	for _, p := range res.Points {
		want := dut.zeroPa + dut.span*p.ReferenceMeanPa
		if math.Abs(p.MeanErrorPa-want) > dut.resolutionPa {
			t.Errorf("point %d: error %.1f Pa, want %.1f Pa (zero %g Pa, span %g)", p.Index, p.MeanErrorPa, want, dut.zeroPa, dut.span)
		}
	}
}

func TestLoadingFileRoundTrip(t *testing.T) {
	for _, l := range []Loading{
		{Vented: true},
		{Pieces: []string{"P1"}},
		{Pieces: []string{"P1", "M1", "M10"}, TemperatureC: -2.25, HasTemperature: true},
	} {
		got, err := ParseLoading(l.Format())
		if err != nil || got.Text() != l.Text() || got.TemperatureC != l.TemperatureC || got.HasTemperature != l.HasTemperature {
			t.Errorf("%+v: read back %+v, %v", l, got, err)
		}
	}
	for _, tc := range []struct{ file, want string }{
		{"", "no loading line"},
		{"vented\nloading P1\n", "vented, yet pieces"},
		{"loading P1\nloading M1\n", "line 2: loading is given twice"},
		{"loading P1\ntemperature warm\n", `temperature "warm" is not a number`},
		{"weights P1\n", `"weights" is not loading, temperature or vented`},
		{"vented now\n", "vented takes nothing"},
		{strings.Repeat("#", 5000), "a loading file holds a line or two"},
	} {
		if _, err := ParseLoading([]byte(tc.file)); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: %v, want %q", tc.file, err, tc.want)
		}
	}
	if err := WriteLoading(filepath.Join(t.TempDir(), "loading"), Loading{Pieces: []string{"P 1"}}); err == nil {
		t.Error("a piece id with a space was written")
	}
}

func TestNewRefusesBadSetups(t *testing.T) {
	if _, err := New("dwt", "x", units.Bar, model.Setup{}, model.Conditions{}, false, clock.Wall{}); err == nil {
		t.Error("an empty setup was accepted")
	}
	if _, err := OpenGauge(config.Instrument{Name: "dwt"}, drivers.OpenEnv{}); err == nil {
		t.Error("an instrument without a balance section was opened")
	}
}

// FuzzParseLoading: any bytes give a loading or an error, never a panic,
// and what is read writes back to the same loading.
func FuzzParseLoading(f *testing.F) {
	f.Add([]byte("# plateau loading\nloading P1+M1+M2\ntemperature 21.3\n"))
	f.Add([]byte("vented\n"))
	f.Add([]byte("loading P1 + M2\r\ntemperature -1e2\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		l, err := ParseLoading(data)
		if err != nil {
			return
		}
		back, err := ParseLoading(l.Format())
		if err != nil || back.Text() != l.Text() || back.TemperatureC != l.TemperatureC {
			t.Fatalf("%q → %+v → %q → %+v, %v", data, l, l.Format(), back, err)
		}
	})
}
