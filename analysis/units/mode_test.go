package units

import (
	"math"
	"testing"
)

// The trade's spellings of a mode on a unit (common practice: psig/psia,
// bar(g)/bar(a), barg/bara, kPaA).
func TestModeSpellings(t *testing.T) {
	cases := []struct {
		name string
		unit Unit
		mode Mode
	}{
		{"psig", PSI, Gauge}, {"psia", PSI, Absolute}, {"PSIG", PSI, Gauge},
		{"bar(g)", Bar, Gauge}, {"bar(a)", Bar, Absolute}, {"barg", Bar, Gauge}, {"bara", Bar, Absolute},
		{"bar g", Bar, Gauge}, {"bar abs", Bar, Absolute}, {"kPaA", Kilopascal, Absolute}, {"kPa(abs)", Kilopascal, Absolute},
		{"mbar(a)", Millibar, Absolute}, {"hPa", Hectopascal, ModeUnset}, {"Pa", Pascal, ModeUnset},
		{"mmHg", MmHg, ModeUnset}, {"inHg", InHg, ModeUnset}, {"bar", Bar, ModeUnset}, {"MPa(g)", Megapascal, Gauge},
	}
	for _, c := range cases {
		u, m, err := LookupMode(c.name)
		if err != nil {
			t.Errorf("%q: %v", c.name, err)
			continue
		}
		if u != c.unit || m != c.mode {
			t.Errorf("%q: %s %q, want %s %q", c.name, u.Symbol, m, c.unit.Symbol, c.mode)
		}
		if f, ok := Find(c.name); !ok || f != u {
			t.Errorf("Find(%q) = %s %v, Lookup gave %s", c.name, f.Symbol, ok, u.Symbol)
		}
	}
	for _, bad := range []string{"g", "a", "(a)", "barx", "mPa(a)", "mPa", "Mbar"} {
		if _, err := Lookup(bad); err == nil {
			t.Errorf("%q was taken for a unit", bad)
		}
		if _, ok := Find(bad); ok {
			t.Errorf("Find took %q for a unit", bad)
		}
	}
	if q, err := ParseQuantity("16 bar(g)"); err != nil || q.Unit != Bar {
		t.Errorf("16 bar(g): %v %v", q, err)
	}
}

func TestParseMode(t *testing.T) {
	for in, want := range map[string]Mode{"": ModeUnset, "gauge": Gauge, "Absolute": Absolute, "abs": Absolute, "g": Gauge} {
		if m, err := ParseMode(in); err != nil || m != want {
			t.Errorf("%q: %q %v, want %q", in, m, err, want)
		}
	}
	if _, err := ParseMode("differential"); err == nil {
		t.Error("differential taken for a mode")
	}
}

// Temperature scales: T/K = t/°C + 273.15 and t/°C = (t/°F − 32)/1.8, both
// exact (NIST SP 811 (2008) §4.2.1.1 and B.8).
func TestAmbientUnits(t *testing.T) {
	cases := []struct {
		kind AmbientKind
		unit string
		v    float64
		base float64
	}{
		{Temperature, "°C", 20, 20}, {Temperature, "K", 293.15, 20}, {Temperature, "°F", 68, 20},
		{Temperature, "degF", 32, 0}, {Temperature, "kelvin", 0, -273.15}, {Humidity, "%RH", 45, 45},
		{Humidity, "%", 45, 45}, {Barometric, "hPa", 1013.25, 101325}, {Barometric, "inHg", 1, 3386.38864034100},
		{Barometric, "mbar(a)", 1000, 1e5},
	}
	for _, c := range cases {
		u, err := LookupAmbient(c.kind, c.unit)
		if err != nil {
			t.Errorf("%s %q: %v", c.kind, c.unit, err)
			continue
		}
		if got := u.ToBase(c.v); math.Abs(got-c.base) > 1e-9*math.Max(1, math.Abs(c.base)) {
			t.Errorf("%g %s = %.12g %s, want %g", c.v, c.unit, got, c.kind.BaseSymbol(), c.base)
		}
		if back := u.FromBase(u.ToBase(c.v)); math.Abs(back-c.v) > 1e-9*math.Max(1, math.Abs(c.v)) {
			t.Errorf("%g %s round trip gives %g", c.v, c.unit, back)
		}
	}
	for _, bad := range []struct {
		kind AmbientKind
		unit string
	}{{Temperature, "%RH"}, {Humidity, "°C"}, {Barometric, "°C"}, {Barometric, "psig"}, {"wind", "m/s"}} {
		if _, err := LookupAmbient(bad.kind, bad.unit); err == nil {
			t.Errorf("%s %q accepted", bad.kind, bad.unit)
		}
	}
}

func TestParseInterval(t *testing.T) {
	cases := []struct {
		kind        AmbientKind
		in          string
		lo, hi, nom float64
	}{
		{Temperature, "20 ± 2 °C", 18, 22, 20},
		{Temperature, "20 +- 2 °C", 18, 22, 20},
		{Temperature, "18 … 22 °C", 18, 22, 20},
		{Temperature, "64.4 .. 71.6 °F", 18, 22, 20},
		{Humidity, "30 to 70 %RH", 30, 70, 50},
		{Barometric, "950 … 1050 hPa", 95000, 105000, 100000},
	}
	for _, c := range cases {
		r, err := ParseInterval(c.kind, c.in)
		if err != nil {
			t.Errorf("%q: %v", c.in, err)
			continue
		}
		if math.Abs(r.Low-c.lo) > 1e-9 || math.Abs(r.High-c.hi) > 1e-9 || math.Abs(r.Nominal-c.nom) > 1e-9 {
			t.Errorf("%q: %g … %g (%g), want %g … %g (%g)", c.in, r.Low, r.High, r.Nominal, c.lo, c.hi, c.nom)
		}
		if !r.Holds(c.lo) || !r.Holds(c.hi) || r.Holds(c.hi+1e-6*math.Max(1, c.hi)) {
			t.Errorf("%q: ends held wrongly", c.in)
		}
	}
	for _, bad := range []string{"20 °C", "20 ± 2", "22 … 18 °C", "20 ± -1 °C", "x ± 2 °C", "20 ± 2 %RH", "1e400 ± 1 °C"} {
		if _, err := ParseInterval(Temperature, bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}

func FuzzParseInterval(f *testing.F) {
	for _, s := range []string{"20 ± 2 °C", "18 … 22 °C", "30 to 70 %RH", "1e308 ± 1e308 K"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		for _, k := range []AmbientKind{Temperature, Humidity, Barometric} {
			r, err := ParseInterval(k, s)
			if err != nil {
				continue
			}
			if math.IsNaN(r.Low) || math.IsInf(r.High, 0) || r.Low > r.High || !r.Holds(r.Nominal) {
				t.Fatalf("%q: %+v", s, r)
			}
		}
	})
}
