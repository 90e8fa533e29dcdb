package config

import (
	"os"
	"path/filepath"
	"time"
)

// defaults gives every key of the file a value, so that viper knows every
// key (which environment overrides need) and a first-time user can leave out
// what they would not know.
func defaults() map[string]any {
	return map[string]any{
		"store.path":          filepath.Join(dirFromEnv("STATE_DIRECTORY"), "plateau.db"),
		"listen.socket":       filepath.Join(dirFromEnv("RUNTIME_DIRECTORY"), "plateau.sock"),
		"listen.tcp":          "",
		"listen.allow_remote": false,
		"listen.token_file":   "",
		"log.level":           "info",
		"log.format":          "auto",

		"device.id":            "",
		"device.manufacturer":  "",
		"device.model":         "",
		"device.serial":        "",
		"device.kind":          "digital",
		"device.lower":         "0 bar",
		"device.upper":         "",
		"device.unit":          "",
		"device.resolution":    "",
		"device.class":         "",
		"device.grade":         "",
		"device.limit.span":    "",
		"device.limit.reading": "",
		"device.limit.floor":   "",
		"device.medium":        "air",
		"device.oxygen":        false,
		// uncertainty budget
		"device.temperature_coefficient": 0.0,
		"device.reference_temperature":   20.0,
		"device.hysteresis_limit":        0.0,
		"device.mode":                    "",
		"device.conditions.temperature":  "",
		"device.conditions.humidity":     "",
		"device.conditions.barometric":   "",

		"reference.id":          "",
		"reference.model":       "",
		"reference.serial":      "",
		"reference.certificate": "",
		"reference.lower":       "",
		"reference.upper":       "",
		"reference.uncertainty": "",
		"reference.floor":       "0 Pa",
		"reference.coverage":    2.0,
		"reference.expires":     "",
		"reference.oil_filled":  false,
		// uncertainty budget
		"reference.stability":       0.0,
		"reference.stability_floor": "",
		"reference.resolution":      "",
		// the current meter of a transmitter's output (loop.go)
		"reference.loop_meter.uncertainty": "",
		"reference.loop_meter.floor":       "",
		"reference.loop_meter.coverage":    2.0,
		"reference.loop_meter.resolution":  "",

		"procedure.mode":              "plan",
		"procedure.points":            []string{"0 %", "25 %", "50 %", "75 %", "100 %"},
		"procedure.cycles":            2,
		"procedure.exercise":          1,
		"procedure.exercise_hold":     30 * time.Second,
		"procedure.top_hold":          60 * time.Second,
		"procedure.hold":              30 * time.Second,
		"procedure.timeout":           10 * time.Minute,
		"procedure.on_timeout":        "skip",
		"procedure.zero":              true,
		"procedure.compare":           "set-by-reference",
		"procedure.entry_limit":       5.0,
		"procedure.decision":          "", // no rule is assumed: see validateProcedure
		"procedure.coverage":          "conventional",
		"procedure.settle.window":     30 * time.Second,
		"procedure.settle.min_count":  10,
		"procedure.settle.max_drift":  "",
		"procedure.settle.max_spread": "",
		"procedure.settle.band":       "2 %",

		"safety.max_pressure": "",
		"safety.silence":      "0s",

		"head.fluid_density":       1.2,
		"head.ambient_density":     1.2,
		"head.gravity":             9.80665,
		"head.reference_height":    0.0,
		"head.device_height":       0.0,
		"head.height_uncertainty":  0.0,
		"head.density_uncertainty": 0.0,
		"head.gas_molar_mass":      0.0,
		"head.gas_temperature":     20.0,

		"certificate.number":   "", // certificate.go: optional, left out of the report when empty
		"certificate.customer": "",
		"certificate.operator": "",
		"certificate.date":     "",

		"simulator.seed":                  1,
		"simulator.speed":                 1.0,
		"simulator.source.time_constant":  2 * time.Second,
		"simulator.source.overshoot":      0.0,
		"simulator.source.leak":           "0 Pa",
		"simulator.source.max":            "",
		"simulator.reference.noise":       "0.1 mbar",
		"simulator.reference.resolution":  "0.01 mbar",
		"simulator.reference.error":       "0 %",
		"simulator.reference.unit":        "bar",
		"simulator.device.kind":           "digital",
		"simulator.device.zero":           "0.02 bar",
		"simulator.device.span":           "0.1 %",
		"simulator.device.nonlinearity":   "0.02 bar",
		"simulator.device.dead_band":      "0.02 bar",
		"simulator.device.resolution":     "0.01 bar",
		"simulator.device.noise":          "0.002 bar",
		"simulator.device.unit":           "bar",
		"simulator.device.lower":          "0 bar",
		"simulator.device.upper":          "16 bar",
		"simulator.device.operator_delay": 5 * time.Second,
		"simulator.faults.drop":           0.0,
		"simulator.faults.slow":           0.0,
		"simulator.faults.slow_by":        2 * time.Second,
		"simulator.faults.bad_crc":        0.0,
		"simulator.faults.garbage":        0.0,
		"simulator.faults.stuck":          0.0,
		"simulator.faults.stuck_for":      10 * time.Second,
		"simulator.faults.spike":          0.0,
		"simulator.faults.link_down":      0 * time.Second,
		"simulator.faults.link_every":     0 * time.Second,
		"simulator.rtu.baud":              19200,
		"simulator.rtu.wire_time":         false,
	}
}

// instrumentDefaults fills what an instrument entry left out. Lists of
// structs cannot carry viper defaults, so this runs after decoding.
func instrumentDefaults(in *Instrument) {
	l := &in.Link
	if l.UnitID == 0 {
		l.UnitID = 1
	}
	if l.Baud == 0 {
		l.Baud = 9600
		if l.Kind == LinkModbusRTU {
			l.Baud = 19200 // the Modbus serial line default
		}
	}
	if l.DataBits == 0 {
		l.DataBits = 8
	}
	if l.Parity == "" {
		l.Parity = "none"
		if l.Kind == LinkModbusRTU {
			l.Parity = "even" // the Modbus serial line default
		}
	}
	if l.StopBits == 0 {
		l.StopBits = 1
	}
	if l.Timeout == 0 {
		l.Timeout = 500 * time.Millisecond
		if l.Kind == LinkModbusTCP || l.Kind == LinkModbusRTUTCP {
			l.Timeout = time.Second
		}
	}
	if l.Backoff == 0 {
		l.Backoff = 500 * time.Millisecond
	}
	if l.Pause == 0 && l.Kind == LinkModbusRTU {
		l.Pause = 20 * time.Millisecond
	}
	if in.Poll == 0 {
		in.Poll = 250 * time.Millisecond
	}
	v := &in.Value
	if v.Table == "" {
		v.Table = "holding"
	}
	if v.Type == "" {
		v.Type = "float32"
	}
	if v.WordOrder == "" {
		v.WordOrder = "ABCD"
	}
	if v.Scale == 0 {
		v.Scale = 1
	}
	if in.Line.Terminator == "" {
		in.Line.Terminator = "\r\n"
	}
	if in.Line.Overload == nil {
		in.Line.Overload = []string{"OL", "OVER", "UNDER", "----"}
	}
	s := &in.Set
	if s.Setpoint.Table == "" {
		s.Setpoint.Table = "holding"
	}
	if s.Setpoint.Type == "" {
		s.Setpoint.Type = "float32"
	}
	if s.Setpoint.WordOrder == "" {
		s.Setpoint.WordOrder = "ABCD"
	}
	if s.Setpoint.Scale == 0 {
		s.Setpoint.Scale = 1
	}
}

func dirFromEnv(name string) string {
	if d := os.Getenv(name); d != "" {
		return d
	}
	return "."
}
