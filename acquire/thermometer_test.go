package acquire

import (
	"context"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/balance"
	"plateau/drivers/clock"
)

// A pressure balance reference with balance.piston_thermometer gets that
// ambient instrument's latest reading from the engine's ambient book: a
// new reading of the thermometer moves the balance's pressure as the
// equation says, with nothing else of the engine in the driver.
func TestBalanceTakesThePistonThermometer(t *testing.T) {
	src, err := os.ReadFile("../testdata/config/balance.yaml")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	yaml := strings.NewReplacer(
		"      piston_temperature_uncertainty: 0.2\n", "      piston_temperature_uncertainty: 0.2\n      piston_thermometer: piston\n",
		"device:\n", "  - name: piston\n    role: ambient\n    quantity: temperature\n    unit: °C\n    uncertainty: 0.1 K\n    link: {kind: manual}\ndevice:\n",
	).Replace(string(src))
	// Parsed as if from dir: the loading file is found next to it.
	cfg, err := config.Parse([]byte(yaml), filepath.Join(dir, "balance.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewManual(time.Date(2026, 2, 12, 9, 0, 0, 0, time.UTC))
	ref, err := drivers.OpenGauge(cfg.Instruments[0], drivers.OpenEnv{Clock: clk})
	if err != nil {
		t.Fatal(err)
	}
	in := Instruments{Reference: Instrument{Name: "tester", Gauge: ref}, Others: []Instrument{{Name: "piston", Poll: time.Second}}}
	book := newAmbientBook(cfg, in.Others, clk)
	in = book.convert(in)
	if err := balance.WriteLoading(cfg.Instruments[0].Link.Address, balance.Loading{Pieces: []string{"P1", "M1", "M2"}}); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if _, err := in.Reference.Gauge.Read(ctx); err == nil || !strings.Contains(err.Error(), "piston thermometer has given none yet") {
		t.Fatalf("before the thermometer reads: %v", err)
	}
	b := cfg.ReferenceBalance()
	observe := book.observer("piston")
	for _, tempC := range []float64{20, 23.5} {
		observe(drivers.Reading{Pa: tempC, Time: clk.Now()}, nil)
		r, err := in.Reference.Gauge.Read(ctx)
		if err != nil {
			t.Fatal(err)
		}
		c := b.LevelConditions()
		c.Loaded, c.PistonTempC = []string{"P1", "M1", "M2"}, tempC
		want, err := b.Setup().Pressure(c)
		if err != nil {
			t.Fatal(err)
		}
		if r.Pa != want.LevelPa || !strings.Contains(r.Wire, "piston "+strconv.FormatFloat(tempC, 'f', -1, 64)+" °C") {
			t.Errorf("at %v °C: %+v, want %v Pa", tempC, r, want.LevelPa)
		}
	}
}
