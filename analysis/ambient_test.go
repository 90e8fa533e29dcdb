package analysis

import (
	"encoding/json"
	"math"
	"strings"
	"testing"

	"plateau/analysis/units"
)

func contribution(t *testing.T, pr PointResult, name string) Contribution {
	t.Helper()
	for _, c := range pr.Budget {
		if c.Name == name {
			return c
		}
	}
	t.Fatalf("point %d has no %s term", pr.Index+1, name)
	return Contribution{}
}

// The temperature term takes the temperature measured over each point's
// windows: coefficient × span × |t − t_ref|, rectangular (common practice,
// the form of a maker's temperature-effect specification).
func TestAmbientTemperatureTerm(t *testing.T) {
	pts := synth(2, func(p float64, _ int, _ Direction) float64 { return p + 100 })
	for i := range pts {
		tc := 21.0 // every point in the reference conditions…
		if pts[i].Index == 8 {
			tc = 23.5 // …but the top one, 3.5 K from 20 °C
		}
		pts[i].Ambient = []AmbientMean{
			{Instrument: "room", Kind: units.Temperature, Mean: tc, Min: tc - 0.05, Max: tc + 0.05, Count: 10},
			{Instrument: "hum", Kind: units.Humidity, Mean: 45, Min: 44, Max: 46, Count: 10},
		}
	}
	cond := units.Interval{Low: 18, High: 22, Nominal: 20, Text: "20 ± 2 °C"}
	dev := dev16
	dev.TempCoefficient, dev.ReferenceTemperatureC = 0.01, 20
	dev.Conditions = &Conditions{TemperatureC: &cond}
	res, err := Analyze(pts, dev, ref16, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	span := dev.Span()
	for _, pr := range res.Points {
		c := contribution(t, pr, "temperature")
		dt := 1.0
		if pr.Index == 8 {
			dt = 3.5
		}
		want := 0.01 / 100 * span * dt
		if !c.Evaluated || math.Abs(c.EstimatePa-want) > 1e-9 || math.Abs(c.StandardUncertaintyPa-want/math.Sqrt(3)) > 1e-9 {
			t.Errorf("point %d: temperature term %+v, want half-width %g Pa", pr.Index+1, c, want)
		}
	}
	a := res.Ambient
	if a == nil || len(a.Points) != len(res.Points) || len(a.Run) != 2 {
		t.Fatalf("ambient summary %+v", a)
	}
	top := a.Points[8].Quantities[0]
	if top.Kind != units.Temperature || top.Mean != 23.5 || top.Windows != 4 || !top.Outside {
		t.Errorf("top point temperature %+v", top)
	}
	if low := a.Points[0].Quantities[0]; low.Outside || low.Mean != 21 {
		t.Errorf("first point temperature %+v", low)
	}
	run := a.Run[0]
	if math.Abs(run.Min-20.95) > 1e-12 || math.Abs(run.Max-23.55) > 1e-12 || !run.Outside || run.Windows != len(pts) {
		t.Errorf("run temperature %+v", run)
	}
	if hum := a.Run[1]; hum.Kind != units.Humidity || hum.Conditions != nil || hum.Outside {
		t.Errorf("run humidity %+v", hum)
	}
	n := 0
	for _, w := range res.Warnings {
		if strings.Contains(w, "ambient temperature 23.50 °C is outside the reference conditions 20 ± 2 °C") {
			n++
		}
	}
	if n != 4 { // two cycles, up and down, at the top point
		t.Errorf("%d warnings about the temperature, want 4:\n%s", n, strings.Join(res.Warnings, "\n"))
	}
	// Without measured temperatures, the one given for the run is used.
	for i := range pts {
		pts[i].Ambient = nil
	}
	given := 25.0
	res, err = Analyze(pts, dev, ref16, Options{Rule: RuleSimple, AmbientC: &given})
	if err != nil {
		t.Fatal(err)
	}
	if c := contribution(t, res.Points[0], "temperature"); math.Abs(c.EstimatePa-0.01/100*span*5) > 1e-9 || res.Ambient != nil {
		t.Errorf("given temperature: %+v, ambient %+v", c, res.Ambient)
	}
}

// A reference converted between modes by a barometer carries the
// barometer's uncertainty in full (p_abs = p_gauge + p_baro; the
// sensitivity coefficient is 1, GUM 5.1.3).
func TestBarometerTerm(t *testing.T) {
	pts := synth(2, func(p float64, _ int, _ Direction) float64 { return p })
	plain, err := Analyze(pts, dev16, ref16, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range plain.Points[3].Budget {
		if c.Name == "barometer" {
			t.Fatal("a barometer term without a conversion")
		}
	}
	ref := ref16
	ref.Barometer = &Barometer{Instrument: "baro", ExpandedPa: 30, K: 2, From: "absolute", To: "gauge"}
	res, err := Analyze(pts, dev16, ref, Options{Rule: RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	for i, pr := range res.Points {
		c := contribution(t, pr, "barometer")
		if !c.Evaluated || c.StandardUncertaintyPa != 15 {
			t.Fatalf("barometer term %+v", c)
		}
		// u_c² grows by exactly 15² Pa².
		u0, u1 := plain.Points[i].CombinedUncertaintyPa, pr.CombinedUncertaintyPa
		if math.Abs(u1*u1-u0*u0-225) > 1e-6 {
			t.Errorf("point %d: u_c %g → %g, want a 15 Pa term added", i+1, u0, u1)
		}
	}
	b, _ := json.Marshal(res.Reference)
	if !strings.Contains(string(b), `"barometer":{"instrument":"baro"`) {
		t.Errorf("the record of the reference does not name its barometer: %s", b)
	}
	ref.Barometer.ExpandedPa = math.NaN()
	if _, err := Analyze(pts, dev16, ref, Options{Rule: RuleSimple}); err == nil {
		t.Error("a NaN barometer uncertainty accepted")
	}
}

func TestAmbientBadInput(t *testing.T) {
	pts := synth(1, func(p float64, _ int, _ Direction) float64 { return p })
	pts[2].Ambient = []AmbientMean{{Instrument: "room", Kind: units.Temperature, Mean: math.Inf(1), Count: 3}}
	if _, err := Analyze(pts, dev16, ref16, Options{Rule: RuleSimple}); err == nil || !strings.Contains(err.Error(), "ambient temperature (room)") {
		t.Errorf("an infinite temperature: %v", err)
	}
}
