package sim

import (
	"fmt"
	"time"

	"plateau/analysis/units"
	"plateau/config"
)

// Device kinds the simulator models.
const (
	KindDigital     = "digital"     // a digital gauge or transmitter with a display / register value
	KindTransmitter = "transmitter" // a 4–20 mA transmitter, read as a loop current
	KindDial        = "dial"        // an analog dial read by an operator
)

// params is config.Simulator read into numbers: every pressure in pascal,
// every percentage as a fraction.
type params struct {
	seed uint64

	tau       float64 // source time constant, s
	overshoot float64 // fraction of the step
	shape     float64 // response shape factor solved from overshoot (0: plain first order)
	leak      float64 // Pa/s toward atmosphere
	maxPa     float64 // the controller's ceiling
	minPa     float64 // lowest setpoint the controller accepts

	refNoise, refRes, refErr float64
	refUnit                  units.Unit

	devParams             // the first (or only) device under test
	devs      []devParams // every device, the first included
	faults    config.SimFaults
	baud      int  // of the simulated RTU line
	wireTime  bool // RTU replies keep the wire time at baud
}

// devParams is one simulated device under test.
type devParams struct {
	instrument            string // the instrument that reads it ("" for the one device of simulator.device)
	kind                  string
	zero, span, bow, band float64 // band: total dead band
	devRes, devNoise      float64
	devUnit               units.Unit
	lower, upper          float64
	lowerText, upperText  string // the range as configured, for the current loop
	operatorDelay         time.Duration
	cutAt                 time.Duration // its link is cut for good this long after the start (0: never)
}

// Defaults for what a config leaves empty, so that a rig starts with no
// configuration at all. They match the config package's defaults.
var defaultSimulator = config.Simulator{
	Seed:  1,
	Speed: 1,
	Source: config.SimSource{
		TimeConstant: 2 * time.Second,
	},
	Reference: config.SimReference{
		Noise: "0.1 mbar", Resolution: "0.01 mbar", Error: "0 %", Unit: "bar",
	},
	Device: config.SimDevice{
		Kind: KindDigital, Zero: "0.02 bar", Span: "0.1 %", Nonlinearity: "0.02 bar",
		DeadBand: "0.02 bar", Resolution: "0.01 bar", Noise: "0.002 bar", Unit: "bar",
		Lower: "0 bar", Upper: "16 bar", OperatorDelay: 5 * time.Second,
	},
	RTU:    config.SimRTU{Baud: 19200},
	Faults: config.SimFaults{SlowBy: 2 * time.Second, StuckFor: 10 * time.Second},
}

// WithDefaults returns s with every empty field filled from the simulator's
// defaults (a 0–16 bar digital gauge with small, visible errors).
func WithDefaults(s config.Simulator) config.Simulator {
	d := defaultSimulator
	fill := func(dst *string, def string) {
		if *dst == "" {
			*dst = def
		}
	}
	if s.Speed <= 0 {
		s.Speed = d.Speed
	}
	if s.Source.TimeConstant <= 0 {
		s.Source.TimeConstant = d.Source.TimeConstant
	}
	fill(&s.Reference.Noise, d.Reference.Noise)
	fill(&s.Reference.Resolution, d.Reference.Resolution)
	fill(&s.Reference.Error, d.Reference.Error)
	fill(&s.Reference.Unit, d.Reference.Unit)
	dv := &s.Device
	fill(&dv.Kind, d.Device.Kind)
	fill(&dv.Zero, d.Device.Zero)
	fill(&dv.Span, d.Device.Span)
	fill(&dv.Nonlinearity, d.Device.Nonlinearity)
	fill(&dv.DeadBand, d.Device.DeadBand)
	fill(&dv.Resolution, d.Device.Resolution)
	fill(&dv.Noise, d.Device.Noise)
	fill(&dv.Unit, d.Device.Unit)
	fill(&dv.Lower, d.Device.Lower)
	fill(&dv.Upper, d.Device.Upper)
	if dv.OperatorDelay <= 0 {
		dv.OperatorDelay = d.Device.OperatorDelay
	}
	// Each of several devices takes what it leaves out from simulator.device.
	s.Devices = append([]config.SimUnit(nil), s.Devices...)
	for i := range s.Devices {
		u, t := &s.Devices[i].SimDevice, s.Device
		fill(&u.Kind, t.Kind)
		fill(&u.Zero, t.Zero)
		fill(&u.Span, t.Span)
		fill(&u.Nonlinearity, t.Nonlinearity)
		fill(&u.DeadBand, t.DeadBand)
		fill(&u.Resolution, t.Resolution)
		fill(&u.Noise, t.Noise)
		fill(&u.Unit, t.Unit)
		fill(&u.Lower, t.Lower)
		fill(&u.Upper, t.Upper)
		if u.OperatorDelay <= 0 {
			u.OperatorDelay = t.OperatorDelay
		}
	}
	if s.RTU.Baud <= 0 {
		s.RTU.Baud = d.RTU.Baud
	}
	if s.Faults.SlowBy <= 0 {
		s.Faults.SlowBy = d.Faults.SlowBy
	}
	if s.Faults.StuckFor <= 0 {
		s.Faults.StuckFor = d.Faults.StuckFor
	}
	return s
}

// parseParams checks and converts a (defaulted) simulator section. Every
// error names the key, as the config file spells it.
func parseParams(s config.Simulator) (params, error) {
	var p params
	var errs []error
	bad := func(key, val string, err error) {
		errs = append(errs, fmt.Errorf("simulator.%s = %q: %w", key, val, err))
	}
	unit := func(key, val string) units.Unit {
		u, err := units.Lookup(val)
		if err != nil {
			bad(key, val, err)
			return units.Pascal
		}
		return u
	}
	pressure := func(key, val string) float64 { // a pressure such as "0.02 bar"
		q, err := units.ParseQuantity(val)
		if err != nil {
			bad(key, val, err)
			return 0
		}
		pa, err := q.Pa()
		if err != nil {
			bad(key, val, err)
		}
		return pa
	}
	percent := func(key, val string) float64 { // "0.1 %" → 0.001
		q, err := units.ParseQuantity(val)
		if err != nil {
			bad(key, val, err)
			return 0
		}
		if !q.Percent {
			bad(key, val, fmt.Errorf("want a percentage such as \"0.1 %%\""))
			return 0
		}
		return q.Value / 100
	}
	nonNegative := func(key, val string, v float64) float64 {
		if v < 0 {
			bad(key, val, fmt.Errorf("must not be negative"))
			return 0
		}
		return v
	}

	p.seed = uint64(s.Seed)
	p.tau = s.Source.TimeConstant.Seconds()
	p.overshoot = s.Source.Overshoot
	if p.overshoot < 0 || p.overshoot > 0.5 {
		bad("source.overshoot", fmt.Sprint(s.Source.Overshoot), fmt.Errorf("want a fraction of the step between 0 and 0.5"))
		p.overshoot = 0
	}
	p.shape = shapeFor(p.overshoot)
	if s.Source.Leak != "" {
		p.leak = nonNegative("source.leak", s.Source.Leak, pressure("source.leak", s.Source.Leak))
	}

	p.refUnit = unit("reference.unit", s.Reference.Unit)
	p.refNoise = nonNegative("reference.noise", s.Reference.Noise, pressure("reference.noise", s.Reference.Noise))
	p.refRes = nonNegative("reference.resolution", s.Reference.Resolution, pressure("reference.resolution", s.Reference.Resolution))
	p.refErr = percent("reference.error", s.Reference.Error)

	list := s.Devices
	if len(list) == 0 {
		list = []config.SimUnit{{SimDevice: s.Device}}
	}
	if len(list) > config.MaxDevices {
		bad("devices", fmt.Sprint(len(list)), fmt.Errorf("at most %d simulated devices", config.MaxDevices))
		list = list[:config.MaxDevices]
	}
	names := map[string]int{}
	for i, u := range list {
		key := "device."
		if len(s.Devices) > 0 {
			key = fmt.Sprintf("devices[%d].", i)
			switch prev, dup := names[u.Instrument]; {
			case u.Instrument == "":
				bad(key+"instrument", "", fmt.Errorf("is required: the name of the instruments entry that reads this simulated device"))
			case dup:
				bad(key+"instrument", u.Instrument, fmt.Errorf("also names devices[%d]: each simulated device is read by its own instrument", prev))
			default:
				names[u.Instrument] = i
			}
			if u.CutAt < 0 {
				bad(key+"cut_at", u.CutAt.String(), fmt.Errorf("must not be negative"))
			}
		}
		p.devs = append(p.devs, parseDevice(key, u, bad, unit, pressure, percent, nonNegative))
	}
	p.devParams = p.devs[0]
	p.baud = s.RTU.Baud
	p.wireTime = s.RTU.WireTime
	if p.baud <= 0 {
		bad("rtu.baud", fmt.Sprint(s.RTU.Baud), fmt.Errorf("must be above zero"))
		p.baud = 19200
	}

	// The controller's ceiling defaults to 10 % above the largest range.
	for _, d := range p.devs {
		p.maxPa = max(p.maxPa, d.upper+0.1*(d.upper-d.lower))
	}
	if s.Source.Max != "" {
		p.maxPa = pressure("source.max", s.Source.Max)
	}
	if p.maxPa <= 0 {
		bad("source.max", s.Source.Max, fmt.Errorf("must be above zero"))
		p.maxPa = p.upper
	}
	p.minPa = 0
	for _, d := range p.devs {
		p.minPa = min(p.minPa, d.lower)
	}

	f := s.Faults
	for _, r := range []struct {
		key string
		v   float64
	}{{"drop", f.Drop}, {"slow", f.Slow}, {"bad_crc", f.BadCRC}, {"garbage", f.Garbage}, {"stuck", f.Stuck}, {"spike", f.Spike}} {
		if r.v < 0 || r.v > 1 {
			bad("faults."+r.key, fmt.Sprint(r.v), fmt.Errorf("want a probability per request between 0 and 1"))
		}
	}
	if f.LinkDown > 0 && f.LinkEvery <= f.LinkDown {
		bad("faults.link_every", f.LinkEvery.String(), fmt.Errorf("must be longer than faults.link_down (%s)", f.LinkDown))
	}
	p.faults = f

	if len(errs) > 0 {
		return p, joinErrors(errs)
	}
	return p, nil
}

// joinErrors puts one problem per line, as config.Load does.
func joinErrors(errs []error) error {
	msg := fmt.Sprintf("%d problem(s) in the simulator settings:", len(errs))
	for _, e := range errs {
		msg += "\n  " + e.Error()
	}
	return fmt.Errorf("%s", msg)
}

// parseDevice reads one simulated device; key is the prefix of its keys
// ("device." or "devices[2].").
func parseDevice(key string, u config.SimUnit, bad func(key, val string, err error),
	unit func(key, val string) units.Unit, pressure, percent func(key, val string) float64,
	nonNegative func(key, val string, v float64) float64) devParams {
	d := u.SimDevice
	p := devParams{instrument: u.Instrument, cutAt: u.CutAt, lowerText: d.Lower, upperText: d.Upper}
	switch d.Kind {
	case KindDigital, KindTransmitter, KindDial:
		p.kind = d.Kind
	default:
		bad(key+"kind", d.Kind, fmt.Errorf("want %s, %s or %s", KindDigital, KindTransmitter, KindDial))
	}
	p.devUnit = unit(key+"unit", d.Unit)
	p.lower = pressure(key+"lower", d.Lower)
	p.upper = pressure(key+"upper", d.Upper)
	if p.upper <= p.lower {
		bad(key+"upper", d.Upper, fmt.Errorf("must be above %slower (%s)", key, d.Lower))
		p.upper = p.lower + 1
	}
	span := p.upper - p.lower
	// Zero, bow, dead band and noise may be given as a pressure or as a
	// percentage of the device's span.
	ofSpan := func(k, val string) float64 {
		q, err := units.ParseQuantity(val)
		if err != nil {
			bad(k, val, err)
			return 0
		}
		if q.Percent {
			return q.Value / 100 * span
		}
		pa, _ := q.Pa()
		return pa
	}
	p.zero = ofSpan(key+"zero", d.Zero)
	p.span = percent(key+"span", d.Span)
	p.bow = ofSpan(key+"nonlinearity", d.Nonlinearity)
	p.band = nonNegative(key+"dead_band", d.DeadBand, ofSpan(key+"dead_band", d.DeadBand))
	p.devRes = nonNegative(key+"resolution", d.Resolution, ofSpan(key+"resolution", d.Resolution))
	p.devNoise = nonNegative(key+"noise", d.Noise, ofSpan(key+"noise", d.Noise))
	p.operatorDelay = d.OperatorDelay
	return p
}
