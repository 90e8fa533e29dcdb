package config

import (
	"fmt"
	"math"
	"net"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"time"

	"plateau/analysis/units"
)

// validateSharedLinks: instruments on one port or gateway share one
// connection, so they must agree on how it is driven.
func (c *Config) validateSharedLinks(p *Problems) {
	first := map[string]int{}
	type place struct {
		addr, table    string
		unit, register int
	}
	reads := map[place]int{}
	for i, in := range c.Instruments {
		l := in.Link
		if l.Address == "" || l.Kind == LinkSim || l.Kind == LinkManual {
			continue
		}
		if l.Kind != LinkSerial {
			// Two instruments reading one register of one unit are one
			// instrument configured twice, typically a unit id left unchanged.
			at := place{l.Address, in.Value.Table, l.UnitID, in.Value.Register}
			if j, dup := reads[at]; dup {
				p.bad(fmt.Sprintf("instruments[%d].link.unit_id", i), strconv.Itoa(l.UnitID),
					"instruments[%d] already reads %s register %d of unit %d on %s: give each unit on a line its own id", j, at.table, at.register, at.unit, at.addr)
			} else {
				reads[at] = i
			}
		}
		j, seen := first[l.Address]
		if !seen {
			first[l.Address] = i
			continue
		}
		o := c.Instruments[j].Link
		o.UnitID, l.UnitID = 0, 0 // the one thing that may differ on a shared bus
		if o != l {
			p.bad(fmt.Sprintf("instruments[%d].link", i), l.Address,
				"shares its port with instruments[%d] but not its settings: kind, baud, parity, data and stop bits, timeout, retries, backoff and pause must be the same", j)
		}
	}
}

func (c *Config) validateLink(p *Problems, key string, in *Instrument) {
	l := in.Link
	if !oneOf(p, key+".link.kind", l.Kind, linkKinds) {
		return
	}
	switch l.Kind {
	case LinkBalance:
		c.validateBalanceLink(p, key, in)
		return
	case LinkSim:
		if oneOf(p, key+".sim_part", in.SimPart, simParts) && in.SimPart != in.Role && !(in.SimPart == "device" && in.Role == RoleDevice) {
			p.bad(key+".sim_part", in.SimPart, "does not match the instrument's role %q", in.Role)
		}
		oneOf(p, key+".sim_via", in.SimVia, simVias)
		c.validateLinkTimes(p, key, l)
		return
	case LinkManual:
		if in.Role == RoleAmbient {
			return // an operator types the room's conditions; its unit is judged with its quantity (ambient.go)
		}
		if in.Role != RoleDevice {
			p.bad(key+".link.kind", l.Kind, "operator entry is for reading a device under test (an analog dial), not a %s", in.Role)
		}
		if in.Unit == "" {
			p.bad(key+".unit", "", "is required: the unit the operator reads off the dial and types in, e.g. bar")
		} else if _, err := units.Lookup(in.Unit); err != nil {
			p.bad(key+".unit", in.Unit, "%v", err)
		}
		return
	}
	if strings.TrimSpace(l.Address) == "" {
		switch l.Kind {
		case LinkModbusTCP, LinkModbusRTUTCP:
			p.bad(key+".link.address", "", "is required: host:port of the instrument or gateway, e.g. 192.168.1.20:502")
		default:
			p.bad(key+".link.address", "", "is required: the serial device, e.g. /dev/serial/by-id/usb-…")
		}
	} else if l.Kind == LinkModbusTCP || l.Kind == LinkModbusRTUTCP {
		if _, _, err := net.SplitHostPort(l.Address); err != nil {
			p.bad(key+".link.address", l.Address, "must be host:port, e.g. 192.168.1.20:502")
		}
	}
	if l.Kind == LinkModbusRTU || l.Kind == LinkSerial {
		if !slices.Contains(baudRates, l.Baud) {
			p.bad(key+".link.baud", strconv.Itoa(l.Baud), "is not a baud rate a UART uses (allowed: %s)", joinInts(baudRates))
		}
		if l.DataBits < 5 || l.DataBits > 8 {
			p.bad(key+".link.data_bits", strconv.Itoa(l.DataBits), "must be 5, 6, 7 or 8")
		}
		oneOf(p, key+".link.parity", l.Parity, parities)
		if l.StopBits != 1 && l.StopBits != 2 {
			p.bad(key+".link.stop_bits", strconv.Itoa(l.StopBits), "must be 1 or 2")
		}
	}
	c.validateLinkTimes(p, key, l)
	if in.Role == RoleAmbient {
		// its unit is judged with its quantity (ambient.go)
	} else if in.Unit == "" {
		p.bad(key+".unit", "", "is required: the unit of the value the instrument gives (after scale and offset), e.g. bar, kPa or mA")
	} else if in.Unit != "mA" {
		if _, err := units.Lookup(in.Unit); err != nil {
			p.bad(key+".unit", in.Unit, "%v", err)
		}
	}
	if in.Loop.Enabled {
		if in.Unit != "mA" {
			p.bad(key+".unit", in.Unit, "must be mA when current_loop is enabled")
		}
		if in.Loop.Lower != "" && in.Loop.Upper != "" && in.Loop.UpperPa <= in.Loop.LowerPa {
			p.bad(key+".current_loop.upper", in.Loop.Upper, "must be above current_loop.lower")
		}
	} else if in.Unit == "mA" {
		p.bad(key+".current_loop.enabled", "false", "a value in mA needs current_loop (lower and upper range values) to become a pressure")
	}
	if l.Kind == LinkSerial {
		if in.Line.Reply != "" {
			if _, err := regexp.Compile(in.Line.Reply); err != nil {
				p.bad(key+".line.reply", in.Line.Reply, "is not a valid regular expression: %v", err)
			}
		}
		oneOf(p, key+".line.terminator", in.Line.Terminator, []string{"\r\n", "\n", "\r"})
		for j, w := range in.Line.Overload {
			if strings.TrimSpace(w) == "" {
				p.bad(fmt.Sprintf("%s.line.overload[%d]", key, j), w, "an empty word would match every line")
			}
		}
		return
	}
	// Modbus kinds
	wholeInRange(p, key+".link.unit_id", l.UnitID, 1, 247, "a Modbus unit id")
	validateValue(p, key+".value", in.Value)
	if in.Role == RoleSource {
		validateValue(p, key+".source.setpoint", in.Set.Setpoint)
		s := in.Set
		if s.VentCoil == nil && s.VentRegister == nil {
			p.bad(key+".source", "", "give source.vent_coil or source.vent_register: plateau must be able to vent the source on an over-pressure")
		}
		if s.VentCoil != nil {
			wholeInRange(p, key+".source.vent_coil", *s.VentCoil, 0, 65535, "a coil address (0-based, as on the wire)")
		}
		if s.VentRegister != nil {
			if wholeInRange(p, key+".source.vent_register", *s.VentRegister, 0, 65535, "a register address (0-based, as on the wire)") {
				docNumber(p, key+".source.vent_register", *s.VentRegister, "holding")
			}
			wholeInRange(p, key+".source.vent_value", s.VentValue, 0, 65535, "a value one register holds")
		}
		if s.ReachedInput != nil {
			if wholeInRange(p, key+".source.reached_input", *s.ReachedInput, 0, 65535, "a discrete input address (0-based, as on the wire)") {
				docNumber(p, key+".source.reached_input", *s.ReachedInput, "discrete")
			}
		}
	}
}

// validateLinkTimes: the drivers take these as given, so each must make sense.
func (c *Config) validateLinkTimes(p *Problems, key string, l Link) {
	inRange(p, key+".link.timeout", l.Timeout, minTimeout, time.Minute)
	wholeInRange(p, key+".link.retries", l.Retries, 0, 10, "the number of extra attempts")
	inRange(p, key+".link.backoff", l.Backoff, minTimeout, 10*time.Minute)
	inRange(p, key+".link.pause", l.Pause, 0, 10*time.Second)
}

// docNumber warns about an address that looks like the numbering many
// manuals use, where the first digit names the table and counting starts
// at 1: 40001 is holding register 0, 30001 input register 0, 10001
// discrete input 0 (common practice; the wire address is 0-based,
// REFERENCES.md §9.2).
func docNumber(p *Problems, key string, addr int, table string) {
	first := map[string]int{"holding": 40001, "input": 30001, "discrete": 10001}[table]
	for _, f := range []int{40001, 30001, 10001} {
		if addr < f || addr > f+9998 {
			continue
		}
		hint := ""
		if f == first {
			hint = fmt.Sprintf("; if so, the wire address is %d", addr-f)
		}
		p.warn(key, strconv.Itoa(addr), "looks like a manual's register number (%d counts from 1 in the %dxxxx block) rather than the 0-based wire address%s",
			addr, f/10000, hint)
		return
	}
}

func validateValue(p *Problems, key string, v ValueRead) {
	oneOf(p, key+".table", v.Table, tables)
	words := 1
	if oneOf(p, key+".type", v.Type, types) {
		switch v.Type {
		case "int32", "uint32", "float32":
			words = 2
			oneOf(p, key+".word_order", v.WordOrder, orders32)
		case "float64":
			words = 4
			oneOf(p, key+".word_order", v.WordOrder, orders64)
		}
	}
	if wholeInRange(p, key+".register", v.Register, 0, 65536-words, "a register address (0-based, as on the wire)") {
		docNumber(p, key+".register", v.Register, v.Table)
	}
	if v.Scale == 0 || math.Abs(v.Scale) > 1e9 {
		p.bad(key+".scale", fmt.Sprint(v.Scale), "must be a number other than zero, at most 1e9 in size")
	}
	if math.Abs(v.Offset) > maxPressurePa {
		p.bad(key+".offset", fmt.Sprint(v.Offset), "is larger than any reading could be")
	}
}
