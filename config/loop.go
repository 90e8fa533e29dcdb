package config

import (
	"math"
	"strconv"
	"strings"

	"plateau/analysis/units"
)

// LoopMeter is the current meter that reads a transmitter's 4–20 mA
// output, described with the reference (reference.loop_meter): its
// certificate's expanded uncertainty, % of reading plus a floor in mA at
// coverage factor Coverage, and its resolution. Left out, the output's
// budget says the terms are not evaluated.
type LoopMeter struct {
	Uncertainty string  `mapstructure:"uncertainty"` // % of reading, e.g. "0.01 %"
	Floor       string  `mapstructure:"floor"`       // e.g. "0.002 mA"
	Coverage    float64 `mapstructure:"coverage"`    // k of its certificate (default 2)
	Resolution  string  `mapstructure:"resolution"`  // its digit step, e.g. "0.001 mA"

	UncertaintyPct float64 `mapstructure:"-"`
	FloorMA        float64 `mapstructure:"-"`
	ResolutionMA   float64 `mapstructure:"-"`
}

// maxLoopMA bounds a current of the meter's description: more than a 4–20
// mA loop carries is a wrong unit (common practice).
const maxLoopMA = 25

func (c *Config) resolveLoopMeter(p *Problems) {
	m := &c.Reference.LoopMeter
	m.UncertaintyPct, _ = percent(p, "reference.loop_meter.uncertainty", m.Uncertainty, 10)
	m.FloorMA = milliamps(p, "reference.loop_meter.floor", m.Floor)
	m.ResolutionMA = milliamps(p, "reference.loop_meter.resolution", m.Resolution)
}

// milliamps reads a current such as "0.002 mA" (the unit may be left out);
// "" is 0.
func milliamps(p *Problems, key, val string) float64 {
	s := strings.TrimSpace(val)
	if s == "" {
		return 0
	}
	v, err := strconv.ParseFloat(strings.TrimSpace(strings.TrimSuffix(s, "mA")), 64)
	if err != nil || math.IsNaN(v) || v < 0 || v > maxLoopMA {
		p.bad(key, val, "must be a current from 0 to %d mA, e.g. \"0.002 mA\"", maxLoopMA)
		return 0
	}
	return v
}

// validateLoops judges what a transmitter calibrated on its output needs:
// a loop range that is the device range (the ideal current is computed on
// it, so another range would turn every error into a span error), and a
// current meter described with the reference when one is given (without
// one, the report says its terms are not evaluated).
func (c *Config) validateLoops(p *Problems) {
	m := c.Reference.LoopMeter
	if !(m.Coverage > 0) || math.IsInf(m.Coverage, 0) {
		p.bad("reference.loop_meter.coverage", fmtNum(m.Coverage), "must be a coverage factor > 0, usually 2")
	}
	loops := 0
	for _, dut := range c.Devices {
		ends, ok := c.loopEnds(dut)
		if !ok {
			continue
		}
		loops++
		d := dut.Device
		if !d.okLower || !d.okUpper {
			continue // the unreadable value is reported where it is read
		}
		slack := loopRangeSlack * math.Abs(d.UpperPa-d.LowerPa)
		for _, e := range []struct {
			end      loopRangeEnd
			pa       float64
			which    string
			given    string
			givenKey string
		}{{ends[0], d.LowerPa, "lower", d.Lower, dut.keyOf("lower")}, {ends[1], d.UpperPa, "upper", d.Upper, dut.keyOf("upper")}} {
			pa, read := loopEnd(e.end.val)
			if read && math.Abs(pa-e.pa) > slack {
				p.bad(e.end.key, e.end.val, "differs from the device range's %s end %s (%s): the loop range must be the device range, "+
					"or every error becomes a span error; re-range the transmitter or correct the configuration", e.which, e.given, e.givenKey)
			}
		}
	}
	if loops == 0 && (m.Uncertainty != "" || m.Floor != "" || m.Resolution != "") {
		p.warn("reference.loop_meter", "", "no device under test is read as a 4–20 mA current (current_loop): the loop meter is not used")
	}
}

// loopRangeEnd is where one end of a loop range is given.
type loopRangeEnd struct{ key, val string }

// loopEnds says where the loop range of a device read as a 4–20 mA current
// is given: its instrument's current_loop, or the simulated device's range.
func (c *Config) loopEnds(dut DeviceUnderTest) ([2]loopRangeEnd, bool) {
	if _, _, ok := c.OutputLoop(dut.Instrument); !ok || dut.Index < 0 {
		return [2]loopRangeEnd{}, false
	}
	in := c.Instruments[dut.Index]
	if in.Loop.Enabled {
		k := loopKey(dut.Index)
		return [2]loopRangeEnd{{k + ".lower", in.Loop.Lower}, {k + ".upper", in.Loop.Upper}}, true
	}
	ends := [2]loopRangeEnd{{"simulator.device.lower", c.Simulator.Device.Lower}, {"simulator.device.upper", c.Simulator.Device.Upper}}
	for j, u := range c.Simulator.Devices {
		if u.Instrument != in.Name {
			continue
		}
		k := "simulator.devices[" + strconv.Itoa(j) + "]"
		if u.Lower != "" {
			ends[0] = loopRangeEnd{k + ".lower", u.Lower}
		}
		if u.Upper != "" {
			ends[1] = loopRangeEnd{k + ".upper", u.Upper}
		}
	}
	return ends, true
}

// loopRangeSlack is how far, relative to the span, a loop range end may sit
// from the device's and still be the same value written in another unit.
const loopRangeSlack = 1e-9

func loopKey(i int) string { return "instruments[" + strconv.Itoa(i) + "].current_loop" }

func loopEnd(s string) (float64, bool) {
	q, err := units.ParseQuantity(s)
	if err != nil || q.Percent {
		return 0, false
	}
	pa, err := q.Pa()
	return pa, err == nil
}

// OutputLoop is the loop range of the device under test read by the named
// instrument ("" for the only device), and whether that device is read as
// a 4–20 mA current: its current_loop, or a simulated transmitter, whose
// loop spans the simulated device's range as the simulator serves it.
func (c *Config) OutputLoop(instrument string) (lowerPa, upperPa float64, ok bool) {
	idx := -1
	for _, d := range c.Devices {
		if d.Instrument == instrument || (instrument == "" && len(c.Devices) == 1) {
			idx = d.Index
			break
		}
	}
	if idx < 0 || idx >= len(c.Instruments) {
		return 0, 0, false
	}
	in := c.Instruments[idx]
	if in.Loop.Enabled {
		return in.Loop.LowerPa, in.Loop.UpperPa, true
	}
	if in.Link.Kind != LinkSim || in.SimPart != "device" {
		return 0, 0, false
	}
	s := c.Simulator.Device
	for _, u := range c.Simulator.Devices {
		if u.Instrument == in.Name {
			s.Kind, s.Lower, s.Upper = orText(u.Kind, s.Kind), orText(u.Lower, s.Lower), orText(u.Upper, s.Upper)
		}
	}
	lo, okLo := loopEnd(s.Lower)
	hi, okHi := loopEnd(s.Upper)
	return lo, hi, s.Kind == simTransmitter && okLo && okHi
}

// simTransmitter is the simulated device kind read as a loop current.
const simTransmitter = "transmitter"

func orText(s, fallback string) string {
	if s != "" {
		return s
	}
	return fallback
}
