package record

import (
	"plateau/analysis"
	"plateau/config"
)

// AmbientRecord is the frozen description of one ambient instrument.
type AmbientRecord struct {
	Instrument string  `json:"instrument"`
	Quantity   string  `json:"quantity"`
	Unit       string  `json:"unit"`                 // the unit it reads in
	Expanded   float64 `json:"expanded_uncertainty"` // k = 2, in the quantity's base unit (K, %RH, Pa); 0: not given
}

// ambientRecords lists the bench's ambient instruments.
func ambientRecords(cfg *config.Config) []AmbientRecord {
	var out []AmbientRecord
	for _, a := range cfg.Ambient() {
		out = append(out, AmbientRecord{Instrument: a.Name, Quantity: string(a.Kind), Unit: a.Unit.Symbol, Expanded: a.UncertaintyBase})
	}
	return out
}

// withModes adds the modes, the reference conditions and, when the
// reference reads another mode than the device, the barometer that
// converts it. In absolute mode the head correction has no air column:
// the air's own head cancels only between two gauge pressures, and a gas
// medium's density follows the reading as it stands.
func withModes(cfg *config.Config, d config.Device, dev *analysis.Device, ref *analysis.Reference) {
	dev.Mode = d.Mode
	if d.Mode == config.ModeAbsolute {
		ref.Head.AirDensity = 0
		if ref.Head.Gas != nil {
			ref.Head.Gas.Absolute = true
		}
	}
	c := d.Conditions
	if c.TemperatureC != nil || c.HumidityPct != nil || c.BarometricPa != nil {
		dev.Conditions = &analysis.Conditions{TemperatureC: c.TemperatureC, HumidityPct: c.HumidityPct, BarometricPa: c.BarometricPa}
	}
	for _, in := range cfg.Instruments {
		if in.Role != config.RoleReference {
			continue
		}
		ref.Mode = config.InstrumentMode(in)
		if baro, ok := cfg.Barometer(); ok && cfg.Converted(in) {
			ref.Barometer = &analysis.Barometer{Instrument: baro.Name, ExpandedPa: baro.UncertaintyBase, K: 2, From: ref.Mode, To: cfg.BenchMode()}
		}
	}
}
