// Package config reads plateau's one YAML configuration file with viper,
// lets every scalar key be overridden by a PLATEAU_<KEY> environment
// variable, fills defaults for everything a first-time user would not know,
// and validates the whole file at once: every problem is reported with the
// file, the line where known, the key path, the bad value and what is allowed.
package config

import (
	"time"
)

// Config is the whole file. After Load it is complete and valid, and the
// resolved (…Pa) fields hold every quantity converted to pascal.
type Config struct {
	Store       Store        `mapstructure:"store"`
	Listen      Listen       `mapstructure:"listen"`
	Log         Log          `mapstructure:"log"`
	Instruments []Instrument `mapstructure:"instruments"`
	Device      Device       `mapstructure:"device"`
	Reference   Reference    `mapstructure:"reference"`
	Procedure   Procedure    `mapstructure:"procedure"`
	Safety      Safety       `mapstructure:"safety"`
	Head        Head         `mapstructure:"head"`
	Simulator   Simulator    `mapstructure:"simulator"`
	Certificate Certificate  `mapstructure:"certificate"` // certificate.go

	// File is the path the configuration was read from ("" for defaults only).
	File string `mapstructure:"-"`
	// Devices are the devices under test in instrument order, resolved; a
	// file with one device has one, the same as Device.
	Devices []DeviceUnderTest `mapstructure:"-"`
	// Warnings are what check reports but a run may go ahead with.
	Warnings []Problem `mapstructure:"-"`
}

// Store says where the bbolt file lives.
type Store struct {
	Path string `mapstructure:"path"`
}

// Listen says where the daemon serves its HTTP API.
type Listen struct {
	Socket string `mapstructure:"socket"` // unix socket path; the default way in
	TCP    string `mapstructure:"tcp"`    // optional host:port; loopback unless AllowRemote
	// AllowRemote must be set to listen on an address other than loopback;
	// a token is then required for every call.
	AllowRemote bool   `mapstructure:"allow_remote"`
	TokenFile   string `mapstructure:"token_file"` // file holding the bearer token for TCP callers
}

// Log sets the daemon's log output.
type Log struct {
	Level  string `mapstructure:"level"`  // debug | info | warn | error
	Format string `mapstructure:"format"` // auto | text | json
}

// Device describes the device under test.
type Device struct {
	ID           string `mapstructure:"id"`
	Manufacturer string `mapstructure:"manufacturer"`
	Model        string `mapstructure:"model"`
	Serial       string `mapstructure:"serial"`
	Kind         string `mapstructure:"kind"` // digital | transmitter | dial
	Lower        string `mapstructure:"lower"`
	Upper        string `mapstructure:"upper"`
	Unit         string `mapstructure:"unit"` // the unit the device indicates in
	Resolution   string `mapstructure:"resolution"`
	// Accuracy: one of Class (EN 837-1), Grade (ASME B40.100) or Limit.
	Class  string `mapstructure:"class"`
	Grade  string `mapstructure:"grade"`
	Limit  Limit  `mapstructure:"limit"`
	Medium string `mapstructure:"medium"` // pressure medium the device sees: air, nitrogen, water, oil, …
	Oxygen bool   `mapstructure:"oxygen"` // oxygen service: must stay free of oil and grease
	// Uncertainty budget: the temperature effect in % of span per kelvin away
	// from ReferenceTemperature (°C), and a hysteresis limit of the device's
	// own specification in % of span (0: EN 837-1 classes use the MPE).
	TemperatureCoefficient float64 `mapstructure:"temperature_coefficient"`
	ReferenceTemperature   float64 `mapstructure:"reference_temperature"`
	HysteresisLimit        float64 `mapstructure:"hysteresis_limit"`
	// Mode is gauge or absolute (mode.go); Conditions are the reference
	// conditions the ambient readings are checked against (ambient.go).
	Mode       string     `mapstructure:"mode"`
	Conditions Conditions `mapstructure:"conditions"`

	LowerPa      float64 `mapstructure:"-"`
	UpperPa      float64 `mapstructure:"-"`
	ResolutionPa float64 `mapstructure:"-"`

	okLower, okUpper, okResolution bool // the quantity could be read
}

// Limit is a custom permissible error; the parts add up.
type Limit struct {
	Span    string `mapstructure:"span"`    // % of span, e.g. "0.25 %"
	Reading string `mapstructure:"reading"` // % of reading
	Floor   string `mapstructure:"floor"`   // a pressure, e.g. "0.01 bar"

	SpanPct    float64 `mapstructure:"-"`
	ReadingPct float64 `mapstructure:"-"`
	FloorPa    float64 `mapstructure:"-"`
}

// Reference describes the reference standard and its certificate.
type Reference struct {
	ID          string `mapstructure:"id"`
	Model       string `mapstructure:"model"`
	Serial      string `mapstructure:"serial"`
	Certificate string `mapstructure:"certificate"`
	Lower       string `mapstructure:"lower"`
	Upper       string `mapstructure:"upper"`
	// Expanded uncertainty from the certificate: Uncertainty (% of reading) plus Floor.
	Uncertainty string  `mapstructure:"uncertainty"`
	Floor       string  `mapstructure:"floor"`
	Coverage    float64 `mapstructure:"coverage"`   // the certificate's coverage factor k
	Expires     string  `mapstructure:"expires"`    // date the calibration expires, YYYY-MM-DD
	OilFilled   bool    `mapstructure:"oil_filled"` // an oil-filled reference or comparator: never for oxygen gauges
	// Uncertainty budget: drift since calibration (half-width, % of reading
	// plus a floor) and the reference's own resolution; empty or 0 means
	// the term is reported as not evaluated.
	Stability      float64 `mapstructure:"stability"`
	StabilityFloor string  `mapstructure:"stability_floor"`
	Resolution     string  `mapstructure:"resolution"`
	// LoopMeter reads the 4–20 mA output of a transmitter under test (loop.go).
	LoopMeter LoopMeter `mapstructure:"loop_meter"`

	LowerPa        float64   `mapstructure:"-"`
	UpperPa        float64   `mapstructure:"-"`
	UncertaintyPct float64   `mapstructure:"-"`
	FloorPa        float64   `mapstructure:"-"`
	ExpiresAt      time.Time `mapstructure:"-"`
	// StabilityFloorPa and ResolutionPa are read in resolveReference.
	StabilityFloorPa float64 `mapstructure:"-"`
	ResolutionPa     float64 `mapstructure:"-"`

	okLower, okUpper bool // the quantity was given and could be read
}

// Procedure is the plan of a calibration.
type Procedure struct {
	// Mode: "plan" follows Points; "free" captures every plateau both
	// instruments hold for a full window (pressure set by hand, no plan).
	Mode     string   `mapstructure:"mode"`
	Points   []string `mapstructure:"points"` // "0 %", "25 %" … of span, or pressures such as "4 bar"
	Cycles   int      `mapstructure:"cycles"`
	Exercise int      `mapstructure:"exercise"` // exercise cycles to full scale before the first series
	// ExerciseHold is the dwell at full scale during each exercise cycle;
	// TopHold the dwell at the top before the first descending series.
	ExerciseHold time.Duration `mapstructure:"exercise_hold"`
	TopHold      time.Duration `mapstructure:"top_hold"`
	Hold         time.Duration `mapstructure:"hold"`       // minimum wait after each pressure change before a capture
	Timeout      time.Duration `mapstructure:"timeout"`    // per point
	OnTimeout    string        `mapstructure:"on_timeout"` // skip | stop
	Zero         bool          `mapstructure:"zero"`       // zero readings at the start and end of each cycle
	// Compare: "set-by-reference" (set the pressure by the reference, read the
	// DUT) or "set-by-device" (bring the DUT's pointer onto the mark, read the reference).
	Compare  string `mapstructure:"compare"`
	Decision string `mapstructure:"decision"` // simple | guarded | four-state (ILAC-G8:2019)
	// EntryLimit: a dial entry further from the step's target than this
	// many times the permissible error asks for confirmation (default 5).
	EntryLimit float64 `mapstructure:"entry_limit"`
	// Coverage: "conventional" (k = 2) or "student-t" (k from the effective degrees of freedom).
	Coverage string `mapstructure:"coverage"`
	Settle   Settle `mapstructure:"settle"`

	PointsPa []float64 `mapstructure:"-"`

	pointIndex []int // the index in Points of each of PointsPa
}

// Settle is the rule that says an instrument holds a steady value.
type Settle struct {
	Window    time.Duration `mapstructure:"window"`
	MinCount  int           `mapstructure:"min_count"`
	MaxDrift  string        `mapstructure:"max_drift"`  // per minute, e.g. "0.002 bar"
	MaxSpread string        `mapstructure:"max_spread"` // standard deviation about the drift line, e.g. "0.002 bar"
	Band      string        `mapstructure:"band"`       // mean within this of the target: "1 %" of span or a pressure

	MaxDriftPaPerS float64 `mapstructure:"-"`
	MaxSpreadPa    float64 `mapstructure:"-"`
	BandPa         float64 `mapstructure:"-"`
}

// Safety limits, enforced by the engine on every reference reading.
type Safety struct {
	MaxPressure string `mapstructure:"max_pressure"` // never to be exceeded; vent and pause above it
	// Silence is how long the reference may give no good reading while the
	// source is driven before the guard vents; 0 means five reference polls.
	Silence time.Duration `mapstructure:"silence"`

	MaxPressurePa float64 `mapstructure:"-"`
	Set           bool    `mapstructure:"-"` // the limit is in force (the device range is valid)
}

// Head is the liquid-head correction between the reference's and the DUT's
// pressure reference levels: p_DUT = p_ref + (ρ_f − ρ_a)·g·(z_ref − z_DUT).
type Head struct {
	FluidDensity       float64 `mapstructure:"fluid_density"`       // kg/m³ of the medium in the line
	AmbientDensity     float64 `mapstructure:"ambient_density"`     // kg/m³ of the surrounding air
	Gravity            float64 `mapstructure:"gravity"`             // local g, m/s²
	ReferenceHeight    float64 `mapstructure:"reference_height"`    // m, height of the reference's reference level
	DeviceHeight       float64 `mapstructure:"device_height"`       // m, height of the DUT's reference level
	HeightUncertainty  float64 `mapstructure:"height_uncertainty"`  // m, half-width of a rectangular distribution
	DensityUncertainty float64 `mapstructure:"density_uncertainty"` // kg/m³, half-width
	// A gaseous medium: its molar mass (kg/mol, e.g. 0.0280134 for
	// nitrogen; 0 for a liquid) and temperature (°C). Its density then
	// follows each reading's absolute pressure.
	GasMolarMass   float64 `mapstructure:"gas_molar_mass"`
	GasTemperature float64 `mapstructure:"gas_temperature"`
}
