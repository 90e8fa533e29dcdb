package config

import (
	"fmt"
	"math"
	"net"
	"slices"
	"strconv"
	"strings"
	"time"

	"plateau/analysis/limits"
	"plateau/analysis/units"
)

// Baud rates that UARTs and USB adapters actually offer.
var baudRates = []int{300, 600, 1200, 1800, 2400, 4800, 9600, 14400, 19200, 28800, 38400, 57600, 76800, 115200, 230400, 460800, 921600}

// EN 837-1 Table 11 accuracy classes and ASME B40.100 grades accepted in device.class / device.grade.
var (
	classes = limits.EN837ClassNames()
	grades  = limits.ASMEGrades()
)

var (
	roles      = []string{RoleReference, RoleDevice, RoleSource, RoleAmbient}
	linkKinds  = []string{LinkModbusTCP, LinkModbusRTU, LinkModbusRTUTCP, LinkSerial, LinkSim, LinkManual, LinkBalance}
	tables     = []string{"holding", "input"}
	types      = []string{"int16", "uint16", "int32", "uint32", "float32", "float64"}
	orders32   = []string{"ABCD", "CDAB", "BADC", "DCBA"}
	orders64   = []string{"ABCDEFGH", "GHEFCDAB", "BADCFEHG", "HGFEDCBA"}
	parities   = []string{"none", "even", "odd"}
	simParts   = []string{"reference", "device", "source", "ambient"}
	simVias    = []string{LinkModbusTCP, LinkModbusRTU, LinkSerial}
	modes      = []string{"plan", "free"}
	onTimeouts = []string{"skip", "stop"}
	compares   = []string{"set-by-reference", "set-by-device"}
	decisions  = []string{"simple", "guarded", "four-state"}
	devKinds   = []string{"digital", "transmitter", "dial"}
	// Gases that are oil-free and do not burn, for oxygen-service gauges.
	oxygenSafeMedia = []string{"air", "dry air", "synthetic air", "nitrogen", "oxygen", "argon", "helium", "carbon dioxide"}
	levels          = []string{"debug", "info", "warn", "error"}
	formats         = []string{"auto", "text", "json"}
)

func oneOf(p *Problems, key, val string, allowed []string) bool {
	if slices.Contains(allowed, val) {
		return true
	}
	msg := "must be one of " + strings.Join(allowed, ", ")
	if s := closest(strings.ToLower(val), allowed); s != "" && val != "" {
		msg += fmt.Sprintf("; did you mean %q?", s)
	}
	p.bad(key, val, "%s", msg)
	return false
}

func (c *Config) validate(p *Problems) {
	if strings.TrimSpace(c.Store.Path) == "" {
		p.bad("store.path", "", "is required: the bbolt file that holds every sample")
	}
	c.validateListen(p)
	oneOf(p, "log.level", c.Log.Level, levels)
	oneOf(p, "log.format", c.Log.Format, formats)
	c.validateDevices(p)
	c.validateReference(p)
	c.validateInstruments(p)
	c.validateLoops(p)
	c.validateModes(p)
	c.validateAmbient(p)
	c.validateSafety(p)
	c.validateProcedure(p)
	c.validateHead(p)
	c.validateBalances(p)
	c.validateSimulator(p)
	c.validateLines(p)
}

func (c *Config) validateListen(p *Problems) {
	l := c.Listen
	if l.Socket == "" && l.TCP == "" {
		p.bad("listen", "", "give a unix socket path (listen.socket) or a TCP address (listen.tcp)")
	}
	if len(l.Socket) > maxSocketPath {
		p.bad("listen.socket", l.Socket, "is %d bytes long, but a unix socket path may be at most %d: choose a shorter path", len(l.Socket), maxSocketPath)
	}
	if l.TCP == "" {
		return
	}
	host, port, err := net.SplitHostPort(l.TCP)
	if err != nil {
		p.bad("listen.tcp", l.TCP, "must be host:port, e.g. 127.0.0.1:8417")
		return
	}
	if n, err := strconv.Atoi(port); err != nil || n < 0 || n > 65535 {
		p.bad("listen.tcp", l.TCP, "port must be a number from 0 to 65535")
	}
	if !isLoopback(host) {
		if !l.AllowRemote {
			p.bad("listen.tcp", l.TCP, "is not a loopback address: set listen.allow_remote: true (and listen.token_file) to accept calls from the network")
		}
		if l.TokenFile == "" {
			p.bad("listen.token_file", "", "is required when listening on a non-loopback address")
		}
	}
}

// maxSocketPath: sun_path holds 108 bytes on Linux, the last one the
// terminating zero (unix(7), from memory).
const maxSocketPath = 107

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

func (d *Device) validate(p *Problems, keyOf func(string) string) {
	oneOf(p, keyOf("kind"), d.Kind, devKinds)
	if d.okLower && d.okUpper && d.UpperPa <= d.LowerPa {
		p.bad(keyOf("upper"), d.Upper, "must be above %s (%s)", keyOf("lower"), d.Lower)
	}
	if d.Unit != "" {
		if _, err := units.Lookup(d.Unit); err != nil {
			p.bad(keyOf("unit"), d.Unit, "%v", err)
		}
	}
	if d.okResolution {
		if d.ResolutionPa <= 0 {
			p.bad(keyOf("resolution"), d.Resolution, "must be above zero: the smallest step the device shows or that can be read off its dial")
		}
		if d.okLower && d.okUpper && d.ResolutionPa >= d.UpperPa-d.LowerPa {
			p.bad(keyOf("resolution"), d.Resolution, "is not smaller than the span %s … %s: check the unit", d.Lower, d.Upper)
		}
	}
	n := 0
	if d.Class != "" {
		n++
		oneOf(p, keyOf("class"), d.Class, classes)
	}
	if d.Grade != "" {
		n++
		oneOf(p, keyOf("grade"), d.Grade, grades)
	}
	lim := d.Limit
	if lim.Span != "" || lim.Reading != "" || lim.Floor != "" {
		n++
		if lim.FloorPa < 0 {
			p.bad(keyOf("limit.floor"), lim.Floor, "parts of a permissible error cannot be negative")
		}
		if lim.SpanPct == 0 && lim.ReadingPct == 0 && lim.FloorPa == 0 && lim.Floor != "" {
			p.bad(keyOf("limit"), "", "a permissible error of zero can never be met")
		}
	}
	switch {
	case n == 0:
		p.bad(strings.TrimSuffix(keyOf("class"), ".class"), "", "give the accuracy: device.class (EN 837-1: %s), device.grade (ASME B40.100: %s) or device.limit (span/reading/floor)",
			strings.Join(classes, ", "), strings.Join(grades, ", "))
	case n > 1:
		p.bad(strings.TrimSuffix(keyOf("class"), ".class"), "", "give only one of device.class, device.grade and device.limit")
	}
	if !(d.TemperatureCoefficient >= 0 && d.TemperatureCoefficient <= 1) {
		p.bad(keyOf("temperature_coefficient"), fmtNum(d.TemperatureCoefficient), "must be the temperature effect in %% of span per kelvin, from 0 to 1 (EN 837-1 gauges about 0.04)")
	}
	if !(d.ReferenceTemperature >= -50 && d.ReferenceTemperature <= 100) {
		p.bad(keyOf("reference_temperature"), fmtNum(d.ReferenceTemperature), "must be the device's reference temperature in °C, -50 … 100 (usually 20)")
	}
	if !(d.HysteresisLimit >= 0 && d.HysteresisLimit <= 100) {
		p.bad(keyOf("hysteresis_limit"), fmtNum(d.HysteresisLimit), "must be a hysteresis limit in %% of span, 0 … 100 (0: none, or the MPE for EN 837-1 classes)")
	}
	if d.Oxygen && !slices.Contains(oxygenSafeMedia, strings.ToLower(strings.TrimSpace(d.Medium))) {
		p.bad(keyOf("medium"), d.Medium, "an oxygen-service gauge is calibrated only with clean, oil-free, non-flammable gas (one of %s), never with oil or on an oil-filled comparator",
			strings.Join(oxygenSafeMedia, ", "))
	}
}

func (c *Config) validateReference(p *Problems) {
	r := &c.Reference
	if r.Uncertainty == "" {
		p.bad("reference.uncertainty", "", "is required: the expanded uncertainty from the reference's certificate, as %% of reading, e.g. \"0.01 %%\"")
	}
	if r.FloorPa < 0 {
		p.bad("reference.floor", r.Floor, "cannot be negative")
	}
	if !(r.Stability >= 0 && r.Stability <= 10) {
		p.bad("reference.stability", fmtNum(r.Stability), "must be the drift since calibration as %% of reading, 0 … 10")
	}
	if r.StabilityFloorPa < 0 || r.ResolutionPa < 0 {
		p.bad("reference.resolution", r.Resolution, "reference.stability_floor and reference.resolution cannot be negative")
	}
	if r.Coverage <= 0 || r.Coverage > 4 {
		p.bad("reference.coverage", fmt.Sprint(r.Coverage), "the coverage factor k of the certificate must be above 0 and at most 4 (usually 2)")
	}
	if r.okLower && r.okUpper && r.UpperPa <= r.LowerPa {
		p.bad("reference.upper", r.Upper, "must be above reference.lower (%s)", r.Lower)
	}
	shift := c.referenceShiftPa() // a device range in the reference's mode, at 1 atm
	for _, dut := range c.Devices {
		d := dut.Device
		who := "the device range"
		if len(c.Devices) > 1 {
			who = "the range of " + dut.name()
		}
		if r.okUpper && d.okUpper && r.UpperPa < d.UpperPa+shift {
			p.bad("reference.upper", r.Upper, "the reference cannot cover %s up to %s", who, d.Upper)
		}
		if r.okLower && d.okLower && r.LowerPa > d.LowerPa+shift {
			p.bad("reference.lower", r.Lower, "the reference cannot cover %s down to %s", who, d.Lower)
		}
		if d.Oxygen && r.OilFilled {
			what := "an oxygen-service device"
			if len(c.Devices) > 1 {
				what = dut.name() + " is for oxygen service: it"
			}
			p.bad("reference.oil_filled", "true", "%s must not be connected to an oil-filled reference or comparator", what)
		}
	}
	if !r.ExpiresAt.IsZero() && expiredOn(r.ExpiresAt, time.Now()) {
		p.warn("reference.expires", r.Expires, "the reference's calibration has expired: a run with it is refused until it is recalibrated and the date updated")
	}
}

// expiredOn says whether a calibration valid through the date expires has
// run out by now, judged by the calendar date where the bench is.
func expiredOn(expires, now time.Time) bool {
	return now.Format("2006-01-02") > expires.Format("2006-01-02")
}

// ReferenceExpired returns an error when the reference's calibration has
// expired at now: a run must not start with it (check only warns).
func (c *Config) ReferenceExpired(now time.Time) error {
	r := c.Reference
	if r.ExpiresAt.IsZero() || !expiredOn(r.ExpiresAt, now) {
		return nil
	}
	id := r.ID
	if id == "" {
		id = "the reference"
	}
	return fmt.Errorf("%s: %s: calibration expired on %s (reference.expires): recalibrate it, or correct the date if it is wrong",
		c.File, id, r.ExpiresAt.Format("2006-01-02"))
}

func (c *Config) validateInstruments(p *Problems) {
	seen := map[string]int{}
	count := map[string]int{}
	for i := range c.Instruments {
		in := &c.Instruments[i]
		key := fmt.Sprintf("instruments[%d]", i)
		if strings.TrimSpace(in.Name) == "" {
			p.bad(key+".name", "", "every instrument needs a name")
		} else if j, dup := seen[in.Name]; dup {
			p.bad(key+".name", in.Name, "duplicate instrument name (also instruments[%d])", j)
		} else {
			seen[in.Name] = i
		}
		if oneOf(p, key+".role", in.Role, roles) {
			count[in.Role]++
		}
		if in.Device != nil && in.Role != RoleDevice {
			p.bad(key+".device", "", "only an instrument with role: device describes a device under test")
		}
		c.validateLink(p, key, in)
		if in.Link.Kind != LinkManual {
			inRange(p, key+".poll", in.Poll, minPoll, time.Hour)
		}
	}
	c.validateSharedLinks(p)
	if count[RoleReference] == 0 {
		p.bad("instruments", "", "no instrument has role: reference; plateau needs a reference standard to compare against")
	}
	if count[RoleReference] > 1 {
		p.bad("instruments", "", "only one instrument may be the reference")
	}
	if count[RoleDevice] == 0 {
		p.bad("instruments", "", "no instrument has role: device (the device under test)")
	}
	if count[RoleSource] > 1 {
		p.bad("instruments", "", "only one instrument may be the pressure source")
	}
}

// Limits of the link and poll timings: below minPoll no instrument answers
// in time; the upper bounds catch a wrong unit (100000h for 100ms).
const (
	minPoll    = 10 * time.Millisecond
	minTimeout = 10 * time.Millisecond
)

// inRange refuses a duration outside [lo, hi].
func inRange(p *Problems, key string, d, lo, hi time.Duration) bool {
	if d < lo || d > hi {
		p.bad(key, d.String(), "must be from %s to %s", fmtDuration(lo), fmtDuration(hi))
		return false
	}
	return true
}

// fmtDuration writes 1h rather than 1h0m0s.
func fmtDuration(d time.Duration) string {
	s := d.String()
	for _, z := range []string{"m0s", "h0m"} {
		s = strings.Replace(s, z, z[:1], 1)
	}
	return s
}

// wholeInRange refuses a count or number outside [lo, hi].
func wholeInRange(p *Problems, key string, n, lo, hi int, what string) bool {
	if n < lo || n > hi {
		p.bad(key, strconv.Itoa(n), "%s is from %d to %d", what, lo, hi)
		return false
	}
	return true
}

func (c *Config) validateSafety(p *Problems) {
	s := &c.Safety
	if s.Silence < 0 || s.Silence > time.Hour {
		p.bad("safety.silence", s.Silence.String(), "must be between 0 (five reference polls) and 1h")
	}
	if !s.Set || s.MaxPressure == "" {
		return // no range to judge it by (reported), or the default under the ceiling
	}
	low := c.Devices[0]
	for _, dut := range c.Devices[1:] {
		if dut.Device.UpperPa < low.Device.UpperPa {
			low = dut
		}
	}
	d := low.Device
	if s.MaxPressurePa < d.UpperPa {
		who := "the device's"
		if len(c.Devices) > 1 {
			who = "the smallest full scale, that of " + low.name() + ","
		}
		p.bad("safety.max_pressure", s.MaxPressure, "is below %s full scale (%s): the top point could never be reached", who, d.Upper)
	}
	if ceiling := c.safetyCeiling(maxOverRange); s.MaxPressurePa > ceiling*(1+1e-12) {
		what := "the lower of the device's and the reference's full scale"
		if len(c.Devices) > 1 {
			what = "the lowest full scale of the devices and the reference"
		}
		p.bad("safety.max_pressure", s.MaxPressure, "is above %s plus %g %% of span (%s): never exceed a gauge's range",
			what, maxOverRange*100, formatPa(ceiling, d.Unit))
	}
}

// formatPa writes a pressure in the named unit for a message.
func formatPa(pa float64, unit string) string {
	u, err := units.Lookup(unit)
	if err != nil {
		u = units.Pascal
	}
	return strconv.FormatFloat(u.FromPa(pa), 'g', 6, 64) + " " + u.Symbol
}

// maxPoints bounds a plan: the longest published sequences have about a
// dozen points (REFERENCES.md §1), so more than this is a mistake.
const maxPoints = 100

func (c *Config) validateProcedure(p *Problems) {
	pr := &c.Procedure
	if pr.EntryLimit < 1 || pr.EntryLimit > 100 {
		p.bad("procedure.entry_limit", fmt.Sprint(pr.EntryLimit), "must be from 1 to 100 (times the permissible error)")
	}
	oneOf(p, "procedure.mode", pr.Mode, modes)
	oneOf(p, "procedure.on_timeout", pr.OnTimeout, onTimeouts)
	oneOf(p, "procedure.compare", pr.Compare, compares)
	// No rule is assumed: ILAC-G8:09/2019 asks that the decision rule be
	// agreed before measuring. Without one the file is usable (check,
	// probe, analyze with a rule given) but no run starts.
	if pr.Decision == "" {
		p.warn("procedure.decision", "", "no decision rule is set, so no run will start: choose simple, guarded or four-state with the customer before measuring (ILAC-G8:09/2019)")
	} else {
		oneOf(p, "procedure.decision", pr.Decision, decisions)
	}
	oneOf(p, "procedure.coverage", pr.Coverage, []string{"conventional", "student-t"})
	for _, dut := range c.Devices {
		if pr.Mode == "free" && dut.Device.Kind == "dial" {
			p.bad("procedure.mode", pr.Mode, "free runs capture the plateaus both instruments hold; a dial read by a person has no readings between entries: use mode plan")
			break
		}
	}
	wholeInRange(p, "procedure.cycles", pr.Cycles, 1, 1000, "the number of cycles")
	wholeInRange(p, "procedure.exercise", pr.Exercise, 0, 10, "the number of exercise cycles")
	inRange(p, "procedure.exercise_hold", pr.ExerciseHold, 0, 24*time.Hour)
	inRange(p, "procedure.top_hold", pr.TopHold, 0, 24*time.Hour)
	inRange(p, "procedure.hold", pr.Hold, 0, 24*time.Hour)
	inRange(p, "procedure.timeout", pr.Timeout, time.Second, 24*time.Hour)
	st := &pr.Settle
	inRange(p, "procedure.settle.window", st.Window, 100*time.Millisecond, time.Hour)
	if pr.Timeout > 0 && st.Window > 0 && pr.Timeout < st.Window {
		p.bad("procedure.timeout", pr.Timeout.String(), "is shorter than the settle window (%s): no point could ever be captured", st.Window)
	}
	if wholeInRange(p, "procedure.settle.min_count", st.MinCount, 3, 100000, "the least number of readings in a window (a line is fitted through them and the scatter judged about it)") && st.Window > 0 {
		for i, in := range c.Instruments {
			if (in.Role != RoleReference && in.Role != RoleDevice) || in.Link.Kind == LinkManual || in.Poll <= 0 {
				continue
			}
			if most := int(st.Window/in.Poll) + 1; st.MinCount > most {
				p.bad("procedure.settle.min_count", strconv.Itoa(st.MinCount), "instruments[%d] (%s) gives at most %d readings in a %s window at poll %s: no point could ever settle",
					i, in.Name, most, st.Window, in.Poll)
			}
		}
	}
	if !c.rangesKnown() {
		return // a device range is wrong and reported; points and bands cannot be judged
	}
	d := c.Device
	span := d.UpperPa - d.LowerPa
	if st.MaxDrift != "" && st.MaxDriftPaPerS <= 0 {
		p.bad("procedure.settle.max_drift", st.MaxDrift, "must be above zero: no reading is ever perfectly still")
	}
	if st.MaxSpread != "" && st.MaxSpreadPa <= 0 {
		p.bad("procedure.settle.max_spread", st.MaxSpread, "must be above zero: no reading is ever free of noise")
	}
	if st.Band != "" && st.BandPa <= 0 {
		p.bad("procedure.settle.band", st.Band, "must be above zero: the mean is never exactly on the target")
	} else if st.BandPa > span/2 {
		p.bad("procedure.settle.band", st.Band, "is wider than half the span: any pressure would count as on target")
	}
	if len(pr.Points) > maxPoints {
		p.bad("procedure.points", fmt.Sprintf("%d points", len(pr.Points)), "a plan has at most %d points", maxPoints)
		return
	}
	if pr.Mode == "plan" && len(pr.Points) == 0 {
		p.bad("procedure.points", "", "a plan needs at least one point")
	}
	last := math.Inf(-1)
	for j, pa := range pr.PointsPa {
		i := pr.pointIndex[j]
		key, s := fmt.Sprintf("procedure.points[%d]", i), pr.Points[i]
		ok := true
		for _, dut := range c.Devices {
			dd := dut.Device
			if span := dd.UpperPa - dd.LowerPa; pa < dd.LowerPa-1e-9*span || pa > dd.UpperPa+1e-9*span {
				if len(c.Devices) == 1 {
					p.bad(key, s, "is outside the device range %s … %s", dd.Lower, dd.Upper)
				} else {
					p.bad(key, s, "is outside the range of %s, %s … %s", dut.name(), dd.Lower, dd.Upper)
				}
				ok = false
			}
		}
		if ok && c.Safety.Set && pa > c.Safety.MaxPressurePa {
			p.bad(key, s, "is above safety.max_pressure")
			ok = false
		}
		if ok && pa <= last {
			p.bad(key, s, "points must rise strictly; the descending series runs them in reverse")
			ok = false
		}
		if ok {
			last = pa
		}
	}
	for _, dut := range c.Devices {
		c.validateAgainstAccuracy(p, dut)
	}
}

// validateAgainstAccuracy: a device whose resolution is coarser than its
// permissible error cannot show whether it is within it; and a plan with
// fewer points than its class asks for does not test it to that class.
func (c *Config) validateAgainstAccuracy(p *Problems, dut DeviceUnderTest) {
	d := dut.Device
	if d.Class == "" && d.Grade == "" && d.Limit.SpanPct == 0 && d.Limit.ReadingPct == 0 && d.Limit.FloorPa == 0 {
		return // no accuracy (reported)
	}
	who := ""
	if len(c.Devices) > 1 {
		who = " of " + dut.name()
	}
	at := append([]float64{d.LowerPa, d.UpperPa}, c.Procedure.PointsPa...)
	tightest, where := math.Inf(1), 0.0
	for _, pa := range at {
		if e := d.permissiblePa(pa); e < tightest {
			tightest, where = e, pa
		}
	}
	if d.okResolution && d.ResolutionPa > tightest*(1+1e-9) {
		p.bad(dut.keyOf("resolution"), d.Resolution, "is coarser than the permissible error%s (%s at %s): the device cannot show whether it is within it",
			who, formatPa(tightest, d.Unit), formatPa(where, d.Unit))
	}
	if c.Procedure.Mode != "plan" {
		return
	}
	if need, why := d.minPoints(); need > 0 && len(c.Procedure.PointsPa) < need && len(c.Procedure.PointsPa) == len(c.Procedure.Points) {
		p.warn("procedure.points", fmt.Sprintf("%d points", len(c.Procedure.PointsPa)), "%s asks for at least %d calibration points%s", why, need, who)
	}
}

func (c *Config) validateHead(p *Problems) {
	h := c.Head
	if h.FluidDensity < 0 || h.FluidDensity > 20000 {
		p.bad("head.fluid_density", fmt.Sprint(h.FluidDensity), "must be a density in kg/m³ (water ≈ 998, mineral oil ≈ 860, air ≈ 1.2)")
	}
	if h.AmbientDensity < 0 || h.AmbientDensity > 10 {
		p.bad("head.ambient_density", fmt.Sprint(h.AmbientDensity), "must be the air density in kg/m³ (about 1.2)")
	}
	if h.Gravity < 9.7 || h.Gravity > 9.9 {
		p.bad("head.gravity", fmt.Sprint(h.Gravity), "local gravity on Earth is between 9.78 and 9.84 m/s² (9.80665 if unknown)")
	}
	if math.Abs(h.ReferenceHeight) > 100 {
		p.bad("head.reference_height", fmt.Sprint(h.ReferenceHeight), "more than 100 m: heights are in metres")
	}
	for _, dut := range c.Devices {
		key := "head.device_height"
		if dut.given["height"] {
			key = dut.Key + ".height"
		}
		if math.Abs(h.ReferenceHeight-dut.HeightM) > 10 {
			p.bad(key, fmt.Sprint(dut.HeightM), "more than 10 m from the reference's height: heights are in metres")
		}
		if dut.Device.Oxygen && h.FluidDensity > 50 {
			p.bad("head.fluid_density", fmt.Sprint(h.FluidDensity), "is the density of a liquid, but the device is for oxygen service: it must see only clean, oil-free gas")
		}
	}
	if h.HeightUncertainty < 0 || h.DensityUncertainty < 0 {
		p.bad("head", "", "uncertainties cannot be negative")
	}
	if h.HeightUncertainty > 10 || h.DensityUncertainty > 20000 {
		p.bad("head", "", "uncertainties are half-widths in m and kg/m³: at most 10 m and 20000 kg/m³")
	}
	if !(h.GasMolarMass >= 0 && h.GasMolarMass <= 0.5) {
		p.bad("head.gas_molar_mass", fmtNum(h.GasMolarMass), "must be the molar mass of the gas in kg/mol (nitrogen 0.0280134, air 0.0289652), or 0 for a liquid")
	}
	if !(h.GasTemperature >= -50 && h.GasTemperature <= 200) {
		p.bad("head.gas_temperature", fmtNum(h.GasTemperature), "must be the gas temperature in °C, -50 … 200")
	}
}

func (c *Config) validateSimulator(p *Problems) {
	s := &c.Simulator
	for i, in := range c.Instruments {
		if in.Role == RoleDevice && in.Link.Kind == LinkSim && s.Device.Kind != c.Device.Kind && len(s.Devices) == 0 {
			p.bad("simulator.device.kind", s.Device.Kind, "instruments[%d] is the simulated device, but device.kind is %q: make them the same", i, c.Device.Kind)
		}
	}
	if s.Speed <= 0 || s.Speed > 10000 {
		p.bad("simulator.speed", fmt.Sprint(s.Speed), "must be above 0 and at most 10000 (times real time)")
	}
	oneOf(p, "simulator.device.kind", s.Device.Kind, devKinds)
	inRange(p, "simulator.source.time_constant", s.Source.TimeConstant, 0, time.Hour)
	if s.Source.Overshoot < 0 || s.Source.Overshoot > 1 {
		p.bad("simulator.source.overshoot", fmt.Sprint(s.Source.Overshoot), "is a fraction of the step, from 0 to 1")
	}
	inRange(p, "simulator.device.operator_delay", s.Device.OperatorDelay, 0, time.Hour)
	f := s.Faults
	for key, r := range map[string]float64{"drop": f.Drop, "slow": f.Slow, "bad_crc": f.BadCRC, "garbage": f.Garbage, "stuck": f.Stuck, "spike": f.Spike} {
		if r < 0 || r > 1 {
			p.bad("simulator.faults."+key, fmt.Sprint(r), "is a probability per request, from 0 to 1")
		}
	}
	for key, d := range map[string]time.Duration{"slow_by": f.SlowBy, "stuck_for": f.StuckFor, "link_down": f.LinkDown, "link_every": f.LinkEvery} {
		inRange(p, "simulator.faults."+key, d, 0, 24*time.Hour)
	}
	c.validateSimulatedDevices(p)
}

func joinInts(xs []int) string {
	s := make([]string, len(xs))
	for i, x := range xs {
		s[i] = strconv.Itoa(x)
	}
	return strings.Join(s, ", ")
}
