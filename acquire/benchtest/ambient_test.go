package benchtest

import (
	"math"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/config/record"
	"plateau/drivers/sim"
)

// ambientBench is the bench of ambient.yaml (an absolute-mode reference,
// a gauge-mode device, a barometer, a thermometer and a hygrometer of the
// simulated room) with the short procedure of bench and the room given.
func ambientBench(t *testing.T, room sim.AmbientSettings, edit func(*config.Config)) *testBench {
	t.Helper()
	return bench(t, func(cfg *config.Config) {
		a, err := config.Load("../../testdata/config/ambient.yaml")
		if err != nil {
			t.Fatal(err)
		}
		a.Procedure, a.Simulator.Speed = cfg.Procedure, cfg.Simulator.Speed
		*cfg = *a
		if edit != nil {
			edit(cfg)
		}
	}, withRig(sim.WithAmbient(room)))
}

// analyse evaluates the run's points with its frozen record, as report does.
func analyse(t *testing.T, cfg *config.Config, pts []analysis.Point) analysis.Result {
	t.Helper()
	rec := record.Of(cfg)
	res, err := analysis.Analyze(pts, rec.Device, rec.Reference, rec.Options)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

func ambientOf(p analysis.Point, k units.AmbientKind) (analysis.AmbientMean, bool) {
	for _, a := range p.Ambient {
		if a.Kind == k {
			return a, true
		}
	}
	return analysis.AmbientMean{}, false
}

// A gauge-mode device against an absolute-mode reference: the barometer
// converts every reference sample (p_gauge = p_abs − p_baro), so the
// device's errors match the simulator's truth as against a gauge
// reference; without the conversion they would be off by the whole
// atmosphere. The raw reference samples stay absolute, for audit, and the
// barometer's uncertainty is in the budget.
func TestGaugeDeviceAgainstAbsoluteReference(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a whole procedure")
	}
	t.Parallel()
	b := ambientBench(t, sim.DefaultAmbient, nil)
	id, state, reason := b.run(t, 90*time.Second)
	if state != store.StateFinished {
		b.logInstruments(t)
		t.Fatalf("run ended %q: %s", state, reason)
	}
	pts := b.points(t, id)
	if want := 2 * (1 + 3 + 3 + 1); len(pts) != want {
		t.Fatalf("%d points, want %d", len(pts), want)
	}
	checkErrors(t, b.rig, pts, 2, 0.012e5)
	for _, p := range pts {
		mid := p.Reference.Start.Add(p.Reference.End.Sub(p.Reference.Start) / 2)
		truth := b.rig.AmbientTruth(mid)
		baro, ok := ambientOf(p, units.Barometric)
		if !ok || math.Abs(baro.Mean-truth.BarometricPa) > 5 || baro.Count < 10 {
			t.Errorf("%s: barometric %+v, truth %.1f Pa", describe(p), baro, truth.BarometricPa)
		}
		temp, ok := ambientOf(p, units.Temperature)
		if !ok || math.Abs(temp.Mean-truth.TemperatureC) > 0.05 {
			t.Errorf("%s: temperature %+v, truth %.3f °C", describe(p), temp, truth.TemperatureC)
		}
		if _, ok := ambientOf(p, units.Humidity); !ok {
			t.Errorf("%s: no humidity", describe(p))
		}
	}
	// The stored reference samples: raw absolute, converted to gauge.
	top := pts[len(pts)/2]
	n := 0
	err := b.st.Samples(id, "ref", top.Reference.Start, top.Reference.End, func(s store.Sample) error {
		if s.Failed {
			return nil
		}
		n++
		if shift := units.Bar.ToPa(s.Raw) - s.Pa; math.Abs(shift-b.rig.AmbientTruth(s.Time).BarometricPa) > 20 {
			t.Errorf("reference sample at %s: raw %g %s, converted %g Pa: the shift %g Pa is not the barometric pressure", s.Time, s.Raw, s.RawUnit, s.Pa, shift)
		}
		return nil
	})
	if err != nil || n < 10 {
		t.Fatalf("reference samples: %d, %v", n, err)
	}
	res := analyse(t, b.cfg, pts)
	for _, pr := range res.Points {
		var found bool
		for _, c := range pr.Budget {
			if c.Name == "barometer" {
				found = c.Evaluated && math.Abs(c.StandardUncertaintyPa-15) < 1e-9 // 0.3 hPa at k = 2
			}
		}
		if !found {
			t.Errorf("point %d: no barometer term of 15 Pa in %+v", pr.Index+1, pr.Budget)
		}
	}
	if res.Ambient == nil || len(res.Ambient.Run) != 3 {
		t.Fatalf("ambient summary %+v", res.Ambient)
	}
}

// A room warming through the device's reference conditions (20 ± 2 °C)
// during the run: each point carries its temperature, the run's record
// warns when it leaves the conditions, the result warns at every point
// outside them, and the temperature term grows with the measured
// deviation. A hygrometer that never answers costs warnings only.
func TestAmbientLeavesReferenceConditions(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a whole procedure")
	}
	t.Parallel()
	room := sim.DefaultAmbient
	room.TemperatureC, room.DriftKPerHour = 21.2, 30 // invented: a room warming fast, to cross 22 °C within the run
	b := ambientBench(t, room, func(cfg *config.Config) {
		for i := range cfg.Instruments {
			if in := &cfg.Instruments[i]; in.Name == "humidity" {
				in.Link = config.Link{Kind: config.LinkModbusTCP, Address: "127.0.0.1:1", UnitID: 1, Timeout: 200 * time.Millisecond, Backoff: time.Second}
				in.Value = config.ValueRead{Table: "input", Register: sim.RegAmbientHumidity, Type: "float32", WordOrder: "ABCD", Scale: 1}
			}
		}
	})
	id, state, reason := b.run(t, 90*time.Second)
	if state != store.StateFinished {
		b.logInstruments(t)
		t.Fatalf("run ended %q: %s (a silent hygrometer must not stop it)", state, reason)
	}
	pts := b.points(t, id)
	inside, outside := 0, 0
	for _, p := range pts {
		temp, ok := ambientOf(p, units.Temperature)
		if !ok {
			t.Fatalf("%s has no temperature", describe(p))
		}
		if _, ok := ambientOf(p, units.Humidity); ok {
			t.Errorf("%s has a humidity although the hygrometer never answered", describe(p))
		}
		if temp.Mean > 22 {
			outside++
		} else {
			inside++
		}
	}
	if inside == 0 || outside == 0 {
		t.Fatalf("%d points inside and %d outside the conditions: the room should cross 22 °C during the run", inside, outside)
	}
	evs := b.events(t, id)
	var left, noReading, linkLost bool
	for _, ev := range evs {
		switch {
		case ev.Type == "ambient" && strings.Contains(ev.Message, "is outside the reference conditions 20 ± 2 °C"):
			left = left || ev.Instrument == "room"
		case ev.Type == "ambient" && ev.Instrument == "humidity" && strings.Contains(ev.Message, "no reading"):
			noReading = true
		}
	}
	all, err := b.st.Events(0, 100000) // the link was lost before the run began
	if err != nil {
		t.Fatal(err)
	}
	for _, ev := range all {
		linkLost = linkLost || ev.Type == "link" && ev.Instrument == "humidity" && strings.Contains(ev.Message, "link lost")
	}
	if !left || !noReading || !linkLost {
		t.Errorf("events: left the conditions %v, no humidity reading %v, hygrometer link lost %v", left, noReading, linkLost)
	}
	res := analyse(t, b.cfg, pts)
	warned := 0
	for _, w := range res.Warnings {
		if strings.Contains(w, "ambient temperature") && strings.Contains(w, "is outside the reference conditions 20 ± 2 °C") {
			warned++
		}
	}
	if warned != outside {
		t.Errorf("%d warnings about the temperature, want one for each of the %d points outside:\n%s", warned, outside, strings.Join(res.Warnings, "\n"))
	}
	// The temperature term follows the measured deviation from 20 °C:
	// 0.01 % of span per K.
	for n, pr := range res.Points {
		dev := 0.0
		for _, p := range pts {
			if p.Kind == analysis.Measurement && p.Index == pr.Index {
				temp, _ := ambientOf(p, units.Temperature)
				dev = math.Max(dev, math.Abs(temp.Mean-20))
			}
		}
		for _, c := range pr.Budget {
			if c.Name == "temperature" && math.Abs(c.EstimatePa-0.01/100*16e5*dev) > 1e-6 {
				t.Errorf("point %d: temperature term %g Pa, want %g Pa", n+1, c.EstimatePa, 0.01/100*16e5*dev)
			}
		}
	}
	for _, q := range res.Ambient.Run {
		if q.Kind == units.Temperature && (!q.Outside || q.Min > 22 || q.Max < 22) {
			t.Errorf("run temperature range %+v: it crossed 22 °C", q)
		}
	}
}
