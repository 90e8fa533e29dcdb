package balance

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"plateau/drivers"
)

// thermometer is a piston thermometer of the test: its latest reading.
type thermometer struct {
	mu sync.Mutex
	c  float64
	at time.Time
	ok bool
}

func (th *thermometer) LatestTemperature() (float64, time.Time, bool) {
	th.mu.Lock()
	defer th.mu.Unlock()
	return th.c, th.at, th.ok
}

func (th *thermometer) set(c float64, at time.Time) {
	th.mu.Lock()
	th.c, th.at, th.ok = c, at, true
	th.mu.Unlock()
}

// With a piston thermometer the balance reads the piston temperature from
// it at every read, refuses one that has not read or has fallen silent
// (a link fault, as a silent reference), and an operator's --temperature
// in the loading file still wins.
func TestGaugeReadsThePistonThermometer(t *testing.T) {
	g, path, cfg := openExample(t)
	ctx := context.Background()
	th := &thermometer{}
	g.UseThermometer(th)
	if err := WriteLoading(path, Loading{Pieces: []string{"P1", "M1", "M2"}}); err != nil {
		t.Fatal(err)
	}
	if _, err := g.Read(ctx); !errors.Is(err, drivers.ErrLinkDown) || !errors.Is(err, errNoTemperature) {
		t.Fatalf("no thermometer reading yet: %v", err)
	}
	b := cfg.ReferenceBalance()
	want := func(tempC float64) float64 {
		c := b.LevelConditions()
		c.Loaded, c.PistonTempC = []string{"P1", "M1", "M2"}, tempC
		r, err := b.Setup().Pressure(c)
		if err != nil {
			t.Fatal(err)
		}
		return r.LevelPa
	}
	now := g.clk.Now()
	for _, tempC := range []float64{21.3, 24.8} {
		th.set(tempC, now.Add(-time.Minute))
		r, err := g.Read(ctx)
		if err != nil {
			t.Fatal(err)
		}
		// 22.5 ppm/K of the example's steel piston: 3.5 K move 4 bar by 31 Pa.
		if r.Pa != want(tempC) {
			t.Errorf("at %v °C: %v Pa, want %v Pa", tempC, r.Pa, want(tempC))
		}
	}
	th.set(21.3, now.Add(-freshTemperature-time.Second))
	if _, err := g.Read(ctx); !errors.Is(err, drivers.ErrLinkDown) || !errors.Is(err, errNoTemperature) {
		t.Errorf("a stale reading: %v", err)
	}
	if err := WriteLoading(path, Loading{Pieces: []string{"P1", "M1", "M2"}, TemperatureC: 22, HasTemperature: true}); err != nil {
		t.Fatal(err)
	}
	if r, err := g.Read(ctx); err != nil || r.Pa != want(22) {
		t.Errorf("the operator's temperature: %+v %v, want %v Pa", r, err, want(22))
	}
}
