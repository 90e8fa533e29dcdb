package main

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"plateau/analysis"
	"plateau/analysis/balance"
	"plateau/analysis/recorded"
	"plateau/analysis/report"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/config/record"
	"plateau/drivers/clock"
)

func init() { register(newAnalyzeCmd) }

// analyzeFlags are the command-line overrides of the configuration.
type analyzeFlags struct {
	format, out, label, unit string
	asFound                  string // a table of the device before adjustment
	rule, class, grade       string
	lower, upper, resolution string
	refUncertainty, refFloor string
	refK                     float64
	// Uncertainty budget and coverage.
	coverage, refStability, refStabilityFloor, refResolution string
	tempCoefficient, hysteresisLimit                         string
	ambient, referenceTemperature                            string
	k                                                        float64
	interpolation                                            bool
	// How the run ended, for a table recorded elsewhere.
	state, reason string
	currents      currentFlags // a transmitter's table in mA (analyze_current.go)
}

var renderers = map[string]func(io.Writer, report.Info, analysis.Result) error{
	"text": report.Text, "json": report.JSON, "csv": report.CSV, "html": report.HTML,
}

func newAnalyzeCmd() *cobra.Command {
	var f analyzeFlags
	cmd := &cobra.Command{
		Use:   "analyze FILE.csv",
		Short: "Evaluate a recorded run from a CSV table and write a report",
		Long: `analyze reads a run written down elsewhere (columns cycle, direction, nominal,
reference, dut, unit; optional kind, time, note), evaluates error, hysteresis,
repeatability, linearity, uncertainty and the conformity decision, and writes
a report as text, JSON, CSV or a printable HTML page with charts.

The device, the reference and the decision rule come from the configuration
file; flags override single keys. Without a configuration file the flags
--upper, --resolution, --class or --grade, --ref-uncertainty or --ref-floor
and --rule are required (--lower defaults to 0).

There is no default decision rule: agree one with the customer before
measuring (ILAC-G8:09/2019) and give it with --rule or procedure.decision.
  simple      pass when every reading's |error| ≤ MPE
  guarded     pass when |error| < MPE − U
  four-state  pass, conditional pass, conditional fail, fail (guard band U)

The budget lists every term; a term without its data is printed as "not
evaluated". --coverage student-t takes k from Student's t at 95.45 % for the
effective degrees of freedom instead of the conventional k = 2.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			return runAnalyze(cmd, args[0], f)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&f.format, "format", "text", "report format: text, json, csv or html")
	fl.StringVar(&f.asFound, "as-found", "", "a table of the same device before adjustment: add the as-found / as-left comparison (text and json)")
	fl.StringVarP(&f.out, "output", "o", "", "write the report to this file instead of standard output")
	fl.StringVar(&f.label, "label", "", "run label printed on the report (default: the CSV file name)")
	fl.StringVar(&f.unit, "unit", "", "unit to show pressures in (default: the device's unit)")
	fl.StringVar(&f.rule, "rule", "", "decision rule: simple, guarded or four-state (overrides procedure.decision)")
	fl.StringVar(&f.class, "class", "", "EN 837-1 accuracy class, e.g. 0.6 (overrides device.class)")
	fl.StringVar(&f.grade, "grade", "", "ASME B40.100 accuracy grade, e.g. 2A (overrides device.grade)")
	fl.StringVar(&f.lower, "lower", "", `lower range value, e.g. "0 bar" (overrides device.lower; default 0)`)
	fl.StringVar(&f.upper, "upper", "", `upper range value, e.g. "16 bar" (overrides device.upper)`)
	fl.StringVar(&f.resolution, "resolution", "", `device resolution, e.g. "0.01 bar" (overrides device.resolution)`)
	fl.StringVar(&f.refUncertainty, "ref-uncertainty", "", `reference expanded uncertainty, % of reading, e.g. "0.01 %" (overrides reference.uncertainty)`)
	fl.StringVar(&f.refFloor, "ref-floor", "", `reference expanded uncertainty floor, e.g. "0.1 mbar" (overrides reference.floor)`)
	fl.Float64Var(&f.refK, "ref-k", 0, "coverage factor of the reference certificate (overrides reference.coverage; default 2)")
	fl.StringVar(&f.coverage, "coverage", "", `how k is chosen: "conventional" (k = 2, or --k) or "student-t" (effective degrees of freedom, 95.45 %)`)
	fl.Float64Var(&f.k, "k", 0, "coverage factor of the conventional method (default 2)")
	fl.StringVar(&f.refStability, "ref-stability", "", `reference drift since its calibration, half-width in % of reading, e.g. "0.005 %"`)
	fl.StringVar(&f.refStabilityFloor, "ref-stability-floor", "", `reference drift since its calibration, constant half-width, e.g. "0.05 mbar"`)
	fl.StringVar(&f.refResolution, "ref-resolution", "", `resolution of the reference, e.g. "0.001 bar"`)
	fl.StringVar(&f.tempCoefficient, "temp-coefficient", "", `device temperature effect in % of span per kelvin, e.g. "0.04 %"`)
	fl.StringVar(&f.referenceTemperature, "reference-temperature", "", "the device's reference temperature, °C (overrides device.reference_temperature; default 20)")
	fl.StringVar(&f.ambient, "ambient", "", "ambient temperature during the run, °C, e.g. 23.5 (with --temp-coefficient)")
	fl.StringVar(&f.hysteresisLimit, "hysteresis-limit", "", `hysteresis limit of the device's specification in % of span, e.g. "0.5 %" (EN 837-1 classes: the MPE)`)
	fl.BoolVar(&f.interpolation, "interpolation-in-budget", false, "add the correction curve's interpolation term to every point's budget")
	fl.StringVar(&f.state, "run-state", "", `how the recorded run ended when it did not finish, e.g. "stopped"`)
	fl.StringVar(&f.reason, "run-reason", "", "why the recorded run did not finish (with --run-state)")
	f.currents.register(fl)
	return cmd
}

func runAnalyze(cmd *cobra.Command, csvPath string, f analyzeFlags) error {
	render, ok := renderers[f.format]
	if !ok {
		return fmt.Errorf("--format %q: use text, json, csv or html", f.format)
	}
	points, err := readRecorded(csvPath)
	loadings := errors.Is(err, errLoadings)
	if err != nil && !loadings && !errors.Is(err, recorded.ErrNeedsLoop) {
		return err
	}
	cfg, err := config.Load(configPath)
	switch {
	case errors.Is(err, fs.ErrNotExist) && !cmd.Flags().Changed("config"):
		cfg = nil // no default file: the flags must say everything
	case err != nil:
		return err
	}
	var balanceRef *analysis.Reference
	if loadings {
		if points, balanceRef, err = readLoadings(csvPath, cfg); err != nil {
			return err
		}
	}

	var (
		dev  analysis.Device
		ref  = analysis.Reference{K: 2}
		opt  analysis.Options
		info report.Info
	)
	if cfg != nil {
		dev, ref, opt = record.AnalysisInputs(cfg)
		info = record.Info(cfg)
	} else if missing := f.missing(); len(missing) > 0 {
		return fmt.Errorf("no configuration file %s, so these flags are required: %s", configPath, strings.Join(missing, ", "))
	}
	if err := f.apply(&dev, &ref, &opt); err != nil {
		return err
	}
	if points, err = f.currents.read(csvPath, points, &dev, loadings); err != nil {
		return err
	}
	if balanceRef != nil {
		// The balance's budget is the reference's uncertainty, and the
		// head to the device is in its pressures already.
		ref.PercentOfReading, ref.FloorPa, ref.K = balanceRef.PercentOfReading, balanceRef.FloorPa, balanceRef.K
		ref.Head = analysis.HeadCorrection{}
	}
	if opt.Rule == "" {
		return errors.New("no decision rule: give --rule simple, guarded or four-state (or procedure.decision in the configuration); " +
			"ILAC-G8:09/2019 asks that the rule be agreed with the customer before measuring, so none is assumed")
	}
	u, err := f.displayUnit(cfg)
	if err != nil {
		return err
	}
	if dev.Unit == "" {
		dev.Unit = u.Symbol
	}
	opt.Unit = u
	info.Unit = u
	info.Run.State, info.Run.Reason = f.state, f.reason
	info.Run.Label = f.label
	if info.Run.Label == "" {
		info.Run.Label = filepath.Base(csvPath)
	}
	info.GeneratedAt = clock.Wall{}.Now()

	res, err := analysis.Analyze(points, dev, ref, opt)
	if err != nil {
		return fmt.Errorf("analyse %s: %w", csvPath, err)
	}
	// Render fully before writing so that a failure leaves no half report.
	var b bytes.Buffer
	if f.asFound != "" {
		if err := renderComparison(&b, f, info, res, dev, ref, opt); err != nil {
			return err
		}
	} else if err := render(&b, info, res); err != nil {
		return err
	}
	if f.out == "" {
		_, err = cmd.OutOrStdout().Write(b.Bytes())
		return err
	}
	if err := os.WriteFile(f.out, b.Bytes(), 0o644); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

// renderComparison evaluates the as-found table with the same device,
// reference and rule, and writes the as-left report with the change at each
// point (text) or both results with their comparison (json).
func renderComparison(w io.Writer, f analyzeFlags, info report.Info, asLeft analysis.Result,
	dev analysis.Device, ref analysis.Reference, opt analysis.Options) error {
	if f.format != "text" && f.format != "json" && f.format != "html" {
		return fmt.Errorf("--as-found works with --format text, json or html, not %q", f.format)
	}
	points, err := readRecorded(f.asFound)
	if errors.Is(err, errLoadings) {
		return fmt.Errorf("--as-found %s: give the as-found run as a comparison table; tables of loadings are evaluated as the main table only", f.asFound)
	}
	if err != nil {
		return err
	}
	asFound, err := analysis.Analyze(points, dev, ref, opt)
	if err != nil {
		return fmt.Errorf("analyse %s: %w", f.asFound, err)
	}
	c, err := analysis.Compare(asFound, asLeft)
	if err != nil {
		return err
	}
	switch f.format {
	case "json":
		return report.ComparisonJSON(w, info, asFound, asLeft, c)
	case "html":
		return report.ComparisonHTML(w, info, asLeft, c)
	}
	if err := report.Text(w, info, asLeft); err != nil {
		return err
	}
	return report.ComparisonText(w, info, c, dev.ResolutionPa)
}

// errLoadings says a table names its loadings instead of reference
// readings: it is read with the balance of the configuration (readLoadings).
var errLoadings = errors.New("a table of loadings")

func readRecorded(path string) ([]analysis.Point, error) {
	file, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("open recorded run: %w", err)
	}
	defer file.Close()
	if recorded.IsLoadings(file) {
		return nil, errLoadings
	}
	if _, err := file.Seek(0, io.SeekStart); err != nil {
		return nil, fmt.Errorf("read %s: %w", path, err)
	}
	points, err := recorded.Read(file)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return points, nil
}

// missing names the flags that must stand in for an absent configuration;
// the decision rule has a message of its own (runAnalyze).
func (f analyzeFlags) missing() []string {
	var m []string
	for _, c := range []struct {
		name string
		set  bool
	}{
		{"--upper", f.upper != ""},
		{"--resolution", f.resolution != ""},
		{"--class or --grade", f.class != "" || f.grade != ""},
		{"--ref-uncertainty or --ref-floor", f.refUncertainty != "" || f.refFloor != ""},
	} {
		if !c.set {
			m = append(m, c.name)
		}
	}
	return m
}

// apply lays the flags that were given over the configuration's values.
func (f analyzeFlags) apply(dev *analysis.Device, ref *analysis.Reference, opt *analysis.Options) error {
	if f.rule != "" {
		switch r := analysis.DecisionRule(f.rule); r {
		case analysis.RuleSimple, analysis.RuleGuarded, analysis.RuleFourState:
			opt.Rule = r
		default:
			return fmt.Errorf("--rule %q: use simple, guarded or four-state", f.rule)
		}
	}
	switch {
	case f.class != "" && f.grade != "":
		return errors.New("--class and --grade both given: a device has one accuracy specification")
	case f.class != "":
		c, err := strconv.ParseFloat(strings.TrimSpace(f.class), 64)
		if err != nil {
			return fmt.Errorf("--class %q: not a number such as 0.6", f.class)
		}
		dev.Accuracy = analysis.Accuracy{EN837Class: c}
	case f.grade != "":
		dev.Accuracy = analysis.Accuracy{ASMEGrade: strings.TrimSpace(f.grade)}
	}
	for _, p := range []struct {
		flag, value string
		dst         *float64
	}{
		{"--lower", f.lower, &dev.LowerPa}, {"--upper", f.upper, &dev.UpperPa},
		{"--resolution", f.resolution, &dev.ResolutionPa}, {"--ref-floor", f.refFloor, &ref.FloorPa},
	} {
		if p.value == "" {
			continue
		}
		pa, err := pressureFlag(p.flag, p.value)
		if err != nil {
			return err
		}
		*p.dst = pa
	}
	if f.refUncertainty != "" {
		q, err := units.ParseQuantity(f.refUncertainty)
		if err != nil || !q.Percent {
			return fmt.Errorf("--ref-uncertainty %q: give a percentage of reading such as \"0.01 %%\" (a constant part goes in --ref-floor)", f.refUncertainty)
		}
		ref.PercentOfReading = q.Value
	}
	if f.refK != 0 {
		ref.K = f.refK
	}
	return f.applyBudget(dev, ref, opt)
}

// applyBudget lays the uncertainty-budget and coverage flags over the
// configuration's values.
func (f analyzeFlags) applyBudget(dev *analysis.Device, ref *analysis.Reference, opt *analysis.Options) error {
	switch c := analysis.CoverageMethod(f.coverage); c {
	case "":
	case analysis.CoverageConventional, analysis.CoverageStudentT:
		opt.Coverage = c
	default:
		return fmt.Errorf("--coverage %q: use conventional or student-t", f.coverage)
	}
	if f.k != 0 {
		if opt.Coverage == analysis.CoverageStudentT {
			return errors.New("--k and --coverage student-t both given: Student's t chooses k itself")
		}
		opt.CoverageFactor = f.k
	}
	for _, p := range []struct {
		flag, value string
		dst         *float64
	}{
		{"--ref-stability", f.refStability, &ref.StabilityPercentOfReading},
		{"--temp-coefficient", f.tempCoefficient, &dev.TempCoefficient},
		{"--hysteresis-limit", f.hysteresisLimit, &dev.Accuracy.HysteresisPercentOfSpan},
	} {
		if p.value == "" {
			continue
		}
		q, err := units.ParseQuantity(p.value)
		if err != nil || !q.Percent {
			return fmt.Errorf("%s %q: give a percentage such as \"0.01 %%\"", p.flag, p.value)
		}
		*p.dst = q.Value
	}
	for _, p := range []struct {
		flag, value string
		dst         *float64
	}{{"--ref-stability-floor", f.refStabilityFloor, &ref.StabilityFloorPa}, {"--ref-resolution", f.refResolution, &ref.ResolutionPa}} {
		if p.value == "" {
			continue
		}
		pa, err := pressureFlag(p.flag, p.value)
		if err != nil {
			return err
		}
		*p.dst = pa
	}
	if f.tempCoefficient != "" && dev.ReferenceTemperatureC == 0 {
		dev.ReferenceTemperatureC = 20 // no configuration: the usual reference temperature
	}
	for _, t := range []struct {
		flag, value string
		dst         func(float64)
	}{
		{"--reference-temperature", f.referenceTemperature, func(v float64) { dev.ReferenceTemperatureC = v }},
		{"--ambient", f.ambient, func(v float64) { opt.AmbientC = &v }},
	} {
		if t.value == "" {
			continue
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(t.value), "°C")), 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%s %q: give a temperature in °C such as 23.5", t.flag, t.value)
		}
		t.dst(v)
	}
	if f.interpolation {
		opt.InterpolationInBudget = true
	}
	return nil
}

func pressureFlag(flag, value string) (float64, error) {
	q, err := units.ParseQuantity(value)
	if err != nil {
		return 0, fmt.Errorf("%s: %w", flag, err)
	}
	pa, err := q.Pa()
	if err != nil {
		return 0, fmt.Errorf("%s %q: give a pressure such as \"16 bar\": %w", flag, value, err)
	}
	return pa, nil
}

// displayUnit is --unit, else the device's configured unit, else the unit
// its upper range value is written in, else pascal.
func (f analyzeFlags) displayUnit(cfg *config.Config) (units.Unit, error) {
	if f.unit != "" {
		u, err := units.Lookup(f.unit)
		if err != nil {
			return u, fmt.Errorf("--unit: %w", err)
		}
		return u, nil
	}
	candidates := []string{f.upper}
	if cfg != nil {
		if u, err := units.Lookup(cfg.Device.Unit); err == nil {
			return u, nil
		}
		candidates = append(candidates, cfg.Device.Upper)
	}
	for _, s := range candidates {
		if q, err := units.ParseQuantity(s); err == nil && !q.Percent {
			return q.Unit, nil
		}
	}
	return units.Pascal, nil
}

// readLoadings evaluates a table of loadings with the pressure balance
// that is the configuration's reference, and gives the reference's
// uncertainty as the line that covers every loading's expanded uncertainty
// (k = 2); the head to the device is in the balance's pressures.
func readLoadings(path string, cfg *config.Config) ([]analysis.Point, *analysis.Reference, error) {
	if cfg == nil {
		return nil, nil, fmt.Errorf("%s is a table of loadings (it has a loading column): its reference pressures are worked out from the pressure balance of the configuration file, and there is none (%s)", path, configPath)
	}
	b := cfg.ReferenceBalance()
	if b == nil {
		return nil, nil, fmt.Errorf("%s is a table of loadings (it has a loading column), but the reference of %s is not a pressure balance: give it link.kind: balance and a balance: section", path, cfg.File)
	}
	file, err := os.Open(path)
	if err != nil {
		return nil, nil, fmt.Errorf("open recorded run: %w", err)
	}
	defer file.Close()
	run, err := recorded.ReadLoadings(file, recorded.Balance{
		Setup:              b.Setup(),
		Conditions:         cfg.BalanceConditions(b, cfg.Devices[0].HeightM),
		TemperatureEntered: b.PistonTemperature != nil,
	})
	if err != nil {
		return nil, nil, fmt.Errorf("%s: %w", path, err)
	}
	const k = 2
	ref := analysis.Reference{K: k}
	ref.PercentOfReading, ref.FloorPa = balance.Cover(run.Results, k)
	return run.Points, &ref, nil
}
