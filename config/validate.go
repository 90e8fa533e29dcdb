package config

import (
	"fmt"
	"math"
	"net"
	"regexp"
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
	linkKinds  = []string{LinkModbusTCP, LinkModbusRTU, LinkModbusRTUTCP, LinkSerial, LinkSim, LinkManual}
	tables     = []string{"holding", "input"}
	types      = []string{"int16", "uint16", "int32", "uint32", "float32", "float64"}
	orders32   = []string{"ABCD", "CDAB", "BADC", "DCBA"}
	orders64   = []string{"ABCDEFGH", "GHEFCDAB", "BADCFEHG", "HGFEDCBA"}
	parities   = []string{"none", "even", "odd"}
	simParts   = []string{"reference", "device", "source"}
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

// pressure parses a quantity that must be a pressure; "" is reported as missing when required.
func pressure(p *Problems, key, val string, required bool) (float64, bool) {
	if strings.TrimSpace(val) == "" {
		if required {
			p.bad(key, "", "is required: give a pressure with its unit, e.g. \"16 bar\"")
		}
		return 0, false
	}
	q, err := units.ParseQuantity(val)
	if err != nil {
		p.bad(key, val, "%v", err)
		return 0, false
	}
	if q.Percent {
		p.bad(key, val, "must be a pressure with a unit, not a percentage")
		return 0, false
	}
	pa, _ := q.Pa()
	return pa, true
}

// percent parses a quantity that must be a percentage.
func percent(p *Problems, key, val string) (float64, bool) {
	if strings.TrimSpace(val) == "" {
		return 0, false
	}
	q, err := units.ParseQuantity(val)
	if err != nil {
		p.bad(key, val, "%v", err)
		return 0, false
	}
	if !q.Percent {
		p.bad(key, val, "must be a percentage such as \"0.25 %%\"")
		return 0, false
	}
	return q.Value, true
}

func (c *Config) validate(p *Problems) {
	if strings.TrimSpace(c.Store.Path) == "" {
		p.bad("store.path", "", "is required: the bbolt file that holds every sample")
	}
	c.validateListen(p)
	oneOf(p, "log.level", c.Log.Level, levels)
	oneOf(p, "log.format", c.Log.Format, formats)
	c.validateDevice(p)
	c.validateReference(p)
	c.validateInstruments(p)
	c.validateSafety(p)
	c.validateProcedure(p)
	c.validateHead(p)
	c.validateSimulator(p)
}

func (c *Config) validateListen(p *Problems) {
	l := c.Listen
	if l.Socket == "" && l.TCP == "" {
		p.bad("listen", "", "give a unix socket path (listen.socket) or a TCP address (listen.tcp)")
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

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

func (c *Config) validateDevice(p *Problems) {
	d := &c.Device
	oneOf(p, "device.kind", d.Kind, devKinds)
	lo, okLo := pressure(p, "device.lower", d.Lower, true)
	hi, okHi := pressure(p, "device.upper", d.Upper, true)
	if okLo && okHi && hi <= lo {
		p.bad("device.upper", d.Upper, "must be above device.lower (%s)", d.Lower)
	}
	d.LowerPa, d.UpperPa = lo, hi
	if d.Unit == "" {
		if q, err := units.ParseQuantity(d.Upper); err == nil && !q.Percent {
			d.Unit = q.Unit.Symbol
		}
	} else if _, err := units.Lookup(d.Unit); err != nil {
		p.bad("device.unit", d.Unit, "%v", err)
	}
	if r, ok := pressure(p, "device.resolution", d.Resolution, true); ok {
		if r <= 0 {
			p.bad("device.resolution", d.Resolution, "must be above zero: the smallest step the device shows or that can be read off its dial")
		}
		if okLo && okHi && r >= hi-lo {
			p.bad("device.resolution", d.Resolution, "is not smaller than the span %s … %s: check the unit", d.Lower, d.Upper)
		}
		d.ResolutionPa = r
	}
	n := 0
	if d.Class != "" {
		n++
		oneOf(p, "device.class", d.Class, classes)
	}
	if d.Grade != "" {
		n++
		oneOf(p, "device.grade", strings.ToUpper(d.Grade), grades)
		d.Grade = strings.ToUpper(d.Grade)
	}
	lim := &d.Limit
	if lim.Span != "" || lim.Reading != "" || lim.Floor != "" {
		n++
		lim.SpanPct, _ = percent(p, "device.limit.span", lim.Span)
		lim.ReadingPct, _ = percent(p, "device.limit.reading", lim.Reading)
		lim.FloorPa, _ = pressure(p, "device.limit.floor", lim.Floor, false)
		if lim.SpanPct < 0 || lim.ReadingPct < 0 || lim.FloorPa < 0 {
			p.bad("device.limit", "", "parts of a permissible error cannot be negative")
		}
	}
	switch {
	case n == 0:
		p.bad("device", "", "give the accuracy: device.class (EN 837-1: %s), device.grade (ASME B40.100: %s) or device.limit (span/reading/floor)",
			strings.Join(classes, ", "), strings.Join(grades, ", "))
	case n > 1:
		p.bad("device", "", "give only one of device.class, device.grade and device.limit")
	}
	if d.Oxygen && !slices.Contains(oxygenSafeMedia, strings.ToLower(strings.TrimSpace(d.Medium))) {
		p.bad("device.medium", d.Medium, "an oxygen-service gauge is calibrated only with clean, oil-free, non-flammable gas (one of %s), never with oil or on an oil-filled comparator",
			strings.Join(oxygenSafeMedia, ", "))
	}
}

// tolerancePa is the device's permissible error at full scale, used only to
// derive sensible settle defaults; the analysis computes the real limits.
func (d *Device) tolerancePa() float64 {
	span := d.UpperPa - d.LowerPa
	switch {
	case d.Class != "":
		f, _ := strconv.ParseFloat(d.Class, 64)
		return f / 100 * span
	case d.Grade != "":
		g, _ := limits.Grade(d.Grade)
		return g.Tightest() / 100 * span
	}
	return d.Limit.SpanPct/100*span + d.Limit.ReadingPct/100*math.Abs(d.UpperPa) + d.Limit.FloorPa
}

func (c *Config) validateReference(p *Problems) {
	r := &c.Reference
	if pct, ok := percent(p, "reference.uncertainty", r.Uncertainty); ok {
		r.UncertaintyPct = pct
		if pct < 0 {
			p.bad("reference.uncertainty", r.Uncertainty, "cannot be negative")
		}
	} else if r.Uncertainty == "" {
		p.bad("reference.uncertainty", "", "is required: the expanded uncertainty from the reference's certificate, as %% of reading, e.g. \"0.01 %%\"")
	}
	if f, ok := pressure(p, "reference.floor", r.Floor, false); ok {
		if f < 0 {
			p.bad("reference.floor", r.Floor, "cannot be negative")
		}
		r.FloorPa = f
	}
	if r.Coverage <= 0 || r.Coverage > 4 {
		p.bad("reference.coverage", fmt.Sprint(r.Coverage), "the coverage factor k of the certificate must be above 0 and at most 4 (usually 2)")
	}
	if r.Expires != "" {
		t, err := time.Parse("2006-01-02", r.Expires)
		if err != nil {
			p.bad("reference.expires", r.Expires, "must be a date YYYY-MM-DD")
		}
		r.ExpiresAt = t
	}
	lo, okLo := pressure(p, "reference.lower", r.Lower, false)
	hi, okHi := pressure(p, "reference.upper", r.Upper, false)
	r.LowerPa, r.UpperPa = lo, hi
	if okHi && c.Device.UpperPa > 0 && hi < c.Device.UpperPa {
		p.bad("reference.upper", r.Upper, "the reference cannot cover the device range up to %s", c.Device.Upper)
	}
	if okLo && lo > c.Device.LowerPa {
		p.bad("reference.lower", r.Lower, "the reference cannot cover the device range down to %s", c.Device.Lower)
	}
	if c.Device.Oxygen && r.OilFilled {
		p.bad("reference.oil_filled", "true", "an oxygen-service device must not be connected to an oil-filled reference or comparator")
	}
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
		c.validateLink(p, key, in)
		if in.Poll < 0 {
			p.bad(key+".poll", in.Poll.String(), "must be positive")
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
	if count[RoleDevice] > 1 {
		p.bad("instruments", "", "only one instrument may be the device under test")
	}
	if count[RoleSource] > 1 {
		p.bad("instruments", "", "only one instrument may be the pressure source")
	}
}

// validateSharedLinks: instruments on one port or gateway share one
// connection, so they must agree on how it is driven.
func (c *Config) validateSharedLinks(p *Problems) {
	first := map[string]int{}
	for i, in := range c.Instruments {
		l := in.Link
		if l.Address == "" || l.Kind == LinkSim || l.Kind == LinkManual {
			continue
		}
		j, seen := first[l.Address]
		if !seen {
			first[l.Address] = i
			continue
		}
		o := c.Instruments[j].Link
		o.UnitID, l.UnitID = 0, 0 // the one thing that may differ on a shared bus
		if o != l {
			p.bad(fmt.Sprintf("instruments[%d].link", i), l.Address,
				"shares its port with instruments[%d] but not its settings: kind, baud, parity, data and stop bits, timeout, retries, backoff and pause must be the same", j)
		}
	}
}

func (c *Config) validateLink(p *Problems, key string, in *Instrument) {
	l := in.Link
	if !oneOf(p, key+".link.kind", l.Kind, linkKinds) {
		return
	}
	switch l.Kind {
	case LinkSim:
		if oneOf(p, key+".sim_part", in.SimPart, simParts) && in.SimPart != in.Role && !(in.SimPart == "device" && in.Role == RoleDevice) {
			p.bad(key+".sim_part", in.SimPart, "does not match the instrument's role %q", in.Role)
		}
		if in.SimVia == "" {
			in.SimVia = LinkModbusTCP
		}
		oneOf(p, key+".sim_via", in.SimVia, simVias)
		return
	case LinkManual:
		if in.Role != RoleDevice {
			p.bad(key+".link.kind", l.Kind, "operator entry is for reading a device under test (an analog dial), not a %s", in.Role)
		}
		if _, err := units.Lookup(in.Unit); in.Unit != "" && err != nil {
			p.bad(key+".unit", in.Unit, "%v", err)
		}
		return
	}
	if strings.TrimSpace(l.Address) == "" {
		switch l.Kind {
		case LinkModbusTCP, LinkModbusRTUTCP:
			p.bad(key+".link.address", "", "is required: host:port of the instrument or gateway, e.g. 192.168.1.20:502")
		default:
			p.bad(key+".link.address", "", "is required: the serial device, e.g. /dev/serial/by-id/usb-…")
		}
	} else if l.Kind == LinkModbusTCP || l.Kind == LinkModbusRTUTCP {
		if _, _, err := net.SplitHostPort(l.Address); err != nil {
			p.bad(key+".link.address", l.Address, "must be host:port, e.g. 192.168.1.20:502")
		}
	}
	if l.Kind == LinkModbusRTU || l.Kind == LinkSerial {
		if !slices.Contains(baudRates, l.Baud) {
			p.bad(key+".link.baud", strconv.Itoa(l.Baud), "is not a baud rate a UART uses (allowed: %s)", joinInts(baudRates))
		}
		if l.DataBits < 5 || l.DataBits > 8 {
			p.bad(key+".link.data_bits", strconv.Itoa(l.DataBits), "must be 5, 6, 7 or 8")
		}
		oneOf(p, key+".link.parity", l.Parity, parities)
		if l.StopBits != 1 && l.StopBits != 2 {
			p.bad(key+".link.stop_bits", strconv.Itoa(l.StopBits), "must be 1 or 2")
		}
	}
	if l.Timeout <= 0 {
		p.bad(key+".link.timeout", l.Timeout.String(), "must be positive")
	}
	if l.Retries < 0 || l.Retries > 10 {
		p.bad(key+".link.retries", strconv.Itoa(l.Retries), "must be from 0 to 10")
	}
	if l.Pause < 0 || l.Backoff < 0 {
		p.bad(key+".link", "", "pause and backoff cannot be negative")
	}
	if in.Unit == "" {
		p.bad(key+".unit", "", "is required: the unit of the value the instrument gives (after scale and offset), e.g. bar, kPa or mA")
	} else if in.Unit != "mA" {
		if _, err := units.Lookup(in.Unit); err != nil {
			p.bad(key+".unit", in.Unit, "%v", err)
		}
	}
	if in.Loop.Enabled {
		if in.Unit != "mA" {
			p.bad(key+".unit", in.Unit, "must be mA when current_loop is enabled")
		}
		lo, ok1 := pressure(p, key+".current_loop.lower", in.Loop.Lower, true)
		hi, ok2 := pressure(p, key+".current_loop.upper", in.Loop.Upper, true)
		if ok1 && ok2 && hi <= lo {
			p.bad(key+".current_loop.upper", in.Loop.Upper, "must be above current_loop.lower")
		}
	} else if in.Unit == "mA" {
		p.bad(key+".current_loop.enabled", "false", "a value in mA needs current_loop (lower and upper range values) to become a pressure")
	}
	if l.Kind == LinkSerial {
		if in.Line.Reply != "" {
			if _, err := regexp.Compile(in.Line.Reply); err != nil {
				p.bad(key+".line.reply", in.Line.Reply, "is not a valid regular expression: %v", err)
			}
		}
		oneOf(p, key+".line.terminator", in.Line.Terminator, []string{"\r\n", "\n", "\r"})
		return
	}
	// Modbus kinds
	if l.UnitID < 1 || l.UnitID > 247 {
		p.bad(key+".link.unit_id", strconv.Itoa(l.UnitID), "a Modbus unit id is from 1 to 247")
	}
	validateValue(p, key+".value", in.Value)
	if in.Role == RoleSource {
		validateValue(p, key+".source.setpoint", in.Set.Setpoint)
		if in.Set.VentCoil == nil && in.Set.VentRegister == nil {
			p.bad(key+".source", "", "give source.vent_coil or source.vent_register: plateau must be able to vent the source on an over-pressure")
		}
	}
}

func validateValue(p *Problems, key string, v ValueRead) {
	oneOf(p, key+".table", v.Table, tables)
	if v.Register < 0 || v.Register > 65535 {
		p.bad(key+".register", strconv.Itoa(v.Register), "a register address is from 0 to 65535 (0-based, as on the wire)")
	}
	if oneOf(p, key+".type", v.Type, types) {
		switch v.Type {
		case "int32", "uint32", "float32":
			oneOf(p, key+".word_order", v.WordOrder, orders32)
		case "float64":
			oneOf(p, key+".word_order", v.WordOrder, orders64)
		}
	}
	if v.Scale == 0 || math.IsNaN(v.Scale) || math.IsInf(v.Scale, 0) {
		p.bad(key+".scale", fmt.Sprint(v.Scale), "must be a finite number other than zero")
	}
}

// The safety limit sits a little above full scale, as a fraction of span:
// room for noise and a small overshoot at the top point, not a real
// over-range (common practice; gauges take full scale only briefly). The
// default is defaultOverRange; an explicit limit may go up to maxOverRange.
const (
	defaultOverRange = 0.02
	maxOverRange     = 0.05
)

func (c *Config) validateSafety(p *Problems) {
	s := &c.Safety
	d, r := c.Device, c.Reference
	if d.UpperPa <= d.LowerPa {
		return // the device range is wrong and already reported
	}
	// The highest limit: the lower of the two full scales, each with an
	// over-range allowance.
	limit := func(allow float64) float64 {
		l := d.UpperPa + allow*(d.UpperPa-d.LowerPa)
		if r.UpperPa > r.LowerPa {
			l = math.Min(l, r.UpperPa+allow*(r.UpperPa-r.LowerPa))
		}
		return l
	}
	ceiling := limit(maxOverRange)
	s.Set = true
	if s.MaxPressure == "" {
		s.MaxPressurePa = limit(defaultOverRange)
		return
	}
	mp, ok := pressure(p, "safety.max_pressure", s.MaxPressure, true)
	if !ok {
		return
	}
	s.MaxPressurePa = mp
	if mp < d.UpperPa {
		p.bad("safety.max_pressure", s.MaxPressure, "is below the device's full scale (%s): the top point could never be reached", d.Upper)
	}
	if mp > ceiling*(1+1e-12) {
		p.bad("safety.max_pressure", s.MaxPressure, "is above the lower of the device's and the reference's full scale plus %g %% of span (%s): never exceed a gauge's range",
			maxOverRange*100, formatPa(ceiling, d.Unit))
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

func (c *Config) validateProcedure(p *Problems) {
	pr := &c.Procedure
	d := c.Device
	oneOf(p, "procedure.mode", pr.Mode, modes)
	oneOf(p, "procedure.on_timeout", pr.OnTimeout, onTimeouts)
	oneOf(p, "procedure.compare", pr.Compare, compares)
	oneOf(p, "procedure.decision", pr.Decision, decisions)
	span := d.UpperPa - d.LowerPa
	if pr.Mode == "free" && d.Kind == "dial" {
		p.bad("procedure.mode", pr.Mode, "free runs capture the plateaus both instruments hold; a dial read by a person has no readings between entries: use mode plan")
	}
	if span <= 0 {
		return // the device range is wrong and already reported; points cannot be judged
	}
	if pr.Mode == "plan" && len(pr.Points) == 0 {
		p.bad("procedure.points", "", "a plan needs at least one point")
	}
	pr.PointsPa = pr.PointsPa[:0]
	for i, s := range pr.Points {
		key := fmt.Sprintf("procedure.points[%d]", i)
		q, err := units.ParseQuantity(s)
		if err != nil {
			p.bad(key, s, "%v", err)
			continue
		}
		var pa float64
		if q.Percent {
			pa = d.LowerPa + q.Value/100*span
		} else {
			pa, _ = q.Pa()
		}
		if span > 0 && (pa < d.LowerPa-1e-9*span || pa > d.UpperPa+1e-9*span) {
			p.bad(key, s, "is outside the device range %s … %s", d.Lower, d.Upper)
			continue
		}
		if c.Safety.MaxPressurePa > 0 && pa > c.Safety.MaxPressurePa {
			p.bad(key, s, "is above safety.max_pressure")
			continue
		}
		if n := len(pr.PointsPa); n > 0 && pa <= pr.PointsPa[n-1] {
			p.bad(key, s, "points must rise strictly; the descending series runs them in reverse")
			continue
		}
		pr.PointsPa = append(pr.PointsPa, pa)
	}
	if pr.Cycles < 1 || pr.Cycles > 1000 {
		p.bad("procedure.cycles", strconv.Itoa(pr.Cycles), "must be from 1 to 1000")
	}
	if pr.Exercise < 0 || pr.Exercise > 10 {
		p.bad("procedure.exercise", strconv.Itoa(pr.Exercise), "must be from 0 to 10")
	}
	for key, dur := range map[string]time.Duration{"procedure.exercise_hold": pr.ExerciseHold, "procedure.top_hold": pr.TopHold, "procedure.hold": pr.Hold} {
		if dur < 0 {
			p.bad(key, dur.String(), "cannot be negative")
		}
	}
	if pr.Timeout <= 0 {
		p.bad("procedure.timeout", pr.Timeout.String(), "must be positive")
	}
	st := &pr.Settle
	if st.Window <= 0 {
		p.bad("procedure.settle.window", st.Window.String(), "must be positive, e.g. 30s")
	}
	if pr.Timeout > 0 && st.Window > 0 && pr.Timeout < st.Window {
		p.bad("procedure.timeout", pr.Timeout.String(), "is shorter than the settle window (%s): no point could ever be captured", st.Window)
	}
	if st.MinCount < 3 {
		p.bad("procedure.settle.min_count", strconv.Itoa(st.MinCount), "must be at least 3: a line is fitted through the window and the scatter judged about it")
	}
	tol := d.tolerancePa()
	if drift, ok := pressure(p, "procedure.settle.max_drift", st.MaxDrift, false); ok {
		st.MaxDriftPaPerS = drift / 60
	} else if st.MaxDrift == "" {
		// Our own default: a tenth of the permissible error per minute.
		st.MaxDriftPaPerS = 0.1 * tol / 60
	}
	if spread, ok := pressure(p, "procedure.settle.max_spread", st.MaxSpread, false); ok {
		st.MaxSpreadPa = spread
	} else if st.MaxSpread == "" {
		st.MaxSpreadPa = math.Max(0.1*tol, d.ResolutionPa)
	}
	if st.Band != "" {
		q, err := units.ParseQuantity(st.Band)
		switch {
		case err != nil:
			p.bad("procedure.settle.band", st.Band, "%v", err)
		case q.Percent:
			st.BandPa = q.Value / 100 * span
		default:
			st.BandPa, _ = q.Pa()
		}
	}
	if st.MaxDriftPaPerS < 0 || st.MaxSpreadPa < 0 || st.BandPa < 0 {
		p.bad("procedure.settle", "", "limits cannot be negative")
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
	if math.Abs(h.ReferenceHeight-h.DeviceHeight) > 10 {
		p.bad("head.device_height", fmt.Sprint(h.DeviceHeight), "more than 10 m from the reference's height: heights are in metres")
	}
	if c.Device.Oxygen && h.FluidDensity > 50 {
		p.bad("head.fluid_density", fmt.Sprint(h.FluidDensity), "is the density of a liquid, but the device is for oxygen service: it must see only clean, oil-free gas")
	}
	if h.HeightUncertainty < 0 || h.DensityUncertainty < 0 {
		p.bad("head", "", "uncertainties cannot be negative")
	}
}

func (c *Config) validateSimulator(p *Problems) {
	s := &c.Simulator
	// The simulated device is the configured device unless told otherwise.
	if s.Device.Kind == "" {
		s.Device.Kind = c.Device.Kind
	}
	if s.Device.Lower == "" {
		s.Device.Lower = c.Device.Lower
	}
	if s.Device.Upper == "" {
		s.Device.Upper = c.Device.Upper
	}
	for i, in := range c.Instruments {
		if in.Role == RoleDevice && in.Link.Kind == LinkSim && s.Device.Kind != c.Device.Kind {
			p.bad("simulator.device.kind", s.Device.Kind, "instruments[%d] is the simulated device, but device.kind is %q: make them the same", i, c.Device.Kind)
		}
	}
	if s.Speed <= 0 || s.Speed > 10000 {
		p.bad("simulator.speed", fmt.Sprint(s.Speed), "must be above 0 and at most 10000 (times real time)")
	}
	for key, val := range map[string]string{
		"simulator.source.leak": s.Source.Leak, "simulator.reference.noise": s.Reference.Noise,
		"simulator.reference.resolution": s.Reference.Resolution, "simulator.device.zero": s.Device.Zero,
		"simulator.device.nonlinearity": s.Device.Nonlinearity, "simulator.device.dead_band": s.Device.DeadBand,
		"simulator.device.resolution": s.Device.Resolution, "simulator.device.noise": s.Device.Noise,
		"simulator.device.lower": s.Device.Lower, "simulator.device.upper": s.Device.Upper,
	} {
		pressure(p, key, val, false)
	}
	if s.Source.Max != "" {
		pressure(p, "simulator.source.max", s.Source.Max, false)
	}
	percent(p, "simulator.reference.error", s.Reference.Error)
	percent(p, "simulator.device.span", s.Device.Span)
	oneOf(p, "simulator.device.kind", s.Device.Kind, devKinds)
	f := s.Faults
	for key, r := range map[string]float64{"drop": f.Drop, "slow": f.Slow, "bad_crc": f.BadCRC, "garbage": f.Garbage, "stuck": f.Stuck, "spike": f.Spike} {
		if r < 0 || r > 1 {
			p.bad("simulator.faults."+key, fmt.Sprint(r), "is a probability per request, from 0 to 1")
		}
	}
}

func joinInts(xs []int) string {
	s := make([]string, len(xs))
	for i, x := range xs {
		s[i] = strconv.Itoa(x)
	}
	return strings.Join(s, ", ")
}
