package config

import (
	"fmt"
	"time"

	"plateau/analysis/units"
)

// Pressure modes. Every pressure instrument and device reads gauge
// pressure (against the atmosphere) unless told otherwise, so a file
// written before modes existed reads as it always did.
const (
	ModeGauge    = string(units.Gauge)
	ModeAbsolute = string(units.Absolute)
)

// standardAtmospherePa is 1 atm, exact by definition (REFERENCES.md §5):
// the nominal barometric pressure used only to judge, before a run,
// whether an instrument of the other mode covers a range.
const standardAtmospherePa = 101325

// modeOf reads the mode an instrument or a device section states: its
// mode key and the mode its unit spellings carry (psig, bar(a) …), which
// must agree. "" when none states one. spellings are key → value pairs.
func modeOf(p *Problems, modeKey, mode string, spellings ...[2]string) string {
	given, err := units.ParseMode(mode)
	if err != nil {
		p.bad(modeKey, mode, "must be gauge or absolute")
		return ""
	}
	from := modeKey
	for _, s := range spellings {
		key, val := s[0], s[1]
		m := units.ModeIn(val)
		switch {
		case m == units.ModeUnset:
		case given == units.ModeUnset:
			given, from = m, key
		case m != given:
			p.bad(key, val, "reads %s pressure, but %s says %s: make them agree", m, from, given)
		}
	}
	return string(given)
}

// resolveMode reads the mode an instrument entry states (mode key, unit).
func (in *Instrument) resolveMode(p *Problems, key string) {
	if in.Role == RoleAmbient {
		return // ambient.go: a barometer reads absolute pressure
	}
	in.Mode = modeOf(p, key+".mode", in.Mode, [2]string{key + ".unit", in.Unit})
}

// resolveMode reads the mode a device section states (mode key, unit
// and range spellings).
func (d *Device) resolveMode(p *Problems, keyOf func(string) string) {
	d.Mode = modeOf(p, keyOf("mode"), d.Mode,
		[2]string{keyOf("unit"), d.Unit}, [2]string{keyOf("lower"), d.Lower}, [2]string{keyOf("upper"), d.Upper})
}

// resolveModes settles every pressure instrument's and device's mode: a
// device and the instrument that reads it must agree; what states none
// reads gauge pressure.
func (c *Config) resolveModes(p *Problems) {
	for i := range c.Devices {
		dut := &c.Devices[i]
		d := &dut.Device
		if dut.Index >= 0 {
			in := &c.Instruments[dut.Index]
			switch {
			case d.Mode == "":
				d.Mode = in.Mode
			case in.Mode != "" && in.Mode != d.Mode:
				p.bad(fmt.Sprintf("instruments[%d].mode", dut.Index), in.Mode, "the instrument reads %s pressure, but %s is %s: make them agree", in.Mode, dut.Key, d.Mode)
			}
			if d.Mode == "" {
				d.Mode = ModeGauge
			}
			in.Mode = d.Mode
			if in.Device != nil {
				in.Device.Mode = d.Mode
			}
		} else if d.Mode == "" {
			d.Mode = ModeGauge
		}
	}
	if len(c.Devices) > 0 {
		c.Device.Mode = c.Devices[0].Device.Mode
	}
	r := c.Reference
	refMode := modeOf(p, "reference.mode", "", [2]string{"reference.lower", r.Lower}, [2]string{"reference.upper", r.Upper})
	for i := range c.Instruments {
		in := &c.Instruments[i]
		if in.Role == RoleReference && refMode != "" {
			if in.Mode != "" && in.Mode != refMode {
				p.bad(fmt.Sprintf("instruments[%d].mode", i), in.Mode, "the reference instrument reads %s pressure, but its range in reference: is written %s: make them agree", in.Mode, refMode)
			}
			if in.Mode == "" {
				in.Mode = refMode
			}
		}
		if in.Mode == "" && in.Role != RoleAmbient {
			in.Mode = ModeGauge
		}
	}
}

// BenchMode is the mode of the devices under test: the plan, the safety
// limit and every captured point are in it. Instruments of the other mode
// are converted to it with the barometer's reading.
func (c *Config) BenchMode() string {
	if c.Device.Mode == "" {
		return ModeGauge
	}
	return c.Device.Mode
}

// InstrumentMode is the mode of a pressure instrument (gauge when unset,
// as for one built in code).
func InstrumentMode(in Instrument) string {
	if in.Mode == "" {
		return ModeGauge
	}
	return in.Mode
}

// referenceShiftPa turns a device pressure into the reference's mode at
// the standard atmosphere, for judging before a run whether the
// reference covers the device range: 0 when both read the same mode.
func (c *Config) referenceShiftPa() float64 {
	for _, in := range c.Instruments {
		if in.Role != RoleReference {
			continue
		}
		switch m := InstrumentMode(in); {
		case m == c.BenchMode():
		case m == ModeAbsolute:
			return standardAtmospherePa
		default:
			return -standardAtmospherePa
		}
	}
	return 0
}

// validateModes: the devices of one run share a mode; an instrument of
// another mode is compared with them only through a barometer.
func (c *Config) validateModes(p *Problems) {
	bench := c.BenchMode()
	for _, dut := range c.Devices[min(1, len(c.Devices)):] {
		if dut.Device.Mode != bench {
			p.bad(dut.keyOf("mode"), dut.Device.Mode, "%s reads %s pressure but %s reads %s: the devices of one run share one mode (calibrate them in two runs)",
				dut.name(), dut.Device.Mode, c.Devices[0].name(), bench)
		}
	}
	b, baro := c.Barometer()
	converts := false
	for i, in := range c.Instruments {
		if in.Role != RoleReference && in.Role != RoleSource {
			continue
		}
		converts = converts || InstrumentMode(in) != bench
		if m := InstrumentMode(in); m != bench && !baro {
			what := "the reference standard"
			if in.Role == RoleSource {
				what = "the pressure controller"
			}
			p.bad(fmt.Sprintf("instruments[%d].mode", i), m, "%s (%s) reads %s pressure but the device under test reads %s: comparing them needs a barometer, since p_abs = p_gauge + p_baro; add an instrument with role: ambient and quantity: barometric, or set both to the same mode",
				what, in.Name, m, bench)
		}
	}
	if !converts || !baro {
		return
	}
	for i, in := range c.Instruments {
		if in.Name != b.Name {
			continue
		}
		key := fmt.Sprintf("instruments[%d]", i)
		if in.Link.Kind != LinkManual && in.Poll > BarometerFresh/2 {
			p.bad(key+".poll", in.Poll.String(), "the barometer converts every reading between gauge and absolute pressure: poll it at least every %s (a reading older than %s is not used)",
				fmtDuration(BarometerFresh/2), fmtDuration(BarometerFresh))
		}
		if b.UncertaintyBase == 0 {
			p.warn(key+".uncertainty", "", "the barometer converts the readings between gauge and absolute pressure, so its uncertainty belongs in the budget: give it from its certificate, e.g. \"0.3 hPa\"")
		}
	}
}

// BarometerFresh is how old the barometer's latest reading may be when it
// converts a reading: the air pressure of a laboratory moves by a few
// hectopascals a day and rarely more than 0.1 hPa in two minutes (common
// practice, from memory), well below a pressure reference's uncertainty.
// An older one makes the converted reading fail.
const BarometerFresh = 2 * time.Minute

// Converted says whether an instrument's readings are converted to the
// bench mode with the barometer's (a reference or a source of the other
// mode).
func (c *Config) Converted(in Instrument) bool {
	return (in.Role == RoleReference || in.Role == RoleSource) && InstrumentMode(in) != c.BenchMode()
}
