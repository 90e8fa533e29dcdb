package readout

import "plateau/analysis/units"

// Decimals of an ambient reading in its own unit, a laboratory's
// thermometer, hygrometer and barometer (common practice): a temperature to
// 0.01 (°C, K or °F), a relative humidity to 0.1 %RH, a barometric pressure
// to 1 Pa in whatever unit it reads (0.01 hPa, 0.00001 bar, 0.0001 psi). The
// report writes the same digits in the base units.
const (
	temperatureDecimals = 2
	humidityDecimals    = 1
	barometricPa        = 1
)

// Quantity is what an ambient reading in unit symbol measures: a
// temperature (°C, K, °F), a relative humidity (%RH) or, in a pressure
// unit, the barometric pressure. False for a symbol of none of them.
func Quantity(symbol string) (units.AmbientKind, bool) {
	for _, k := range []units.AmbientKind{units.Temperature, units.Humidity, units.Barometric} {
		if _, err := units.LookupAmbient(k, symbol); err == nil {
			return k, true
		}
	}
	return "", false
}

// Ambient is an ambient instrument's reading as it gave it, v in its own
// unit symbol, with that unit: "21.03 °C", "45.1 %RH", "1013.38 hPa";
// always fixed notation. A unit of no ambient quantity keeps the value's
// own digits.
func Ambient(v float64, symbol string) string {
	k, ok := Quantity(symbol)
	if !ok {
		return Plain(v, 0) + " " + symbol
	}
	u, _ := units.LookupAmbient(k, symbol)
	d := temperatureDecimals
	switch k {
	case units.Humidity:
		d = humidityDecimals
	case units.Barometric:
		p, _ := units.Lookup(symbol)
		d = Decimals(barometricPa, p)
	}
	return format(v, d) + " " + u.Symbol
}
