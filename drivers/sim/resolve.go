package sim

import (
	"errors"
	"fmt"

	"plateau/config"
)

// Parts of the rig an instrument entry can name in sim_part, and the
// transports sim_via can pick.
const (
	PartReference = config.RoleReference
	PartDevice    = config.RoleDevice
	PartSource    = config.RoleSource
)

// ErrNotStarted says the rig has no endpoints yet.
var ErrNotStarted = errors.New("simulated rig not started")

// Resolve rewrites an instrument whose link kind is "sim" into one that
// reaches the running rig over a real transport (modbus-tcp, modbus-rtu or
// serial), with the register, word order, unit and, for a 4–20 mA device,
// the current loop filled in. The dial gauge resolves to a "manual" link:
// its readings come from Operator. Instruments with other link kinds are
// returned unchanged. Timeouts, retries and poll interval are kept.
func (r *Rig) Resolve(inst config.Instrument) (config.Instrument, error) {
	if inst.Link.Kind != config.LinkSim {
		return inst, nil
	}
	ep := r.Endpoints()
	if ep.TCP == "" {
		return inst, fmt.Errorf("instrument %q: %w", inst.Name, ErrNotStarted)
	}
	if out, ok, err := r.resolveAmbient(inst); ok {
		return out, err
	}
	part := inst.SimPart
	if part == "" {
		part = inst.Role
	}
	via := inst.SimVia
	if via == "" {
		via = config.LinkModbusTCP
	}
	out := inst
	out.SimPart, out.SimVia = "", ""
	out.Value, out.Line, out.Loop, out.Set = config.ValueRead{}, config.LineProtocol{}, config.CurrentLoop{}, config.SourceControl{}
	bad := func(format string, a ...any) (config.Instrument, error) {
		return inst, fmt.Errorf("instrument %q: %s", inst.Name, fmt.Sprintf(format, a...))
	}

	reg := func(name, table string) config.ValueRead {
		for _, g := range ep.Registers {
			if g.Name == name && inTable(g, table) {
				return config.ValueRead{Table: table, Register: g.Addr, Type: g.Type, WordOrder: g.Order, Scale: scaleOf(g)}
			}
		}
		panic("sim: register " + name + " missing from the map") // the map is a constant of this package
	}

	var line string
	unit := ep.UnitID
	switch part {
	case PartReference:
		out.Unit, line = r.p.refUnit.Symbol, ep.ReferenceLine
		out.Value = reg("reference", "input")
	case PartDevice:
		d, err := r.deviceFor(inst.Name)
		if err != nil {
			return bad("%v", err)
		}
		line, unit = ep.Devices[d.k].Line, int(d.unit)
		switch d.p.kind {
		case KindDial:
			out.Link = config.Link{Kind: config.LinkManual}
			out.Unit = d.p.devUnit.Symbol
			if err := config.CompleteInstrument(&out); err != nil {
				return inst, fmt.Errorf("instrument %q: %w", inst.Name, err)
			}
			return out, nil
		case KindTransmitter:
			out.Unit = "mA"
			out.Value = reg("current", "input")
			out.Loop = config.CurrentLoop{Enabled: true, Lower: d.p.lowerText, Upper: d.p.upperText}
		default:
			out.Unit = d.p.devUnit.Symbol
			out.Value = reg("device", "holding")
		}
	case PartSource:
		if via == config.LinkSerial {
			return bad("sim_via %q: the simulated source is driven over Modbus only (modbus-tcp or modbus-rtu)", via)
		}
		out.Unit = r.p.refUnit.Symbol
		out.Value = reg("source", "holding")
		sp := reg("setpoint", "holding")
		coil, reached := CoilVent, InputReached
		out.Set = config.SourceControl{Setpoint: sp, VentCoil: &coil, ReachedInput: &reached}
	default:
		return bad("sim_part %q: want %s, %s or %s", part, PartReference, PartDevice, PartSource)
	}

	link := config.Link{Timeout: inst.Link.Timeout, Retries: inst.Link.Retries, Backoff: inst.Link.Backoff, Pause: inst.Link.Pause}
	switch via {
	case config.LinkModbusTCP:
		link.Kind, link.Address, link.UnitID = config.LinkModbusTCP, ep.TCP, unit
	case config.LinkModbusRTU:
		link.Kind, link.Address, link.UnitID = config.LinkModbusRTU, ep.RTU, unit
		link.Baud, link.DataBits, link.Parity, link.StopBits = ep.RTUBaud, 8, "even", 1
	case config.LinkSerial:
		link.Kind, link.Address = config.LinkSerial, line
		link.Baud, link.DataBits, link.Parity, link.StopBits = 9600, 8, "none", 1
		out.Value = config.ValueRead{}
		out.Line = config.LineProtocol{Query: CmdRead, Terminator: "\r\n", Overload: []string{ReplyOverload}}
	default:
		return bad("sim_via %q: want %s, %s or %s", via, config.LinkModbusTCP, config.LinkModbusRTU, config.LinkSerial)
	}
	out.Link = link
	// The simulator's instruments get the same defaults and resolved values
	// as the file's: no driver has defaults of its own. The quiet pause
	// between requests stays as the sim entry gave it: a pseudo-terminal has
	// no RS-485 transceiver to turn round, and an accelerated clock needs
	// every read the line can give.
	if err := config.CompleteInstrument(&out); err != nil {
		return inst, fmt.Errorf("instrument %q: %w", inst.Name, err)
	}
	out.Link.Pause = inst.Link.Pause
	return out, nil
}

func scaleOf(r Register) float64 {
	if r.Scale == 0 {
		return 1
	}
	return r.Scale
}
