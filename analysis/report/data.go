package report

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"strconv"

	"plateau/analysis"
	"plateau/analysis/units"
)

// infoJSON adds the display unit's symbol to Info; pressures stay in Pa.
type infoJSON struct {
	Info
	DisplayUnit string `json:"display_unit"`
}

// JSON writes {"device": …, "info": …, "result": …}. The result is encoded
// by its own tags, which are the versioned schema (analysis.SchemaVersion);
// device is the name the device column of the CSV carries.
func JSON(w io.Writer, info Info, res analysis.Result) error {
	return encodeJSON(w, toJSON(DeviceReport{Info: info, Result: res}))
}

func encodeJSON(w io.Writer, doc any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	if err := enc.Encode(doc); err != nil {
		return fmt.Errorf("encode report JSON: %w", err)
	}
	return nil
}

// CSV writes one row per point after a header row whose pressure columns
// carry the display unit, e.g. "error_bar". The first column names the
// device (its instrument, else its identity number).
func CSV(w io.Writer, info Info, res analysis.Result) error {
	cw := newCSVWriter(w, info.unit())
	cw.rows(info.DeviceName(), res)
	return cw.close()
}

// csvWriter writes the point table; the first error sticks and is
// returned by close.
type csvWriter struct {
	cw  *csv.Writer
	u   units.Unit
	err error
}

func newCSVWriter(w io.Writer, u units.Unit) *csvWriter {
	c := &csvWriter{cw: csv.NewWriter(w), u: u}
	pressure := []string{"nominal", "reference_mean", "dut_mean", "error", "correction", "hysteresis", "repeatability",
		"combined_standard_uncertainty", "expanded_uncertainty", "error_span", "mpe", "acceptance_limit", "up_worst_error", "down_worst_error"}
	header := []string{"device", "point"}
	for _, p := range pressure {
		header = append(header, p+"_"+u.Symbol)
	}
	header = append(header, "error_percent_span", "coverage_factor", "effective_degrees_of_freedom",
		"mpe_to_reference_uncertainty", "mpe_to_expanded_uncertainty", "up_decision", "down_decision", "hysteresis_decision", "decision",
		// A transmitter's output at the point (means); empty for other devices.
		"ideal_current_mA", "measured_current_mA", "output_error_mA", "output_error_percent_span", "output_flag")
	c.write(header)
	return c
}

func (c *csvWriter) write(row []string) {
	if c.err == nil {
		c.err = c.cw.Write(row)
	}
}

// rows writes one row per point of res for device.
func (c *csvWriter) rows(device string, res analysis.Result) {
	u := c.u
	// 12 significant digits: beyond any pressure instrument, and free of
	// binary noise such as 0.30000000000000004 after unit conversion.
	num := func(v float64) string { return strconv.FormatFloat(v, 'g', 12, 64) }
	// A figure that could not be computed is an empty cell, never a 0.
	opt := func(v *float64) string {
		if v == nil {
			return ""
		}
		return num(*v)
	}
	pressureIf := func(pa float64, ok bool) string {
		if !ok {
			return ""
		}
		return num(u.FromPa(pa))
	}
	dir := func(d *analysis.DirectionResult) (string, string) {
		if d == nil {
			return "", ""
		}
		return num(u.FromPa(d.WorstErrorPa)), string(d.Decision)
	}
	output := map[int]analysis.OutputPoint{}
	if res.Output != nil {
		for _, o := range res.Output.Points {
			output[o.Index] = o
		}
	}
	for _, p := range res.Points {
		row := []string{device, strconv.Itoa(p.Index + 1)}
		for _, pa := range []float64{p.NominalPa, p.ReferenceMeanPa, p.DUTMeanPa, p.MeanErrorPa, p.CorrectionPa} {
			row = append(row, num(u.FromPa(pa)))
		}
		row = append(row, pressureIf(p.HysteresisPa, p.HysteresisEvaluated), pressureIf(p.RepeatabilityPa, p.RepeatabilityEvaluated))
		for _, pa := range []float64{p.CombinedUncertaintyPa, p.ExpandedUncertaintyPa, p.ErrorSpanPa, p.MPEPa, p.AcceptanceLimitPa} {
			row = append(row, num(u.FromPa(pa)))
		}
		upE, upD := dir(p.UpResult)
		downE, downD := dir(p.DownResult)
		row = append(row, upE, downE, num(p.ErrorPercentSpan), num(p.CoverageFactor), opt(p.EffectiveDOF),
			opt(p.ReferenceRatio), opt(p.ExpandedRatio), upD, downD, string(p.HysteresisDecision), string(p.Decision))
		if o, ok := output[p.Index]; ok {
			row = append(row, num(o.IdealMA), num(o.MeasuredMA), num(o.ErrorMA), num(o.ErrorPercentSpan), flagText(o.Signal))
		} else {
			row = append(row, "", "", "", "", "")
		}
		c.write(row)
	}
}

func (c *csvWriter) close() error {
	if c.err == nil {
		c.cw.Flush()
		c.err = c.cw.Error()
	}
	if c.err != nil {
		return fmt.Errorf("write CSV: %w", c.err)
	}
	return nil
}
