package main

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/report"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/config/record"
)

// runResult is a run's evaluation with what a report needs besides it.
type runResult struct {
	Result analysis.Result
	Points []analysis.Point
	Label  string
	At     time.Time // when the run was last updated
}

// evaluate analyses the captured points of a run with the configuration's
// device, reference and decision rule.
func evaluate(st *store.Store, cfg *config.Config, id store.RunID) (*runResult, error) {
	pts, err := st.Points(id)
	if err != nil {
		return nil, fmt.Errorf("read points of %s: %w", id, err)
	}
	dev, ref, opt := record.AnalysisInputs(cfg)
	res, err := analysis.Analyze(pts, dev, ref, opt)
	if err != nil {
		return nil, fmt.Errorf("analyse %s: %w", id, err)
	}
	run, err := st.Run(id)
	if err != nil {
		return nil, fmt.Errorf("read run %s: %w", id, err)
	}
	return &runResult{Result: res, Points: pts, Label: run.Label, At: run.Updated}, nil
}

// runInfo describes a run of this configuration for a report.
func runInfo(cfg *config.Config, id store.RunID, label string, at time.Time) report.Info {
	info := infoFromConfig(cfg)
	info.Run = report.RunIdentity{ID: id.String(), Label: label}
	info.GeneratedAt = at
	if u, err := units.Lookup(cfg.Device.Unit); err == nil {
		info.Unit = u
	}
	return info
}

// printResult writes the result table for the terminal.
func printResult(w io.Writer, cfg *config.Config, id store.RunID, r *runResult) error {
	return report.Text(w, runInfo(cfg, id, r.Label, r.At), r.Result)
}

// writeHTMLReport renders a run's report to path, whole or not at all.
func writeHTMLReport(path string, cfg *config.Config, id store.RunID, r *runResult) error {
	var buf bytes.Buffer
	if err := report.HTML(&buf, runInfo(cfg, id, r.Label, r.At), r.Result); err != nil {
		return fmt.Errorf("report for %s: %w", id, err)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

func init() { newReportRenderer = daemonReport }

// daemonReport renders reports for the API from the daemon's store, with the
// configuration the run was made with when the store kept it.
func daemonReport(st *store.Store, cfg *config.Config) api.RenderFunc {
	return func(format string, w io.Writer, runID string) error {
		id, err := store.ParseRunID(runID)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrInvalid, err)
		}
		run, err := st.Run(id)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrNotFound, err)
		}
		used := cfg
		if len(run.Config) > 0 {
			if c, err := config.Parse(run.Config, "run "+id.String()); err == nil {
				used = c
			}
		}
		res, err := evaluate(st, used, id)
		if err != nil {
			return err
		}
		info := runInfo(used, id, res.Label, res.At)
		switch format {
		case "html":
			return report.HTML(w, info, res.Result)
		case "csv":
			return report.CSV(w, info, res.Result)
		case "json":
			return report.JSON(w, info, res.Result)
		}
		return fmt.Errorf("%w: format %q: use html, csv or json", api.ErrInvalid, format)
	}
}
