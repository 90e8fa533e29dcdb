package readout

import (
	"math"
	"strings"
	"testing"

	"plateau/analysis/units"
)

func TestPressure(t *testing.T) {
	kPa, _ := units.Lookup("kPa")
	mbar, _ := units.Lookup("mbar")
	cases := []struct {
		name     string
		pa, res  float64
		u        units.Unit
		one, avg string
	}{
		{"two decimals of bar", 4.05e5, 1e3, units.Bar, "4.05", "4.050"},
		{"rounds to the resolution", 4.0549e5, 1e3, units.Bar, "4.05", "4.055"},
		{"negative reading", -0.1e5, 1e3, units.Bar, "-0.10", "-0.100"},
		{"no negative zero", -1, 1e3, units.Bar, "0.00", "0.000"},
		{"coarse resolution", 123456, 1e3, kPa, "123", "123.5"},
		{"resolution of 5 in the second decimal", 1.5e5, 5e3, units.Bar, "1.50", "1.500"},
		// 0.01 bar is 0.145 psi (SP 811 B.8 factor 6.894757 kPa/psi): the
		// first significant digit is the first decimal.
		{"bar resolution shown in psi", 4e5, 1e3, units.PSI, "58.0", "58.02"},
		{"fine resolution", 12.3456, 0.01, units.Pascal, "12.35", "12.346"},
		{"large value never scientific", 7e8, 1e5, mbar, "7000000", "7000000.0"},
		{"unknown resolution keeps six digits", 1234.5678, 0, units.Pascal, "1234.57", "1234.57"},
		{"unknown resolution of a tiny value", 1.23456e-7, 0, units.Pascal, "0.000000123", "0.000000123"},
		{"unknown resolution of zero", 0, 0, units.Bar, "0", "0"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := Pressure(c.pa, c.u, c.res); got != c.one {
				t.Errorf("Pressure = %q, want %q", got, c.one)
			}
			if got := Mean(c.pa, c.u, c.res); got != c.avg {
				t.Errorf("Mean = %q, want %q", got, c.avg)
			}
		})
	}
}

func TestSignedAndUnit(t *testing.T) {
	cases := []struct{ got, want string }{
		{Signed(2e3, units.Bar, 1e3), "+0.020"},
		{Signed(-2e3, units.Bar, 1e3), "-0.020"},
		{Signed(0, units.Bar, 1e3), "+0.000"},
		{WithUnit(16e5, units.Bar, 1e3), "16.00 bar"},
		{MeanWithUnit(16e5, units.Bar, 1e3), "16.000 bar"},
	}
	for _, c := range cases {
		if c.got != c.want {
			t.Errorf("got %q, want %q", c.got, c.want)
		}
	}
}

func TestNeverScientific(t *testing.T) {
	for _, u := range []units.Unit{units.Pascal, units.Bar, units.PSI} {
		for _, pa := range []float64{0, 1e-12, 3e-5, 1, 101325, 6.9e7, 1e12} {
			for _, res := range []float64{0, 1e-9, 1, 1e3, 1e6} {
				for _, s := range []string{Pressure(pa, u, res), Mean(pa, u, res), Signed(-pa, u, res)} {
					if strings.ContainsAny(s, "eE") {
						t.Fatalf("%g Pa in %s at resolution %g: %q", pa, u.Symbol, res, s)
					}
				}
			}
		}
	}
}

func TestNonFinite(t *testing.T) {
	if got := Pressure(math.NaN(), units.Bar, 1e3); got != "not a number" {
		t.Errorf("NaN: %q", got)
	}
	if got := Signed(math.Inf(1), units.Bar, 1e3); got != "+infinity" {
		t.Errorf("+Inf: %q", got)
	}
}

func TestPlain(t *testing.T) {
	cases := []struct {
		v, res float64
		want   string
	}{
		{1.0002, 0, "1.0002"},
		{12.5, 0.01, "12.50"},
		{1e-7, 0, "0.0000001"},
		{4e6, 0, "4000000"},
		// A float32 register as read, widened: the float's own digits.
		{float64(float32(0.00014)), 0, "0.00014"},
		{float64(float32(-0.15)), 0, "-0.15"},
		// A decimal reply parsed as a float64 keeps all its digits.
		{0.1234567891, 0, "0.1234567891"},
	}
	for _, c := range cases {
		if got := Plain(c.v, c.res); got != c.want {
			t.Errorf("Plain(%g, %g) = %q, want %q", c.v, c.res, got, c.want)
		}
	}
}

// An ambient reading in its own unit: the quantity from the unit, fixed
// digits (0.01 for a temperature, 0.1 %RH, 1 Pa of a barometer in its own
// unit), never scientific notation.
func TestAmbient(t *testing.T) {
	cases := []struct {
		v      float64
		symbol string
		kind   units.AmbientKind
		want   string
	}{
		{21.033262252807617, "°C", units.Temperature, "21.03 °C"},
		{294.18, "K", units.Temperature, "294.18 K"},
		{69.8, "°F", units.Temperature, "69.80 °F"},
		{45.06431198120117, "%RH", units.Humidity, "45.1 %RH"},
		{1013.3800048828125, "hPa", units.Barometric, "1013.38 hPa"},
		{1.0133800048828125, "bar", units.Barometric, "1.01338 bar"},
		{101.338, "kPa", units.Barometric, "101.338 kPa"},
		{14.6976, "psi", units.Barometric, "14.6976 psi"},
		{-0.004, "°C", units.Temperature, "0.00 °C"},
		{1e-7, "counts", "", "0.0000001 counts"},
	}
	for _, c := range cases {
		k, ok := Quantity(c.symbol)
		if k != c.kind || ok != (c.kind != "") {
			t.Errorf("Quantity(%q) = %q, %v; want %q", c.symbol, k, ok, c.kind)
		}
		if got := Ambient(c.v, c.symbol); got != c.want {
			t.Errorf("Ambient(%v, %q) = %q, want %q", c.v, c.symbol, got, c.want)
		}
	}
}
