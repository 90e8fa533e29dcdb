package config

import "time"

// CompleteInstrument gives an instrument built in code (such as the
// simulator's, made after Load) the defaults and resolved values that Load
// gives the file's, so that no driver needs defaults of its own. It
// returns the problems with the values it could not resolve.
func CompleteInstrument(in *Instrument) error {
	instrumentDefaults(in)
	p := newProblems("instrument " + in.Name)
	in.resolve(p, "instrument")
	if p.Len() > 0 {
		p.sort()
		return p
	}
	return nil
}

// Roles an instrument can play on the bench.
const (
	RoleReference = "reference" // the reference standard
	RoleDevice    = "device"    // the device under test
	RoleSource    = "source"    // a pressure controller that takes a setpoint
	RoleAmbient   = "ambient"   // temperature, humidity or barometric pressure, recorded with each point
)

// Link kinds: how plateau reaches an instrument.
const (
	LinkModbusTCP    = "modbus-tcp"     // Modbus TCP, address host:port
	LinkModbusRTU    = "modbus-rtu"     // Modbus RTU on a serial port, address /dev/...
	LinkModbusRTUTCP = "modbus-rtu-tcp" // Modbus RTU frames through a TCP serial gateway
	LinkSerial       = "serial"         // a line-oriented ASCII instrument on a serial port
	LinkSim          = "sim"            // the built-in simulated rig, over its real transports
	LinkManual       = "manual"         // readings typed by an operator (analog dial gauges)
)

// Instrument is one entry of the instruments list.
type Instrument struct {
	Name  string        `mapstructure:"name"`
	Role  string        `mapstructure:"role"`
	Link  Link          `mapstructure:"link"`
	Poll  time.Duration `mapstructure:"poll"` // interval between reads
	Unit  string        `mapstructure:"unit"` // unit of the raw value after scale/offset ("bar", "kPa", "mA", …)
	Value ValueRead     `mapstructure:"value"`
	Line  LineProtocol  `mapstructure:"line"`
	Loop  CurrentLoop   `mapstructure:"current_loop"`
	Set   SourceControl `mapstructure:"source"`
	// SimPart names which simulated instrument this is when Link.Kind is "sim":
	// "reference", "device" or "source"; SimVia picks the transport the real
	// driver uses to reach it: "modbus-tcp", "modbus-rtu" or "serial".
	SimPart string `mapstructure:"sim_part"`
	SimVia  string `mapstructure:"sim_via"`
	// Device describes this device under test when a run holds several;
	// nil for other roles and for the one device of the top-level section.
	Device *DeviceEntry `mapstructure:"device"`
	// Balance describes the reference when it is a pressure balance (balance.go).
	Balance *Balance `mapstructure:"balance"`
	// Mode, Quantity and Uncertainty: see mode.go and ambient.go.
	Measures `mapstructure:",squash"`
}

// Link says where an instrument is and how to talk to it.
type Link struct {
	Kind     string        `mapstructure:"kind"`
	Address  string        `mapstructure:"address"` // host:port, or a serial device path
	UnitID   int           `mapstructure:"unit_id"` // Modbus unit (slave) id, 1–247
	Baud     int           `mapstructure:"baud"`
	DataBits int           `mapstructure:"data_bits"`
	Parity   string        `mapstructure:"parity"`    // none | even | odd
	StopBits int           `mapstructure:"stop_bits"` // 1 | 2
	Timeout  time.Duration `mapstructure:"timeout"`   // per request
	Retries  int           `mapstructure:"retries"`   // extra attempts after a failed request
	Backoff  time.Duration `mapstructure:"backoff"`   // first wait before a reconnect; doubles up to 30 s
	Pause    time.Duration `mapstructure:"pause"`     // quiet time between requests on a shared bus
}

// ValueRead tells how a Modbus instrument's value is read and scaled:
// value = raw × scale + offset, in Instrument.Unit.
type ValueRead struct {
	Table     string  `mapstructure:"table"`      // holding | input
	Register  int     `mapstructure:"register"`   // 0-based wire address of the first register
	Type      string  `mapstructure:"type"`       // int16 | uint16 | int32 | uint32 | float32 | float64
	WordOrder string  `mapstructure:"word_order"` // ABCD | CDAB | BADC | DCBA (and for float64: ABCDEFGH | GHEFCDAB | BADCFEHG | HGFEDCBA)
	Scale     float64 `mapstructure:"scale"`
	Offset    float64 `mapstructure:"offset"`
}

// LineProtocol describes a line-oriented serial instrument.
type LineProtocol struct {
	Query      string   `mapstructure:"query"`      // sent before each read; empty means the instrument streams unprompted
	Reply      string   `mapstructure:"reply"`      // regular expression; its first group (or whole match) is the number. Empty: the first number on the line
	Terminator string   `mapstructure:"terminator"` // end of a reply line: "\r\n", "\n" or "\r"
	Overload   []string `mapstructure:"overload"`   // words or symbols that mean over/under range, e.g. "OL", "----"
}

// CurrentLoop converts a 4–20 mA loop current (the raw value, unit "mA")
// to pressure over [Lower, Upper] given as quantities such as "0 bar".
type CurrentLoop struct {
	Enabled bool   `mapstructure:"enabled"`
	Lower   string `mapstructure:"lower"`
	Upper   string `mapstructure:"upper"`

	LowerPa float64 `mapstructure:"-"` // resolved when Enabled
	UpperPa float64 `mapstructure:"-"`
}

// SourceControl describes how a pressure controller is driven over Modbus.
type SourceControl struct {
	Setpoint     ValueRead `mapstructure:"setpoint"`      // where and how the setpoint is written (in Instrument.Unit)
	VentCoil     *int      `mapstructure:"vent_coil"`     // coil to switch on to vent; nil when venting is by register
	VentRegister *int      `mapstructure:"vent_register"` // holding register to write VentValue to; nil when unused
	VentValue    int       `mapstructure:"vent_value"`
	ReachedInput *int      `mapstructure:"reached_input"` // discrete input that says "setpoint reached"; nil when absent
}
