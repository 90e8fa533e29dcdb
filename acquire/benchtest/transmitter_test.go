package benchtest

import (
	"io"
	"log"
	"math"
	"net"
	"sync/atomic"
	"testing"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
	"plateau/config/record"
	"plateau/drivers/regcodec"
	"plateau/drivers/sim"
)

// loopMeter is a current meter of 0.01 % of reading + 0.001 mA (k = 2)
// showing 0.001 mA: a bench multimeter's figures, invented for the test.
var loopMeter = config.LoopMeter{UncertaintyPct: 0.01, FloorMA: 0.001, Coverage: 2, ResolutionMA: 0.001}

// evaluateOutput analyses a finished run's points with the record the
// configuration freezes, and returns the output result.
func evaluateOutput(t *testing.T, cfg *config.Config, pts []analysis.Point) analysis.Result {
	t.Helper()
	rec := record.Of(cfg)
	if rec.Device.Loop == nil {
		t.Fatal("the record does not carry the transmitter's loop")
	}
	res, err := analysis.Analyze(pts, rec.Device, rec.Reference, rec.Options)
	if err != nil {
		t.Fatal(err)
	}
	if res.Output == nil || len(res.Output.Points) == 0 {
		t.Fatalf("no output result: %+v", res.Output)
	}
	return res
}

// A simulated 0–16 bar transmitter with a zero error of 0.032 bar and a
// span error of 0.1 %, read as a loop current over Modbus RTU on a
// pseudo-terminal and calibrated on its output: each reading's error in mA
// and in % of span is the simulator's known error carried through the
// 4–20 mA scaling (REFERENCES.md §7: 16 mA over 16 bar, 1 mA per bar),
// within the device's noise and resolution.
func TestTransmitterCalibratedInMilliamps(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a whole procedure")
	}
	t.Parallel()
	b := bench(t, func(c *config.Config) {
		c.Device.Kind, c.Devices[0].Device.Kind = "transmitter", "transmitter"
		c.Device.ResolutionPa, c.Devices[0].Device.ResolutionPa = 0.001e5, 0.001e5
		c.Simulator.Device.Kind = sim.KindTransmitter
		c.Simulator.Device.Zero, c.Simulator.Device.Span = "0.032 bar", "0.1 %"
		c.Simulator.Device.Nonlinearity, c.Simulator.Device.DeadBand = "0 bar", "0 bar"
		c.Simulator.Device.Resolution, c.Simulator.Device.Noise = "0.0001 bar", "0.0002 bar"
		c.Reference.LoopMeter = loopMeter
	})
	id, state, reason := b.run(t, 60*time.Second)
	if state != store.StateFinished {
		b.logInstruments(t)
		t.Fatalf("run ended %q: %s", state, reason)
	}
	pts := b.points(t, id)
	res := evaluateOutput(t, b.cfg, pts)
	const perPa = 16.0 / 16e5 // mA per Pa on 0–16 bar
	const tol = 0.002         // mA: noise and resolution of device and reference
	n := 0
	for _, op := range res.Output.Points {
		for _, r := range op.Readings {
			truth := (b.rig.DeviceError(r.AppliedPa, r.Direction) - b.rig.ReferenceError(r.AppliedPa)) * perPa
			if math.Abs(r.ErrorMA-truth) > tol || math.Abs(r.ErrorPercentSpan-truth/16*100) > tol/16*100 {
				t.Errorf("point %d cycle %d %s: %.4f mA (%.4f %%), simulator says %.4f mA", op.Index+1, r.Cycle, r.Direction, r.ErrorMA, r.ErrorPercentSpan, truth)
			}
			if want := 4 + r.AppliedPa*perPa; math.Abs(r.IdealMA-want) > 1e-9 {
				t.Errorf("ideal %.6f mA at %.0f Pa, want %.6f", r.IdealMA, r.AppliedPa, want)
			}
			if r.Signal != analysis.SignalNone {
				t.Errorf("point %d: flagged %q at %.4f mA", op.Index+1, r.Signal, r.MeasuredMA)
			}
			n++
		}
		// Zero error 0.032 mA at 0 bar, 0.032 + 0.1 % × 16 mA = 0.048 mA at 16 bar.
		if op.NominalPa == 0 && math.Abs(op.ErrorMA-0.032) > tol || op.NominalPa == 16e5 && math.Abs(op.ErrorMA-0.048) > tol {
			t.Errorf("point %d: %.4f mA", op.Index+1, op.ErrorMA)
		}
		names := map[string]bool{}
		for _, c := range op.Budget {
			names[c.Name] = c.Evaluated
		}
		if !names["loop_meter"] || !names["loop_meter_resolution"] {
			t.Errorf("point %d: budget %+v lacks the loop meter", op.Index+1, op.Budget)
		}
	}
	if n != 2*(3+3) {
		t.Errorf("%d readings on the output, want every captured point", n)
	}
}

// transmitterServer is a 4–20 mA transmitter without output limits on a
// Modbus TCP server of its own: it follows the simulated bench's pressure
// and reads offsetMA off the ideal current, so with −0.30 mA it reads
// 3.70 mA at zero, below the NE 43 band the simulator's own transmitter
// would saturate at.
type transmitterServer struct {
	rig      atomic.Pointer[sim.Rig] // nil until the bench is up: no reply
	spanPa   float64
	offsetMA float64
}

func (s *transmitterServer) HandleInputRegisters(req *modbus.InputRegistersRequest) ([]uint16, error) {
	rig := s.rig.Load()
	if rig == nil {
		return nil, modbus.ErrServerDeviceFailure
	}
	// The simulated reference reads bar (its default unit).
	mA := 4 + 16*rig.Sample().Reference*1e5/s.spanPa + s.offsetMA
	spec, err := regcodec.ParseSpec("float32", "ABCD")
	if err != nil {
		return nil, err
	}
	w, err := regcodec.Encode(mA, spec)
	if err != nil || req.Addr != 0 || req.Quantity != 2 {
		return nil, modbus.ErrIllegalDataAddress
	}
	return w, nil
}

func (s *transmitterServer) HandleCoils(*modbus.CoilsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalFunction
}

func (s *transmitterServer) HandleDiscreteInputs(*modbus.DiscreteInputsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalFunction
}

func (s *transmitterServer) HandleHoldingRegisters(*modbus.HoldingRegistersRequest) ([]uint16, error) {
	return nil, modbus.ErrIllegalFunction
}

// An as-found transmitter whose zero output is 3.70 mA: the reading is
// kept, the point at 0 % is captured and evaluated (−0.30 mA, −1.875 % of
// span, a fail) with its under-range flag in the store and in the result,
// and no point of the run is lost.
func TestTransmitterZeroBelowBandIsEvaluated(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a whole procedure")
	}
	t.Parallel()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	tx := &transmitterServer{spanPa: 16e5, offsetMA: -0.30}
	srv, err := modbus.NewServer(&modbus.ServerConfiguration{URL: "tcp://" + addr, Timeout: time.Minute, MaxClients: 4,
		Logger: log.New(io.Discard, "", 0)}, tx)
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Stop() })
	b := bench(t, func(c *config.Config) {
		c.Device.Kind, c.Devices[0].Device.Kind = "transmitter", "transmitter"
		c.Simulator.Device.Kind = sim.KindTransmitter // the simulated one is not read; kinds stay consistent
		c.Reference.LoopMeter = loopMeter
		for i := range c.Instruments {
			in := &c.Instruments[i]
			if in.Role != config.RoleDevice {
				continue
			}
			*in = config.Instrument{Name: in.Name, Role: config.RoleDevice, Poll: 100 * time.Millisecond, Unit: "mA",
				Link:  config.Link{Kind: config.LinkModbusTCP, Address: addr, UnitID: 1},
				Value: config.ValueRead{Table: "input", Register: 0, Type: "float32", WordOrder: "ABCD", Scale: 1},
				Loop:  config.CurrentLoop{Enabled: true, Lower: "0 bar", Upper: "16 bar"}}
			if err := config.CompleteInstrument(in); err != nil {
				t.Fatal(err)
			}
		}
	})
	tx.rig.Store(b.rig)
	id, state, reason := b.run(t, 60*time.Second)
	if state != store.StateFinished {
		b.logInstruments(t)
		t.Fatalf("run ended %q: %s", state, reason)
	}
	pts := b.points(t, id)
	if want := 2 * (1 + 3 + 3 + 1); len(pts) != want {
		t.Fatalf("%d points, want %d: a flagged reading must not lose its point", len(pts), want)
	}
	flagged := 0
	for _, p := range pts {
		zero := p.Nominal == 0 // the zero readings of each cycle too
		if zero != (p.Signal == analysis.SignalUnderRange) {
			t.Errorf("stored point cycle %d %s index %d: signal %q", p.Cycle, p.Direction, p.Index, p.Signal)
		}
		if p.Signal != analysis.SignalNone {
			flagged++
		}
	}
	res := evaluateOutput(t, b.cfg, pts)
	for _, op := range res.Output.Points {
		if math.Abs(op.ErrorMA+0.30) > 0.002 || math.Abs(op.ErrorPercentSpan+1.875) > 0.0125 {
			t.Errorf("point %d: %.4f mA, %.4f %% of span; want −0.30 mA, −1.875 %%", op.Index+1, op.ErrorMA, op.ErrorPercentSpan)
		}
		if op.NominalPa == 0 && (op.Signal != analysis.SignalUnderRange || math.Abs(op.MeasuredMA-3.70) > 0.002) {
			t.Errorf("zero point: %.4f mA, signal %q", op.MeasuredMA, op.Signal)
		}
	}
	if res.Output.Flagged != flagged || flagged == 0 || res.Decision != analysis.Fail {
		t.Errorf("flagged %d in the result, %d stored; decision %s", res.Output.Flagged, flagged, res.Decision)
	}
}
