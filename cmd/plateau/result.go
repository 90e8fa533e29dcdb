package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"

	"plateau/acquire/api"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/report"
	"plateau/config"
	"plateau/config/record"
)

// runResult is a run's evaluation with what a report needs besides it.
type runResult struct {
	Result analysis.Result
	Points []analysis.Point
	Info   report.Info
}

// runStore is what evaluating a run reads.
type runStore interface {
	Run(id store.RunID) (store.Run, error)
	Points(run store.RunID) ([]analysis.Point, error)
	Events(since uint64, limit int) ([]store.Event, error)
}

// evaluate analyses the captured points of a run with the record the run
// was frozen with when it was created: never with today's configuration
// file or environment. A run stored before runs kept a record is evaluated
// with the configuration text it kept.
func evaluate(st runStore, id store.RunID) (*runResult, error) {
	run, err := st.Run(id)
	if err != nil {
		return nil, fmt.Errorf("read run %s: %w", id, err)
	}
	rec, err := recordOf(run)
	if err != nil {
		return nil, err
	}
	pts, err := st.Points(id)
	if err != nil {
		return nil, fmt.Errorf("read points of %s: %w", id, err)
	}
	if len(pts) == 0 {
		return nil, fmt.Errorf("run %s has no captured points yet (%s%s): nothing to evaluate", id, run.State, prefixed(": ", run.Reason))
	}
	res, err := analysis.Analyze(pts, rec.Device, rec.Reference, rec.Options)
	if err != nil {
		return nil, fmt.Errorf("analyse %s: %w", id, err)
	}
	info := rec.ReportInfo()
	info.Run = report.RunIdentity{ID: id.String(), Label: run.Label, State: string(run.State), Reason: run.Reason}
	if run.State != store.StateRunning && run.State != store.StatePaused {
		info.Run.Missed = missedPoints(st, id, rec, pts)
	}
	info.GeneratedAt = run.Updated
	return &runResult{Result: res, Points: pts, Info: info}, nil
}

func prefixed(p, s string) string {
	if s == "" {
		return ""
	}
	return p + s
}

// recordOf is the frozen record of a run.
func recordOf(run store.Run) (record.Run, error) {
	if len(run.Record) > 0 {
		rec, err := record.Decode(run.Record)
		if err != nil {
			return record.Run{}, fmt.Errorf("run %s: %w", run.ID, err)
		}
		return rec, nil
	}
	if len(run.Config) == 0 {
		return record.Run{}, fmt.Errorf("run %s keeps neither a record nor its configuration: it cannot be evaluated", run.ID)
	}
	cfg, err := config.Parse(run.Config, "configuration kept with run "+run.ID.String())
	if err != nil {
		return record.Run{}, fmt.Errorf("run %s: %w", run.ID, err)
	}
	return record.Of(cfg), nil
}

// missedPoints lists the planned readings a run that has ended did not
// capture, with the reason its "missed" event gave.
func missedPoints(st runStore, id store.RunID, rec record.Run, pts []analysis.Point) []report.MissedPoint {
	if procedure.Mode(rec.Procedure.Mode) != procedure.Planned {
		return nil
	}
	steps := procedure.Plan(rec.Procedure, rec.Device.LowerPa)
	have := map[string]bool{}
	for _, p := range pts {
		have[procedure.PointKey(p)] = true
	}
	why := missedReasons(st, id)
	var out []report.MissedPoint
	for i, s := range steps {
		if s.Kind != procedure.StepCapture || have[s.Key()] {
			continue
		}
		out = append(out, report.MissedPoint{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index,
			NominalPa: s.TargetPa, Reason: why[i]})
	}
	return out
}

// missedReasons maps a step number to the reason its "missed" event gave.
func missedReasons(st runStore, id store.RunID) map[int]string {
	out := map[int]string{}
	var since uint64
	for {
		evs, err := st.Events(since, 1000)
		if err != nil || len(evs) == 0 {
			return out
		}
		for _, ev := range evs {
			since = ev.ID
			if ev.Run != id || ev.Type != "missed" {
				continue
			}
			var d struct {
				Step int `json:"step"`
			}
			if json.Unmarshal(ev.Data, &d) == nil {
				msg := ev.Message
				if i := strings.Index(msg, ": "); i >= 0 {
					msg = msg[i+2:]
				}
				out[d.Step] = msg
			}
		}
	}
}

// printResult writes the result table for the terminal.
func printResult(w io.Writer, r *runResult) error {
	return report.Text(w, r.Info, r.Result)
}

// writeHTMLReport renders a run's report to path, whole or not at all.
func writeHTMLReport(path string, r *runResult) error {
	var buf bytes.Buffer
	if err := report.HTML(&buf, r.Info, r.Result); err != nil {
		return fmt.Errorf("report for %s: %w", r.Info.Run.ID, err)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

func init() { newReportRenderer = daemonReport }

// daemonReport renders reports for the API from the daemon's store, each
// from the record its run was frozen with.
func daemonReport(st *store.Store, _ *config.Config) api.RenderFunc {
	return func(format string, w io.Writer, runID string) error {
		id, err := store.ParseRunID(runID)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrInvalid, err)
		}
		if _, err := st.Run(id); err != nil {
			return fmt.Errorf("%w: %v", api.ErrNotFound, err)
		}
		res, err := evaluate(st, id)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrConflict, err)
		}
		switch format {
		case "html":
			return report.HTML(w, res.Info, res.Result)
		case "csv":
			return report.CSV(w, res.Info, res.Result)
		case "json":
			return report.JSON(w, res.Info, res.Result)
		case "text":
			return report.Text(w, res.Info, res.Result)
		}
		return fmt.Errorf("%w: format %q: use html, csv, json or text", api.ErrInvalid, format)
	}
}
