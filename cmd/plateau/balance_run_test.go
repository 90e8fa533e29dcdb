package main

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/balance"
	"plateau/drivers/clock"
)

// simTransmitter is a simulated transmitter of our own (invented): it sees
// the pressure the balance generates, with a zero offset and a span error,
// rounded to its resolution.
type simTransmitter struct {
	balance      drivers.Gauge // the true pressure: the floating piston's
	zeroPa, span float64
	resolutionPa float64
}

func (s simTransmitter) Read(ctx context.Context) (drivers.Reading, error) {
	r, err := s.balance.Read(ctx)
	if err != nil {
		return drivers.Reading{}, drivers.Fail("transmitter", drivers.KindTimeout, err)
	}
	v := math.Round((s.zeroPa+r.Pa*(1+s.span))/s.resolutionPa) * s.resolutionPa
	return drivers.Reading{Time: r.Time, Pa: v, Raw: v / 1e5, RawUnit: "bar"}, nil
}

func (simTransmitter) Close() error { return nil }

// A run on the engine with the pressure balance as the reference: at each
// step the operator loads the pieces for the step's pressure (plateau load
// writes the loading file the balance gauge reads), the simulated
// transmitter beside the piston follows the pressure, and the engine
// captures its points like with any reference. The errors of indication
// are the transmitter's known zero and span errors.
func TestRunWithBalanceReference(t *testing.T) {
	src, err := os.ReadFile(filepath.Join(mustWd(t), "../../testdata/config/balance.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	yaml := strings.NewReplacer(
		"  kind: dial\n", "  kind: digital\n",
		"  resolution: 0.05 bar\n  class: \"1\"\n", "  resolution: 0.0001 bar\n  limit: {span: 0.25 %}\n",
		"  device_height: 1.10", "  device_height: 0.90", // the transmitter at the piston's level
		"  decision: simple\n", "  decision: simple\n  hold: 1s\n  timeout: 2m\n  settle: {window: 3s, min_count: 10, band: 1 %}\n",
		// A polled device; the engine gets the simulated transmitter below, not this link.
		"    link: {kind: manual}\n    unit: bar\n", "    link: {kind: modbus-tcp, address: \"127.0.0.1:1502\"}\n    unit: bar\n    poll: 100ms\n",
		"      piston_temperature_uncertainty: 0.2\n", "      piston_temperature_uncertainty: 0.2\n      piston_temperature: 21.3\n",
	).Replace(string(src))
	path := filepath.Join(dir, "balance.yaml")
	if err := os.WriteFile(path, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load(path)
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewScaled(20)
	env := drivers.OpenEnv{Clock: clk}
	ref, err := drivers.OpenGauge(cfg.Instruments[0], env)
	if err != nil {
		t.Fatal(err)
	}
	truth, err := drivers.OpenGauge(cfg.Instruments[0], env)
	if err != nil {
		t.Fatal(err)
	}
	dut := simTransmitter{balance: truth, zeroPa: 150, span: 0.0012, resolutionPa: 10}
	st, err := store.Open(filepath.Join(dir, "run.db"), store.Options{Clock: clk})
	if err != nil {
		t.Fatal(err)
	}
	eng, err := acquire.New(acquire.Options{Config: cfg, Store: st, Clock: clk, Instruments: acquire.Instruments{
		Reference: acquire.Instrument{Name: "tester", Gauge: ref, Poll: 100 * time.Millisecond},
		Devices:   []acquire.Instrument{{Name: "dial", Gauge: dut, Poll: 100 * time.Millisecond, ResolutionPa: 10}},
	}})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	served := make(chan struct{})
	go func() { eng.Serve(ctx); close(served) }()
	defer func() {
		cancel()
		<-served
		if err := st.Check(); err != nil {
			t.Errorf("store check: %v", err)
		}
		st.Close()
	}()
	<-eng.Ready()
	if _, err := eng.Start("balance"); err != nil {
		t.Fatal(err)
	}
	// The loading for each target of the plan (0 %, 25 % … of 0-16 bar).
	loadings := map[float64]string{4e5: "P1+M1+M2", 8e5: "P1+M1+M2+M3", 12e5: "P1+M1+M2+M3+M4", 16e5: "P1+M1+M2+M3+M4+M5"}
	done := make(chan struct{})
	go func() { eng.Wait(context.Background()); close(done) }()
	loaded := math.NaN()
	deadline := time.After(2 * time.Minute)
	for running := true; running; {
		select {
		case <-done:
			running = false
			continue
		case <-deadline:
			t.Fatalf("the run did not end: %+v", eng.Status())
		case <-time.After(10 * time.Millisecond):
		}
		target := eng.Status().TargetPa
		if target == loaded {
			continue
		}
		l := balance.Loading{Vented: true}
		if target != 0 {
			ids, ok := loadings[target]
			if !ok {
				t.Fatalf("no loading for a target of %v Pa", target)
			}
			l = balance.Loading{Pieces: strings.Split(ids, "+")}
		}
		if err := balance.WriteLoading(cfg.Instruments[0].Link.Address, l); err != nil {
			t.Fatal(err)
		}
		loaded = target
	}
	if last := eng.Status().Last; last == nil || last.State != string(store.StateFinished) {
		t.Fatalf("run ended: %+v", eng.Status())
	}
	runs, err := st.Runs()
	if err != nil || len(runs) != 1 {
		t.Fatalf("runs %v %v", runs, err)
	}
	points, err := st.Points(runs[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	res, err := analysis.Analyze(points, analysis.Device{UpperPa: 16e5, ResolutionPa: 10, Accuracy: analysis.Accuracy{PercentOfSpan: 0.25}},
		analysis.Reference{PercentOfReading: 0.0087, FloorPa: 76, K: 2}, analysis.Options{Rule: analysis.RuleSimple})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Points) != 5 {
		t.Fatalf("%d points, want 5", len(res.Points))
	}
	for _, p := range res.Points {
		want := dut.zeroPa + dut.span*p.ReferenceMeanPa
		if math.Abs(p.MeanErrorPa-want) > dut.resolutionPa {
			t.Errorf("point at %.0f Pa: error %.1f Pa, want %.1f Pa", p.NominalPa, p.MeanErrorPa, want)
		}
	}
}
