package config

import (
	"fmt"
	"math"
	"strings"
	"time"

	"plateau/analysis/units"
)

// simulatedFor is the simulator.devices entry that the named instrument
// reads, -1 when none names it.
func (s *Simulator) simulatedFor(instrument string) int {
	for i, u := range s.Devices {
		if u.Instrument == instrument {
			return i
		}
	}
	return -1
}

// resolveSimulatedDevices makes each of several simulated devices the
// configured device its instrument reads unless told otherwise (kind and
// range), and reads its quantities once to report those that cannot be read.
func (c *Config) resolveSimulatedDevices(p *Problems) {
	s := &c.Simulator
	for i := range s.Devices {
		u := &s.Devices[i]
		key := fmt.Sprintf("simulator.devices[%d]", i)
		for _, dut := range c.Devices {
			if dut.Instrument != u.Instrument || u.Instrument == "" {
				continue
			}
			if u.Kind == "" {
				u.Kind = dut.Device.Kind
			}
			if u.Lower == "" {
				u.Lower = dut.Device.Lower
			}
			if u.Upper == "" {
				u.Upper = dut.Device.Upper
			}
		}
		for _, q := range []struct{ key, val string }{
			{"zero", u.Zero}, {"nonlinearity", u.Nonlinearity}, {"dead_band", u.DeadBand},
			{"resolution", u.Resolution}, {"noise", u.Noise}, {"lower", u.Lower}, {"upper", u.Upper},
		} {
			pressure(p, key+"."+q.key, q.val, false)
		}
		signedPercent(p, key+".span", u.Span)
	}
}

// signedPercent reads a span error, which may be negative (a device that
// reads low), as a percentage within ±100 %.
func signedPercent(p *Problems, key, val string) {
	if strings.TrimSpace(val) == "" {
		return
	}
	q, err := units.ParseQuantity(val)
	switch {
	case err != nil:
		p.bad(key, val, "%v", err)
	case !q.Percent:
		p.bad(key, val, "must be a percentage of reading such as \"0.1 %%\" or \"-0.2 %%\"")
	case math.Abs(q.Value) > 100:
		p.bad(key, val, "must be from -100 %% to 100 %%")
	}
}

// validateSimulatedDevices judges simulator.devices: each entry names its
// own instrument, one with role device on the simulated bench, of the kind
// the device's description gives; and every simulated device instrument
// has an entry when there are entries at all.
func (c *Config) validateSimulatedDevices(p *Problems) {
	s := &c.Simulator
	if len(s.Devices) == 0 {
		return
	}
	if len(s.Devices) > MaxDevices {
		p.bad("simulator.devices", "", "holds %d devices; the simulated bench holds at most %d", len(s.Devices), MaxDevices)
	}
	seen := map[string]int{}
	for i, u := range s.Devices {
		key := fmt.Sprintf("simulator.devices[%d]", i)
		if u.Instrument == "" {
			p.bad(key+".instrument", "", "is required: the name of the instruments entry (role device, link kind sim) that reads this simulated device")
		} else if j, dup := seen[u.Instrument]; dup {
			p.bad(key+".instrument", u.Instrument, "also names simulator.devices[%d]: each simulated device is read by its own instrument", j)
		} else {
			seen[u.Instrument] = i
			c.validateSimulatedDevice(p, key, u)
		}
		if u.Kind != "" {
			oneOf(p, key+".kind", u.Kind, devKinds)
		}
		inRange(p, key+".operator_delay", u.OperatorDelay, 0, time.Hour)
		inRange(p, key+".cut_at", u.CutAt, 0, 30*24*time.Hour)
	}
	for i, in := range c.Instruments {
		if in.Role == RoleDevice && in.Link.Kind == LinkSim && s.simulatedFor(in.Name) < 0 {
			p.bad(fmt.Sprintf("instruments[%d]", i), in.Name, "is simulated, but no entry of simulator.devices names it (instrument: %s)", in.Name)
		}
	}
	if s.RTU.Baud < 0 || s.RTU.Baud > 1_000_000 {
		p.bad("simulator.rtu.baud", fmt.Sprint(s.RTU.Baud), "must be a baud rate such as 19200")
	}
}

// validateSimulatedDevice checks the instrument one entry names.
func (c *Config) validateSimulatedDevice(p *Problems, key string, u SimUnit) {
	for _, dut := range c.Devices {
		if dut.Instrument != u.Instrument {
			continue
		}
		in := c.Instruments[dut.Index]
		if in.Link.Kind != LinkSim {
			p.bad(key+".instrument", u.Instrument, "is not on the simulated bench (its link kind is %q, not sim)", in.Link.Kind)
		}
		if u.Kind != "" && u.Kind != dut.Device.Kind {
			p.bad(key+".kind", u.Kind, "but %s says the device is %q: make them the same", dut.Key, dut.Device.Kind)
		}
		return
	}
	p.bad(key+".instrument", u.Instrument, "names no instrument with role device")
}
