// Package record freezes what a run is evaluated with. When a run is
// created, the resolved device, reference, procedure and decision rule are
// taken from the configuration once and kept with the run; every report of
// that run is computed from this record, never from the file or the
// environment as they are later.
package record

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"

	"plateau/analysis"
	"plateau/analysis/report"
	"plateau/analysis/units"
	"plateau/config"
)

// Version is the layout of a stored record.
const Version = 1

// Run is the frozen record of one run.
type Run struct {
	Version   int                `json:"version"`
	Device    analysis.Device    `json:"device"`
	Reference analysis.Reference `json:"reference"`
	Options   analysis.Options   `json:"options"`
	// Info is the report's description of the bench (identities,
	// conditions, procedure); its display unit travels in Unit.
	Info report.Info `json:"info"`
	Unit string      `json:"unit"`
	// Procedure is the resolved procedure the run followed, so that its
	// planned points can be told from the captured ones.
	Procedure config.Procedure `json:"procedure"`
	// Devices describes each device under test when the run calibrates
	// several at once (their points carry the instrument's name); empty
	// for a run with one, which the fields above describe.
	Devices []DeviceRecord `json:"devices,omitempty"`
	// Ambient lists the ambient instruments whose means the points carry (ambient.go).
	Ambient []AmbientRecord `json:"ambient,omitempty"`
}

// DeviceRecord is the frozen description of one of several devices.
type DeviceRecord struct {
	Instrument string             `json:"instrument"`
	Device     analysis.Device    `json:"device"`
	Reference  analysis.Reference `json:"reference"` // with this device's head correction
	Info       report.Info        `json:"info"`
	Unit       string             `json:"unit"`
}

// ForDevice is the record of one device of the run, as a run of its own:
// instrument "" (or the only device) gives the run's own record.
func (r Run) ForDevice(instrument string) (Run, bool) {
	if len(r.Devices) == 0 {
		return r, instrument == ""
	}
	for _, d := range r.Devices {
		if d.Instrument == instrument {
			one := r
			one.Device, one.Reference, one.Info, one.Unit, one.Devices = d.Device, d.Reference, d.Info, d.Unit, nil
			return one, true
		}
	}
	return Run{}, false
}

// Of builds the record of a run from a loaded configuration.
func Of(cfg *config.Config) Run {
	dev, ref, opt := AnalysisInputs(cfg)
	run := Run{Version: Version, Device: dev, Reference: ref, Options: opt, Info: Info(cfg), Unit: cfg.Device.Unit,
		Procedure: cfg.Procedure, Ambient: ambientRecords(cfg)}
	if len(cfg.Devices) > 1 {
		for _, d := range cfg.Devices {
			dev, ref, _ := inputsFor(cfg, d.Device, d.HeightM)
			dev.Loop = loopOf(cfg, d.Instrument)
			info := infoFor(cfg, d.Device)
			run.Devices = append(run.Devices, DeviceRecord{Instrument: d.Instrument, Device: dev, Reference: ref, Info: info, Unit: d.Device.Unit})
		}
	}
	return run
}

// Encode is the stored form of the record.
func (r Run) Encode() []byte {
	b, err := json.Marshal(r)
	if err != nil {
		// Every field is plain data; a failure here is a programming error.
		panic(fmt.Sprintf("encode run record: %v", err))
	}
	return b
}

// Decode reads a stored record.
func Decode(b []byte) (Run, error) {
	var r Run
	if err := json.Unmarshal(b, &r); err != nil {
		return Run{}, fmt.Errorf("run record: %w", err)
	}
	if r.Version != Version {
		return Run{}, fmt.Errorf("run record version %d, this build reads %d", r.Version, Version)
	}
	return r, nil
}

// ReportInfo is the report description with its display unit resolved.
func (r Run) ReportInfo() report.Info {
	info := r.Info
	if u, err := units.Lookup(r.Unit); err == nil {
		info.Unit = u
	}
	return info
}

// Identity fingerprints the device under test and the reference standard,
// so that a resumed run can tell whether the bench still holds the same
// instruments.
func Identity(cfg *config.Config) string {
	r := cfg.Reference
	h := sha256.New()
	devices := []config.Device{cfg.Device}
	if len(cfg.Devices) > 1 {
		devices = devices[:0]
		for _, d := range cfg.Devices {
			devices = append(devices, d.Device)
		}
	}
	for _, d := range devices {
		fmt.Fprintf(h, "device|%s|%s|%s|%s|%s|%s|%s\n", d.ID, d.Manufacturer, d.Model, d.Serial, d.Lower, d.Upper, d.Unit)
	}
	fmt.Fprintf(h, "reference|%s|%s|%s|%s\n", r.ID, r.Model, r.Serial, r.Certificate)
	return hex.EncodeToString(h.Sum(nil)[:12])
}

// Info describes the bench of a configuration for a report.
func Info(cfg *config.Config) report.Info { return infoFor(cfg, cfg.Device) }

func infoFor(cfg *config.Config, d config.Device) report.Info {
	r := cfg.Reference
	info := report.Info{
		Device:    report.DeviceIdentity{ID: d.ID, Manufacturer: d.Manufacturer, Model: d.Model, Serial: d.Serial},
		Reference: report.ReferenceIdentity{ID: r.ID, Model: r.Model, Serial: r.Serial, Certificate: r.Certificate, Expires: r.ExpiresAt},
		Procedure: report.Procedure{PointsPa: cfg.Procedure.PointsPa, Cycles: cfg.Procedure.Cycles, Method: cfg.Procedure.Compare},
		Certificate: report.Certificate{Number: cfg.Certificate.Number, Customer: cfg.Certificate.Customer,
			Operator: cfg.Certificate.Operator, Date: cfg.Certificate.DateAt},
	}
	if cfg.ReferenceBalance() != nil {
		info.Reference.Kind = report.KindBalance
	}
	if d.Medium != "" {
		info.Conditions = append(info.Conditions, report.Condition{Name: "Medium", Value: d.Medium})
	}
	if d.Oxygen {
		info.Conditions = append(info.Conditions, report.Condition{Name: "Oxygen service", Value: "yes: kept free of oil and grease"})
	}
	return info
}

// AnalysisInputs turns the configuration into the analysis's descriptions of
// the device, the reference and the evaluation options.
func AnalysisInputs(cfg *config.Config) (analysis.Device, analysis.Reference, analysis.Options) {
	dev, ref, opt := inputsFor(cfg, cfg.Device, cfg.Head.DeviceHeight)
	dev.Loop = loopOf(cfg, "")
	return dev, ref, opt
}

// inputsFor is AnalysisInputs for one device under test mounted at height.
func inputsFor(cfg *config.Config, d config.Device, height float64) (analysis.Device, analysis.Reference, analysis.Options) {
	dev := analysis.Device{LowerPa: d.LowerPa, UpperPa: d.UpperPa, ResolutionPa: d.ResolutionPa, Unit: d.Unit,
		TempCoefficient: d.TemperatureCoefficient, ReferenceTemperatureC: d.ReferenceTemperature}
	switch {
	case d.Class != "":
		fmt.Sscan(d.Class, &dev.Accuracy.EN837Class)
	case d.Grade != "":
		dev.Accuracy.ASMEGrade = d.Grade
	default:
		dev.Accuracy.PercentOfSpan = d.Limit.SpanPct
		dev.Accuracy.PercentOfReading = d.Limit.ReadingPct
		dev.Accuracy.FloorPa = d.Limit.FloorPa
	}
	dev.Accuracy.HysteresisPercentOfSpan = d.HysteresisLimit
	h := cfg.Head
	ref := analysis.Reference{
		PercentOfReading: cfg.Reference.UncertaintyPct,
		FloorPa:          cfg.Reference.FloorPa,
		K:                cfg.Reference.Coverage,

		StabilityPercentOfReading: cfg.Reference.Stability,
		StabilityFloorPa:          cfg.Reference.StabilityFloorPa,
		ResolutionPa:              cfg.Reference.ResolutionPa,
	}
	withBalance(cfg, &ref)
	if h.ReferenceHeight != height || h.HeightUncertainty != 0 || h.DensityUncertainty != 0 {
		ref.Head = analysis.HeadCorrection{
			FluidDensity: h.FluidDensity, AirDensity: h.AmbientDensity, Gravity: h.Gravity,
			ZRef: h.ReferenceHeight, ZDUT: height,
			HeightHalfWidth: h.HeightUncertainty, DensityHalfWidth: h.DensityUncertainty,
		}
		if h.GasMolarMass > 0 {
			ref.Head.Gas = &analysis.Gas{MolarMass: h.GasMolarMass, TemperatureK: h.GasTemperature + 273.15}
		}
	}
	withModes(cfg, d, &dev, &ref)
	opt := analysis.Options{Rule: analysis.DecisionRule(cfg.Procedure.Decision), Coverage: analysis.CoverageMethod(cfg.Procedure.Coverage)}
	return dev, ref, opt
}
