package sim

import (
	"context"
	"fmt"
	"io"
	"log"
	"math"
	"net"
	"sync"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers/regcodec"
)

// AmbientSettings describe the simulated room around the bench: a
// temperature that drifts slowly, a humidity, and a barometric pressure
// that swings slowly about its mean, each with its sensor's noise.
// Invented values of a room of our own, for tests and the demo.
type AmbientSettings struct {
	TemperatureC      float64       // at the start, °C
	DriftKPerHour     float64       // temperature drift, K per hour of clock time
	TemperatureNoise  float64       // sensor noise, K (standard deviation)
	HumidityPct       float64       // %RH
	HumidityNoise     float64       // %RH
	BarometricPa      float64       // mean barometric pressure, Pa
	BarometricSwingPa float64       // amplitude of the slow swing, Pa
	BarometricPeriod  time.Duration // period of the swing
	BarometricNoisePa float64       // sensor noise, Pa
}

// DefaultAmbient is a quiet laboratory near sea level.
var DefaultAmbient = AmbientSettings{
	TemperatureC: 21, DriftKPerHour: 0.5, TemperatureNoise: 0.02,
	HumidityPct: 45, HumidityNoise: 0.3,
	BarometricPa: 101325, BarometricSwingPa: 80, BarometricPeriod: 2 * time.Hour, BarometricNoisePa: 3,
}

// WithAmbient sets the simulated room (DefaultAmbient otherwise).
func WithAmbient(s AmbientSettings) Option {
	return func(r *Rig) { r.amb = &ambientSim{s: s} }
}

// Registers of the simulated ambient instruments: input registers,
// float32, word order ABCD, on the room's own Modbus TCP server (a
// separate box on the bench, as a room monitor is).
const (
	RegAmbientTemperature = 0 // °C
	RegAmbientHumidity    = 2 // %RH
	RegAmbientBarometric  = 4 // hPa
	// RegAbsoluteReference is the simulated reference read in absolute
	// mode: what it reads in gauge mode plus the room's barometric
	// pressure, in the reference's unit.
	RegAbsoluteReference = 6
)

// Noise streams of the room's sensors.
const (
	streamTemperature uint64 = 0x300 + iota
	streamHumidity
	streamBarometric
)

// AmbientSample is the room as its sensors read it, or its truth.
type AmbientSample struct {
	TemperatureC float64
	HumidityPct  float64
	BarometricPa float64
}

// ambientSim is the simulated room and its server.
type ambientSim struct {
	s     AmbientSettings
	epoch time.Time

	mu   sync.Mutex
	addr string
	srv  *modbus.ModbusServer
}

// startAmbient serves the room's instruments until ctx ends.
func (r *Rig) startAmbient(ctx context.Context) error {
	if r.amb == nil {
		r.amb = &ambientSim{s: DefaultAmbient}
	}
	a := r.amb
	a.epoch = r.clk.Now()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return fmt.Errorf("reserve a port for the simulated room: %w", err)
	}
	addr := l.Addr().String()
	l.Close()
	srv, err := modbus.NewServer(&modbus.ServerConfiguration{URL: "tcp://" + addr, Timeout: 5 * time.Minute, MaxClients: 8,
		Logger: log.New(io.Discard, "", 0)}, &ambientHandler{r: r})
	if err != nil {
		return fmt.Errorf("modbus server of the simulated room on %s: %w", addr, err)
	}
	if err := srv.Start(); err != nil {
		return fmt.Errorf("start the simulated room's server on %s: %w", addr, err)
	}
	a.mu.Lock()
	a.addr, a.srv = addr, srv
	a.mu.Unlock()
	r.run(ctx, func(ctx context.Context) error {
		<-ctx.Done()
		return srv.Stop()
	})
	return nil
}

// AmbientAddress is where the room's instruments answer (Modbus TCP).
func (r *Rig) AmbientAddress() string {
	if r.amb == nil {
		return ""
	}
	r.amb.mu.Lock()
	defer r.amb.mu.Unlock()
	return r.amb.addr
}

// AmbientTruth is the room's true conditions at clock time t (no
// sensor noise), for tests to compare with.
func (r *Rig) AmbientTruth(t time.Time) AmbientSample {
	a := r.amb
	if a == nil {
		return AmbientSample{}
	}
	s := a.s
	h := t.Sub(a.epoch).Hours()
	baro := s.BarometricPa
	if s.BarometricPeriod > 0 {
		baro += s.BarometricSwingPa * math.Sin(2*math.Pi*t.Sub(a.epoch).Seconds()/s.BarometricPeriod.Seconds())
	}
	return AmbientSample{TemperatureC: s.TemperatureC + s.DriftKPerHour*h, HumidityPct: s.HumidityPct, BarometricPa: baro}
}

// ambientRead is what the room's sensors show at clock time t.
func (r *Rig) ambientRead(t time.Time) AmbientSample {
	s := r.amb.s
	v := r.AmbientTruth(t)
	idx := int64(math.Floor(t.Sub(r.amb.epoch).Seconds() / updateSeconds))
	v.TemperatureC += s.TemperatureNoise * gauss(r.p.seed, streamTemperature, idx)
	v.HumidityPct += s.HumidityNoise * gauss(r.p.seed, streamHumidity, idx)
	v.BarometricPa += s.BarometricNoisePa * gauss(r.p.seed, streamBarometric, idx)
	return v
}

// ambientHandler serves the room's input registers; the rest is absent.
type ambientHandler struct{ r *Rig }

var ambientSpec = mustSpec("float32", "ABCD")

func (h *ambientHandler) HandleInputRegisters(req *modbus.InputRegistersRequest) ([]uint16, error) {
	r := h.r
	now := r.clk.Now()
	room := r.AmbientTruth(now)
	read := r.ambientRead(now)
	// The absolute reference sees the true barometric pressure; the
	// barometer reads it with its own noise.
	absRef := r.Sample().Reference + r.p.refUnit.FromPa(room.BarometricPa)
	values := []float64{read.TemperatureC, read.HumidityPct, read.BarometricPa / 100, absRef}
	var words []uint16
	for _, v := range values {
		w, err := regcodec.Encode(v, ambientSpec)
		if err != nil {
			return nil, modbus.ErrServerDeviceFailure
		}
		words = append(words, w...)
	}
	lo, hi := int(req.Addr), int(req.Addr)+int(req.Quantity)
	if hi > len(words) {
		return nil, modbus.ErrIllegalDataAddress
	}
	return words[lo:hi], nil
}

func (h *ambientHandler) HandleCoils(*modbus.CoilsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalFunction
}

func (h *ambientHandler) HandleDiscreteInputs(*modbus.DiscreteInputsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalFunction
}

func (h *ambientHandler) HandleHoldingRegisters(*modbus.HoldingRegistersRequest) ([]uint16, error) {
	return nil, modbus.ErrIllegalFunction
}

// resolveAmbient reaches the room's instruments, and a simulated
// reference in absolute mode (which reads the room's pressure on top of
// the bench's), over the room's Modbus TCP server. ok is false for every
// other instrument.
func (r *Rig) resolveAmbient(inst config.Instrument) (out config.Instrument, ok bool, err error) {
	absolute := inst.Role == config.RoleReference && config.InstrumentMode(inst) == config.ModeAbsolute
	if inst.Role != config.RoleAmbient && !absolute {
		return inst, false, nil
	}
	addr := r.AmbientAddress()
	if addr == "" {
		return inst, true, fmt.Errorf("instrument %q: %w", inst.Name, ErrNotStarted)
	}
	out = inst
	out.SimPart, out.SimVia = "", ""
	out.Line, out.Loop, out.Set = config.LineProtocol{}, config.CurrentLoop{}, config.SourceControl{}
	reg := RegAbsoluteReference
	out.Unit = r.p.refUnit.Symbol
	if inst.Role == config.RoleAmbient {
		switch inst.Quantity {
		case "temperature":
			reg, out.Unit = RegAmbientTemperature, "°C"
		case "humidity":
			reg, out.Unit = RegAmbientHumidity, "%RH"
		case "barometric":
			reg, out.Unit = RegAmbientBarometric, "hPa"
		default:
			return inst, true, fmt.Errorf("instrument %q: the simulated room has no %q sensor (temperature, humidity, barometric)", inst.Name, inst.Quantity)
		}
	}
	if via := inst.SimVia; via != "" && via != config.LinkModbusTCP {
		return inst, true, fmt.Errorf("instrument %q: sim_via %q: the simulated room answers over modbus-tcp only", inst.Name, via)
	}
	out.Value = config.ValueRead{Table: "input", Register: reg, Type: "float32", WordOrder: "ABCD", Scale: 1}
	out.Link = config.Link{Kind: config.LinkModbusTCP, Address: addr, UnitID: 1, Timeout: inst.Link.Timeout, Retries: inst.Link.Retries, Backoff: inst.Link.Backoff}
	if err := config.CompleteInstrument(&out); err != nil {
		return inst, true, fmt.Errorf("instrument %q: %w", inst.Name, err)
	}
	return out, true, nil
}
