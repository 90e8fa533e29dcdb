package sim

import (
	"fmt"
	"math"
	"strings"

	"github.com/simonvetter/modbus"

	"plateau/drivers/regcodec"
)

// Register is one entry of the rig's Modbus register map. Addresses are the
// 0-based wire (PDU) addresses; tools that count from 1 (mbpoll without -0)
// add one.
type Register struct {
	Name     string
	Table    string  // "input+holding" (same value in both tables), "holding", "coil" or "discrete"
	Addr     int     // first register, coil or input
	Type     string  // regcodec type; "bool" for coils and discrete inputs
	Order    string  // regcodec word order
	Scale    float64 // engineering value = raw × Scale (0 means 1)
	Unit     string
	Writable bool
	About    string
	value    func(Sample) float64
	// perDevice: the register shows the device of its unit id, not the
	// shared reference or controller.
	perDevice bool
}

// Wire (0-based) addresses of the register map. The measured values appear
// in both the input and the holding table so that clients that only read
// holding registers (FC 03) see them too; they use a different word order
// each, so a client's codec is exercised.
const (
	RegReference      = 0   // reference, float32 ABCD, reference unit
	RegDevice         = 2   // device indication, float32 CDAB, device unit
	RegCurrent        = 4   // transmitter loop current, float32 BADC, mA
	RegReferenceCount = 6   // reference × 10000, int32 DCBA, reference unit (scale 0.0001)
	RegReference64    = 8   // reference, float64 ABCDEFGH
	RegDevice64       = 12  // device indication, float64 GHEFCDAB
	RegStatus         = 16  // uint16 bits: 0 reached, 1 vented, 2 device over range
	RegSetpoint       = 100 // holding, float32 ABCD, reference unit, read/write
	RegVent           = 102 // holding, uint16: write 1 to vent; reads 1 while vented
	RegSource         = 104 // holding, float32 ABCD, the controller's own pressure reading
	CoilVent          = 0   // coil: write ON to vent; reads the vent state
	CoilReached       = 1   // coil (read-only) and discrete input 0: setpoint reached
	InputReached      = 0   // discrete input: setpoint reached
	InputVented       = 1   // discrete input: vented
	InputOver         = 2   // discrete input: device over range
)

// Status bits of RegStatus.
const (
	StatusReached = 1 << iota
	StatusVented
	StatusOver
)

func boolf(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// registerMap lists every register the rig serves, with the units of this rig.
func registerMap(refUnit, devUnit string) []Register {
	return []Register{
		{Name: "reference", Table: "input+holding", Addr: RegReference, Type: "float32", Order: "ABCD", Unit: refUnit,
			About: "reference transducer", value: func(s Sample) float64 { return s.Reference }},
		{Name: "device", Table: "input+holding", Addr: RegDevice, Type: "float32", Order: "CDAB", Unit: devUnit,
			About: "device under test indication", value: func(s Sample) float64 { return s.Device }, perDevice: true},
		{Name: "current", Table: "input+holding", Addr: RegCurrent, Type: "float32", Order: "BADC", Unit: "mA",
			About: "4–20 mA loop current of the device", value: func(s Sample) float64 { return s.Current }, perDevice: true},
		{Name: "reference_counts", Table: "input+holding", Addr: RegReferenceCount, Type: "int32", Order: "DCBA", Scale: 1e-4, Unit: refUnit,
			About: "reference in counts of 0.0001", value: func(s Sample) float64 { return s.Reference }},
		{Name: "reference_f64", Table: "input+holding", Addr: RegReference64, Type: "float64", Order: "ABCDEFGH", Unit: refUnit,
			About: "reference, double precision", value: func(s Sample) float64 { return s.Reference }},
		{Name: "device_f64", Table: "input+holding", Addr: RegDevice64, Type: "float64", Order: "GHEFCDAB", Unit: devUnit,
			About: "device indication, double precision", value: func(s Sample) float64 { return s.Device }, perDevice: true},
		{Name: "status", Table: "input+holding", Addr: RegStatus, Type: "uint16", Order: "AB",
			About: "bit 0 setpoint reached, bit 1 vented, bit 2 device over range",
			value: func(s Sample) float64 {
				return boolf(s.Reached)*StatusReached + boolf(s.Vented)*StatusVented + boolf(s.Over)*StatusOver
			}, perDevice: true},
		{Name: "setpoint", Table: "holding", Addr: RegSetpoint, Type: "float32", Order: "ABCD", Unit: refUnit, Writable: true,
			About: "source setpoint; write both words (FC 16)", value: func(s Sample) float64 { return s.Setpoint }},
		{Name: "vent", Table: "holding", Addr: RegVent, Type: "uint16", Order: "AB", Writable: true,
			About: "write 1 to vent; reads 1 while vented", value: func(s Sample) float64 { return boolf(s.Vented) }},
		{Name: "source", Table: "holding", Addr: RegSource, Type: "float32", Order: "ABCD", Unit: refUnit,
			About: "the controller's own pressure reading", value: func(s Sample) float64 { return s.Source }},
		{Name: "vent", Table: "coil", Addr: CoilVent, Type: "bool", Writable: true,
			About: "write ON to vent; reads the vent state", value: func(s Sample) float64 { return boolf(s.Vented) }},
		{Name: "reached", Table: "coil", Addr: CoilReached, Type: "bool",
			About: "setpoint reached (read-only)", value: func(s Sample) float64 { return boolf(s.Reached) }},
		{Name: "reached", Table: "discrete", Addr: InputReached, Type: "bool",
			About: "setpoint reached", value: func(s Sample) float64 { return boolf(s.Reached) }},
		{Name: "vented", Table: "discrete", Addr: InputVented, Type: "bool",
			About: "vented", value: func(s Sample) float64 { return boolf(s.Vented) }},
		{Name: "over", Table: "discrete", Addr: InputOver, Type: "bool",
			About: "device over range", value: func(s Sample) float64 { return boolf(s.Over) }, perDevice: true},
	}
}

// MapText renders a register map as an aligned table for people.
func MapText(regs []Register) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%-14s %-8s %-17s %-9s %-9s %s\n", "table", "address", "name", "type", "order", "meaning")
	for _, r := range regs {
		addr := fmt.Sprint(r.Addr)
		if n := words(r); n > 1 {
			addr = fmt.Sprintf("%d-%d", r.Addr, r.Addr+n-1)
		}
		about := r.About
		if r.Unit != "" {
			about += " [" + r.Unit + "]"
		}
		if r.Scale != 0 && r.Scale != 1 {
			about += fmt.Sprintf(" (× %g)", r.Scale)
		}
		if r.Writable {
			about += " (writable)"
		}
		fmt.Fprintf(&b, "%-14s %-8s %-17s %-9s %-9s %s\n", r.Table, addr, r.Name, r.Type, r.Order, about)
	}
	return b.String()
}

func words(r Register) int {
	if r.Type == "bool" {
		return 1
	}
	s, err := regcodec.ParseSpec(r.Type, r.Order)
	if err != nil {
		return 1
	}
	return s.Words()
}

// image encodes the registers of one table that overlap [addr, addr+qty)
// from sample s. An address no register covers is an illegal data address,
// as a real instrument answers.
func image(regs []Register, table string, addr, qty uint16, s Sample) ([]uint16, error) {
	out := make([]uint16, qty)
	covered := make([]bool, qty)
	lo, hi := int(addr), int(addr)+int(qty)
	for _, r := range regs {
		if !inTable(r, table) || r.Type == "bool" {
			continue
		}
		n := words(r)
		if r.Addr+n <= lo || r.Addr >= hi {
			continue
		}
		spec, err := regcodec.ParseSpec(r.Type, r.Order)
		if err != nil {
			return nil, fmt.Errorf("register %s: %w", r.Name, err)
		}
		v := r.value(s)
		if r.Scale != 0 {
			v /= r.Scale
		}
		w, err := regcodec.Encode(v, spec)
		if err != nil { // an integer register cannot hold the value: saturate, as instruments do
			w, _ = regcodec.Encode(math.Copysign(math.MaxInt32, v), spec)
		}
		for i, word := range w {
			if a := r.Addr + i; a >= lo && a < hi {
				out[a-lo], covered[a-lo] = word, true
			}
		}
	}
	for _, c := range covered {
		if !c {
			return nil, modbus.ErrIllegalDataAddress
		}
	}
	return out, nil
}

// bits reads coils or discrete inputs over [addr, addr+qty).
func bits(regs []Register, table string, addr, qty uint16, s Sample) ([]bool, error) {
	out := make([]bool, qty)
	for i := range out {
		r, ok := find(regs, table, int(addr)+i)
		if !ok {
			return nil, modbus.ErrIllegalDataAddress
		}
		out[i] = r.value(s) != 0
	}
	return out, nil
}

func inTable(r Register, table string) bool {
	return r.Table == table || (r.Table == "input+holding" && (table == "input" || table == "holding"))
}

func find(regs []Register, table string, addr int) (Register, bool) {
	for _, r := range regs {
		if inTable(r, table) && addr >= r.Addr && addr < r.Addr+words(r) {
			return r, true
		}
	}
	return Register{}, false
}
