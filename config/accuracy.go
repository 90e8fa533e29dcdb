package config

import (
	"math"
	"strconv"

	"plateau/analysis/limits"
)

// tolerancePa is the device's permissible error at full scale, used only to
// derive sensible settle defaults; the analysis computes the real limits.
func (d *Device) tolerancePa() float64 {
	if d.Grade != "" { // the tighter of the grade's two limits
		return math.Min(d.permissiblePa(d.UpperPa), d.permissiblePa((d.LowerPa+d.UpperPa)/2))
	}
	return d.permissiblePa(d.UpperPa)
}

// permissiblePa is the device's permissible error at pressure pa: a class
// is % of span (EN 837-1 Table 11); an ASME B40.100 grade has its outer
// limit in the first and last quarter of the scale and its middle limit in
// between (REFERENCES.md §2.2); a limit adds its parts.
func (d *Device) permissiblePa(pa float64) float64 {
	span := d.UpperPa - d.LowerPa
	switch {
	case d.Class != "":
		f, _ := strconv.ParseFloat(d.Class, 64)
		return f / 100 * span
	case d.Grade != "":
		g, _ := limits.Grade(d.Grade)
		if at := (pa - d.LowerPa) / span; at >= 0.25 && at <= 0.75 {
			return g.Middle / 100 * span
		}
		return g.Outer / 100 * span
	}
	return d.Limit.SpanPct/100*span + d.Limit.ReadingPct/100*math.Abs(pa) + d.Limit.FloorPa
}

// smallestPermissiblePa is the tightest full-scale tolerance of all
// devices, for the settle defaults that every device must meet.
func (c *Config) smallestPermissiblePa() float64 {
	tol := math.Inf(1)
	for _, dut := range c.Devices {
		tol = math.Min(tol, dut.Device.tolerancePa())
	}
	if math.IsInf(tol, 1) {
		return 0
	}
	return tol
}

// minPoints is the fewest calibration points a device's accuracy asks for:
// EN 837-1 testing asks at least 10 points for classes 0.1 to 0.6 and at
// least 5 for classes 1 to 4 (REFERENCES.md §2.1, [C-sec]); IEC 61298-2 tests
// at least 5 points (REFERENCES.md §3, from memory), which we apply to ASME
// grades too. A custom limit states no count.
func (d *Device) minPoints() (int, string) {
	switch {
	case d.Class != "":
		if f, _ := strconv.ParseFloat(d.Class, 64); f <= 0.6 {
			return 10, "EN 837-1 class " + d.Class
		}
		return 5, "EN 837-1 class " + d.Class
	case d.Grade != "":
		return 5, "ASME B40.100 grade " + d.Grade
	}
	return 0, ""
}
