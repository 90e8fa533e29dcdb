package config

import "time"

// Simulator describes the built-in simulated comparison bench. Quantities are
// strings with units ("0.05 bar", "0.2 %") so that a newcomer can read them.
type Simulator struct {
	Seed int64 `mapstructure:"seed"` // same seed, same run
	// Speed runs the acquisition clock (and the simulator's physics) this
	// many times faster than real time: 1 for real time, 60 for a demo.
	Speed     float64      `mapstructure:"speed"`
	Source    SimSource    `mapstructure:"source"`
	Reference SimReference `mapstructure:"reference"`
	Device    SimDevice    `mapstructure:"device"`
	// Devices holds several simulated devices under test, each read by the
	// instrument it names. Device is their template: what an entry leaves
	// out comes from it. Empty: the one device of Device.
	Devices []SimUnit `mapstructure:"devices"`
	RTU     SimRTU    `mapstructure:"rtu"`
	Faults  SimFaults `mapstructure:"faults"`
}

// SimUnit is one of several simulated devices under test. On the simulated
// Modbus RTU line (and over Modbus TCP) the n-th entry answers at unit id n
// (1 for the first); each has its own line instrument.
type SimUnit struct {
	// Instrument is the name of the instruments entry (role device, link
	// sim) that reads this device.
	Instrument string `mapstructure:"instrument"`
	SimDevice  `mapstructure:",squash"`
	// CutAt cuts this device's link for good at this time after the
	// simulator starts (clock time): its unit id and its line instrument
	// stop answering, as when its cable is pulled. 0: never.
	CutAt time.Duration `mapstructure:"cut_at"`
}

// SimRTU is the simulated Modbus RTU line on its pseudo-terminal.
type SimRTU struct {
	Baud int `mapstructure:"baud"` // the baud rate its timing assumes (default 19200)
	// WireTime holds every reply back until the request and the reply
	// would have crossed a real line at Baud (11 bits a character, with the
	// 3.5-character silences): a pseudo-terminal has no baud rate of its own.
	// Off by default, because an accelerated clock needs every read the
	// pseudo-terminal can give.
	WireTime bool `mapstructure:"wire_time"`
}

// SimSource is the simulated pressure controller.
type SimSource struct {
	TimeConstant time.Duration `mapstructure:"time_constant"` // first-order response
	Overshoot    float64       `mapstructure:"overshoot"`     // fraction of the step, e.g. 0.05
	Leak         string        `mapstructure:"leak"`          // pressure lost per second, e.g. "0.5 Pa"
	Max          string        `mapstructure:"max"`           // the controller's own ceiling, e.g. "25 bar"
}

// SimReference is the simulated reference transducer.
type SimReference struct {
	Noise      string `mapstructure:"noise"`      // standard deviation, e.g. "0.2 mbar"
	Resolution string `mapstructure:"resolution"` // e.g. "0.01 mbar"
	Error      string `mapstructure:"error"`      // its own small error, % of reading, e.g. "0.005 %"
	Unit       string `mapstructure:"unit"`       // unit it reports in
}

// SimDevice is the simulated device under test.
type SimDevice struct {
	Kind          string        `mapstructure:"kind"`           // digital | transmitter (4–20 mA) | dial
	Zero          string        `mapstructure:"zero"`           // zero offset, e.g. "0.02 bar"
	Span          string        `mapstructure:"span"`           // span error at full scale, % of reading, e.g. "0.1 %"
	Nonlinearity  string        `mapstructure:"nonlinearity"`   // peak of a parabolic bow at mid-span, e.g. "0.03 bar"
	DeadBand      string        `mapstructure:"dead_band"`      // friction: total dead band, e.g. "0.04 bar"
	Resolution    string        `mapstructure:"resolution"`     // display step or dial reading step, e.g. "0.01 bar"
	Noise         string        `mapstructure:"noise"`          // standard deviation, e.g. "0.002 bar"
	Unit          string        `mapstructure:"unit"`           // unit it reports in
	Lower         string        `mapstructure:"lower"`          // range, e.g. "0 bar" (also the 4–20 mA range)
	Upper         string        `mapstructure:"upper"`          // e.g. "16 bar"
	OperatorDelay time.Duration `mapstructure:"operator_delay"` // dial: how long the simulated operator takes to read it
}

// SimFaults switches fault injection on; each rate is a probability per request.
type SimFaults struct {
	Drop      float64       `mapstructure:"drop"`      // no reply at all
	Slow      float64       `mapstructure:"slow"`      // reply after SlowBy
	SlowBy    time.Duration `mapstructure:"slow_by"`   //
	BadCRC    float64       `mapstructure:"bad_crc"`   // RTU reply with a corrupted CRC
	Garbage   float64       `mapstructure:"garbage"`   // a garbled line from the serial instrument
	Stuck     float64       `mapstructure:"stuck"`     // the value freezes for StuckFor
	StuckFor  time.Duration `mapstructure:"stuck_for"` //
	Spike     float64       `mapstructure:"spike"`     // a single wild sample
	LinkDown  time.Duration `mapstructure:"link_down"` // every so often (LinkEvery) the servers go away for this long
	LinkEvery time.Duration `mapstructure:"link_every"`
}
