package sim

import (
	"math"
	"sync"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/drivers/clock"
	"plateau/drivers/regcodec"
)

// bank answers Modbus requests from the model for one device's unit id:
// the shared reference and controller, and that device. It implements
// modbus.RequestHandler, so the library's TCP server and the project's RTU
// responder share it. Handlers run on several goroutines at once.
type bank struct {
	m    *model
	j    *injector // this device's value faults
	clk  clock.Clock
	p    params
	k    int // the device
	regs []Register
	ctl  *controller // shared by every device's bank: there is one controller
}

// controller is the simulated pressure controller's command state.
type controller struct {
	mu      sync.Mutex
	spWords [2]uint16 // setpoint words as last written, applied when the low word arrives
	writes  []Write   // the latest commands the controller accepted, in order (at most maxWrites)
}

// maxWrites bounds the write log: tests look at the commands of one run,
// while a simulated bench serving a daemon for days must not grow by every
// setpoint it was ever sent.
const maxWrites = 4096

// Write is one command the simulated controller accepted over the wire.
type Write struct {
	Wall  time.Time // when it arrived (wall time)
	Clock time.Time // when it arrived (the rig's clock)
	Vent  bool      // a vent command; otherwise a setpoint
	Pa    float64   // the setpoint
}

// logWrite records a command; the caller holds b.ctl.mu.
func (b *bank) logWrite(w Write) {
	w.Wall, w.Clock = time.Now(), b.clk.Now()
	if len(b.ctl.writes) == maxWrites { // keep the newer half, in the same array
		b.ctl.writes = b.ctl.writes[:copy(b.ctl.writes, b.ctl.writes[maxWrites/2:])]
	}
	b.ctl.writes = append(b.ctl.writes, w)
}

// accepted returns a copy of the write log.
func (c *controller) accepted() []Write {
	c.mu.Lock()
	defer c.mu.Unlock()
	return append([]Write(nil), c.writes...)
}

var setpointSpec = mustSpec("float32", "ABCD")

func mustSpec(typ, order string) regcodec.Spec {
	s, err := regcodec.ParseSpec(typ, order)
	if err != nil {
		panic(err) // constant arguments; a failure is a programming error caught by every test
	}
	return s
}

func (b *bank) sample() Sample {
	return b.j.value(b.m.sample(b.clk.Now(), b.k), b.p, b.p.devs[b.k])
}

func (b *bank) HandleCoils(req *modbus.CoilsRequest) ([]bool, error) {
	if !req.IsWrite {
		return bits(b.regs, "coil", req.Addr, req.Quantity, b.sample())
	}
	for i := range req.Args {
		if int(req.Addr)+i != CoilVent {
			return nil, modbus.ErrIllegalDataAddress // the reached coil is read-only; nothing else exists
		}
	}
	if req.Args[0] {
		b.ctl.mu.Lock()
		b.logWrite(Write{Vent: true})
		b.ctl.mu.Unlock()
		b.m.vent(b.clk.Now())
	}
	return nil, nil
}

func (b *bank) HandleDiscreteInputs(req *modbus.DiscreteInputsRequest) ([]bool, error) {
	return bits(b.regs, "discrete", req.Addr, req.Quantity, b.sample())
}

func (b *bank) HandleInputRegisters(req *modbus.InputRegistersRequest) ([]uint16, error) {
	return image(b.regs, "input", req.Addr, req.Quantity, b.sample())
}

func (b *bank) HandleHoldingRegisters(req *modbus.HoldingRegistersRequest) ([]uint16, error) {
	if !req.IsWrite {
		return image(b.regs, "holding", req.Addr, req.Quantity, b.sample())
	}
	return nil, b.writeHolding(int(req.Addr), req.Args)
}

// writeHolding checks a whole write before applying any of it.
func (b *bank) writeHolding(addr int, args []uint16) error {
	b.ctl.mu.Lock()
	defer b.ctl.mu.Unlock()
	sp, touchedLow, vent := b.ctl.spWords, false, false
	for i, w := range args {
		switch a := addr + i; a {
		case RegSetpoint, RegSetpoint + 1:
			sp[a-RegSetpoint] = w
			touchedLow = touchedLow || a == RegSetpoint+1
		case RegVent:
			if w > 1 {
				return modbus.ErrIllegalDataValue
			}
			vent = w == 1
		default:
			return modbus.ErrIllegalDataAddress // read-only or absent
		}
	}
	now := b.clk.Now()
	if touchedLow {
		v, err := regcodec.Decode(sp[:], setpointSpec)
		pa := b.p.refUnit.ToPa(v)
		// The controller refuses a setpoint beyond its ceiling, as a real one does.
		if err != nil || math.IsNaN(pa) || pa > b.p.maxPa || pa < b.p.minPa {
			return modbus.ErrIllegalDataValue
		}
		b.m.setPoint(now, pa)
		b.logWrite(Write{Pa: pa})
	}
	b.ctl.spWords = sp
	if vent {
		b.logWrite(Write{Vent: true})
		b.m.vent(now)
	}
	return nil
}
