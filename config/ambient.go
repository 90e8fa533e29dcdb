package config

import (
	"fmt"
	"strings"

	"plateau/analysis/units"
)

// Measures are the keys that say what an instrument measures: the mode
// of a pressure instrument (mode.go), the quantity of an ambient one.
type Measures struct {
	// Mode is gauge or absolute; "" takes the mode its unit's spelling
	// carries (psig, bar(a) …), else gauge. A barometer reads absolute.
	Mode string `mapstructure:"mode"`
	// Quantity is what an ambient instrument reads: temperature,
	// humidity or barometric (pressure of the air, absolute).
	Quantity string `mapstructure:"quantity"`
	// Uncertainty is an ambient instrument's expanded uncertainty (k = 2)
	// in its own unit, e.g. "0.3 hPa" or "0.2 K"; a barometer's enters the
	// budget of a comparison across modes.
	Uncertainty string `mapstructure:"uncertainty"`

	// UncertaintyBase is Uncertainty in the quantity's base unit (K for a
	// temperature difference, %RH, Pa), resolved.
	UncertaintyBase float64 `mapstructure:"-"`
}

// Conditions are a device's reference conditions: the ambient ranges its
// specification holds in. Readings of the ambient instruments outside
// them are warned about, per point.
type Conditions struct {
	Temperature string `mapstructure:"temperature"` // e.g. "20 ± 2 °C"
	Humidity    string `mapstructure:"humidity"`    // e.g. "30 … 70 %RH"
	Barometric  string `mapstructure:"barometric"`  // e.g. "950 … 1050 hPa"

	// Resolved ranges in °C, %RH and Pa; nil when not given.
	TemperatureC *units.Interval `mapstructure:"-"`
	HumidityPct  *units.Interval `mapstructure:"-"`
	BarometricPa *units.Interval `mapstructure:"-"`
}

// AmbientInstrument is an ambient instrument of the bench, resolved.
type AmbientInstrument struct {
	Name            string
	Kind            units.AmbientKind
	Unit            units.AmbientUnit
	UncertaintyBase float64 // expanded (k = 2), base unit
}

// Ambient lists the ambient instruments whose unit could be read, in file order.
func (c *Config) Ambient() []AmbientInstrument {
	var out []AmbientInstrument
	for _, in := range c.Instruments {
		if a, ok := AmbientOf(in); ok {
			out = append(out, a)
		}
	}
	return out
}

// AmbientOf describes an instrument with role ambient; false for others
// and for one whose quantity or unit cannot be read.
func AmbientOf(in Instrument) (AmbientInstrument, bool) {
	if in.Role != RoleAmbient {
		return AmbientInstrument{}, false
	}
	k := units.AmbientKind(strings.ToLower(strings.TrimSpace(in.Quantity)))
	u, err := units.LookupAmbient(k, in.Unit)
	if err != nil {
		return AmbientInstrument{}, false
	}
	return AmbientInstrument{Name: in.Name, Kind: k, Unit: u, UncertaintyBase: in.UncertaintyBase}, true
}

// Barometer is the bench's barometer, if it has one.
func (c *Config) Barometer() (AmbientInstrument, bool) {
	for _, a := range c.Ambient() {
		if a.Kind == units.Barometric {
			return a, true
		}
	}
	return AmbientInstrument{}, false
}

// resolveMeasures reads an instrument's mode, and an ambient
// instrument's quantity, unit and uncertainty.
func (in *Instrument) resolveMeasures(p *Problems, key string) {
	in.resolveMode(p, key)
	in.UncertaintyBase = 0
	if in.Role != RoleAmbient {
		for k, v := range map[string]string{"quantity": in.Quantity, "uncertainty": in.Uncertainty} {
			if strings.TrimSpace(v) != "" {
				p.bad(key+"."+k, v, "is for instruments with role: ambient; a %s's uncertainty is given in its own section", in.Role)
			}
		}
		return
	}
	in.Quantity = strings.ToLower(strings.TrimSpace(in.Quantity))
	if in.Quantity == "" {
		p.bad(key+".quantity", "", "is required for an ambient instrument: one of %s", strings.Join(units.AmbientKinds(), ", "))
		return
	}
	if !oneOf(p, key+".quantity", in.Quantity, units.AmbientKinds()) {
		return
	}
	k := units.AmbientKind(in.Quantity)
	switch m, err := units.ParseMode(in.Mode); {
	case err != nil:
		p.bad(key+".mode", in.Mode, "must be gauge or absolute")
	case k == units.Barometric && m == units.Gauge:
		p.bad(key+".mode", in.Mode, "a barometer reads the absolute pressure of the air: leave mode out or write absolute")
	case k != units.Barometric && m != units.ModeUnset:
		p.bad(key+".mode", in.Mode, "is for pressure instruments, not a %s sensor", k)
	}
	if k == units.Barometric {
		in.Mode = ModeAbsolute
	}
	if strings.TrimSpace(in.Unit) == "" {
		p.bad(key+".unit", "", "is required: the unit the %s sensor gives, e.g. %s", k, map[units.AmbientKind]string{units.Temperature: "°C, K or °F", units.Humidity: "%RH", units.Barometric: "hPa"}[k])
		return
	}
	if _, err := units.LookupAmbient(k, in.Unit); err != nil {
		p.bad(key+".unit", in.Unit, "%v", err)
		return
	}
	if in.Loop.Enabled {
		p.bad(key+".current_loop.enabled", "true", "the 4–20 mA loop is for devices under test: scale a %s transmitter's value with value.scale and value.offset instead", k)
	}
	if s := strings.TrimSpace(in.Uncertainty); s != "" {
		v, err := units.ParseDifference(k, s)
		if err != nil {
			p.bad(key+".uncertainty", s, "%v", err)
		}
		in.UncertaintyBase = v
	}
}

// resolveConditions reads a device's reference conditions.
func (d *Device) resolveConditions(p *Problems, keyOf func(string) string) {
	c := &d.Conditions
	c.TemperatureC, c.HumidityPct, c.BarometricPa = nil, nil, nil
	for _, f := range []struct {
		key, val string
		kind     units.AmbientKind
		out      **units.Interval
	}{
		{"conditions.temperature", c.Temperature, units.Temperature, &c.TemperatureC},
		{"conditions.humidity", c.Humidity, units.Humidity, &c.HumidityPct},
		{"conditions.barometric", c.Barometric, units.Barometric, &c.BarometricPa},
	} {
		if strings.TrimSpace(f.val) == "" {
			continue
		}
		r, err := units.ParseInterval(f.kind, f.val)
		if err != nil {
			p.bad(keyOf(f.key), f.val, "%v", err)
			continue
		}
		*f.out = &r
	}
	// The reference conditions' temperature is the one the budget's
	// temperature term is reckoned from, unless the file gives that apart.
	if t := c.TemperatureC; t != nil {
		if _, explicit := p.lines[strings.ToLower(keyOf("reference_temperature"))]; !explicit {
			d.ReferenceTemperature = t.Nominal
		}
	}
}

// validateAmbient: at most one ambient instrument of each quantity (the
// one whose readings go on the record and into the budget); reference
// conditions that agree with the reference temperature of the budget.
func (c *Config) validateAmbient(p *Problems) {
	seen := map[string]int{}
	for i, in := range c.Instruments {
		if in.Role != RoleAmbient || in.Quantity == "" {
			continue
		}
		if j, dup := seen[in.Quantity]; dup {
			p.bad(fmt.Sprintf("instruments[%d].quantity", i), in.Quantity, "instruments[%d] (%s) already reads the %s: one ambient instrument of each quantity goes on the record",
				j, c.Instruments[j].Name, in.Quantity)
			continue
		}
		seen[in.Quantity] = i
	}
	for _, dut := range c.Devices {
		d := dut.Device
		t := d.Conditions.TemperatureC
		if t == nil {
			continue
		}
		_, explicit := p.lines[strings.ToLower(dut.keyOf("reference_temperature"))]
		if explicit && !t.Holds(d.ReferenceTemperature) {
			p.bad(dut.keyOf("conditions.temperature"), d.Conditions.Temperature, "does not hold %s (%s °C), the temperature the budget's temperature term is reckoned from",
				dut.keyOf("reference_temperature"), fmtNum(d.ReferenceTemperature))
		}
		if _, ok := seen["temperature"]; !ok {
			p.warn(dut.keyOf("conditions.temperature"), d.Conditions.Temperature, "no ambient instrument reads the temperature (role: ambient, quantity: temperature): the conditions cannot be checked")
		}
	}
}
