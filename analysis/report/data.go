package report

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"strconv"

	"plateau/analysis"
)

// infoJSON adds the display unit's symbol to Info; pressures stay in Pa.
type infoJSON struct {
	Info
	DisplayUnit string `json:"display_unit"`
}

// JSON writes {"info": …, "result": …}. The result is encoded by its own
// tags, which are the versioned schema (analysis.SchemaVersion).
func JSON(w io.Writer, info Info, res analysis.Result) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	doc := struct {
		Info   infoJSON        `json:"info"`
		Result analysis.Result `json:"result"`
	}{infoJSON{info, info.unit().Symbol}, res}
	if err := enc.Encode(doc); err != nil {
		return fmt.Errorf("encode report JSON: %w", err)
	}
	return nil
}

// CSV writes one row per point after a header row whose pressure columns
// carry the display unit, e.g. "error_bar".
func CSV(w io.Writer, info Info, res analysis.Result) error {
	u := info.unit()
	cw := csv.NewWriter(w)
	pressure := []string{"nominal", "reference_mean", "dut_mean", "error", "correction", "hysteresis", "repeatability",
		"combined_standard_uncertainty", "expanded_uncertainty", "error_span", "mpe", "acceptance_limit", "up_worst_error", "down_worst_error"}
	header := []string{"point"}
	for _, c := range pressure {
		header = append(header, c+"_"+u.Symbol)
	}
	header = append(header, "error_percent_span", "coverage_factor", "effective_degrees_of_freedom",
		"mpe_to_reference_uncertainty", "mpe_to_expanded_uncertainty", "up_decision", "down_decision", "hysteresis_decision", "decision")
	if err := cw.Write(header); err != nil {
		return fmt.Errorf("write CSV: %w", err)
	}
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
	for _, p := range res.Points {
		row := []string{strconv.Itoa(p.Index + 1)}
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
		if err := cw.Write(row); err != nil {
			return fmt.Errorf("write CSV: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("write CSV: %w", err)
	}
	return nil
}
