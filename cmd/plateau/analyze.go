package main

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"plateau/analysis"
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
and --rule are required (--lower defaults to 0).`,
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
	return cmd
}

func runAnalyze(cmd *cobra.Command, csvPath string, f analyzeFlags) error {
	render, ok := renderers[f.format]
	if !ok {
		return fmt.Errorf("--format %q: use text, json, csv or html", f.format)
	}
	points, err := readRecorded(csvPath)
	if err != nil {
		return err
	}
	cfg, err := config.Load(configPath)
	switch {
	case errors.Is(err, fs.ErrNotExist) && !cmd.Flags().Changed("config"):
		cfg = nil // no default file: the flags must say everything
	case err != nil:
		return err
	}

	var (
		dev  analysis.Device
		ref  = analysis.Reference{K: 2}
		opt  analysis.Options
		info report.Info
	)
	if cfg != nil {
		dev, ref, opt = record.AnalysisInputs(cfg)
		info = infoFromConfig(cfg)
	} else if missing := f.missing(); len(missing) > 0 {
		return fmt.Errorf("no configuration file %s, so these flags are required: %s", configPath, strings.Join(missing, ", "))
	}
	if err := f.apply(&dev, &ref, &opt); err != nil {
		return err
	}
	u, err := f.displayUnit(cfg)
	if err != nil {
		return err
	}
	if dev.Unit == "" {
		dev.Unit = u.Symbol
	}
	info.Unit = u
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
	if f.format != "text" && f.format != "json" {
		return fmt.Errorf("--as-found works with --format text or json, not %q", f.format)
	}
	points, err := readRecorded(f.asFound)
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
	if f.format == "json" {
		return report.ComparisonJSON(w, info, asFound, asLeft, c)
	}
	if err := report.Text(w, info, asLeft); err != nil {
		return err
	}
	return report.ComparisonText(w, info, c, dev.ResolutionPa)
}

func readRecorded(path string) ([]analysis.Point, error) {
	file, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("open recorded run: %w", err)
	}
	defer file.Close()
	points, err := recorded.Read(file)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return points, nil
}

// missing names the flags that must stand in for an absent configuration.
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
		{"--rule", f.rule != ""},
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

func infoFromConfig(cfg *config.Config) report.Info {
	d, r := cfg.Device, cfg.Reference
	info := report.Info{
		Device:    report.DeviceIdentity{ID: d.ID, Manufacturer: d.Manufacturer, Model: d.Model, Serial: d.Serial},
		Reference: report.ReferenceIdentity{ID: r.ID, Model: r.Model, Serial: r.Serial, Certificate: r.Certificate, Expires: r.ExpiresAt},
		Procedure: report.Procedure{PointsPa: cfg.Procedure.PointsPa, Cycles: cfg.Procedure.Cycles, Method: cfg.Procedure.Compare},
	}
	if d.Medium != "" {
		info.Conditions = append(info.Conditions, report.Condition{Name: "Medium", Value: d.Medium})
	}
	if d.Oxygen {
		info.Conditions = append(info.Conditions, report.Condition{Name: "Oxygen service", Value: "yes: kept free of oil and grease"})
	}
	return info
}
