package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"html"
	"io"
	"net/url"
	"os"
	"path/filepath"
	"strings"

	"plateau/acquire/api"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/readout"
	"plateau/analysis/report"
	"plateau/config"
	"plateau/config/record"
)

// runResult is a run's evaluation with what a report needs besides it: for
// a run of several devices, one device's.
type runResult struct {
	Result analysis.Result
	Points []analysis.Point
	Info   report.Info
	Device string // the device's instrument name; "" when the run has one device
	// Empty: this device of a run of several has no captured point; Result
	// is then zero and Why says so.
	Empty bool
	Why   string
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
	all, err := evaluateAll(st, id)
	if err != nil {
		return nil, err
	}
	if len(all) > 1 {
		return nil, fmt.Errorf("run %s calibrated %d devices: choose one (--device) or report them all", id, len(all))
	}
	return all[0], nil
}

// evaluateAll analyses every device of a run, each with its own frozen
// description, against the shared reference.
func evaluateAll(st runStore, id store.RunID) ([]*runResult, error) {
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
	names := []string{""}
	if len(rec.Devices) > 0 {
		names = names[:0]
		for _, d := range rec.Devices {
			names = append(names, d.Instrument)
		}
	}
	var out []*runResult
	for _, name := range names {
		one, _ := rec.ForDevice(name)
		var mine []analysis.Point
		for _, p := range pts {
			if p.Device == name {
				mine = append(mine, p)
			}
		}
		r, err := evaluateOne(st, run, one, mine, name)
		if err != nil && len(names) > 1 && len(mine) == 0 {
			// One device without points does not hide the others.
			out = append(out, &runResult{Device: name, Info: one.ReportInfo(), Empty: true, Why: err.Error()})
			continue
		}
		if err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, nil
}

func evaluateOne(st runStore, run store.Run, rec record.Run, pts []analysis.Point, device string) (*runResult, error) {
	id := run.ID
	what := id.String()
	if device != "" {
		what += " device " + device
	}
	if len(pts) == 0 {
		return nil, fmt.Errorf("run %s has no captured points yet (%s%s): nothing to evaluate", what, run.State, prefixed(": ", run.Reason))
	}
	res, err := analysis.Analyze(pts, rec.Device, rec.Reference, rec.Options)
	if err != nil {
		return nil, fmt.Errorf("analyse %s: %w", what, err)
	}
	info := rec.ReportInfo()
	info.Run = report.RunIdentity{ID: id.String(), Label: run.Label, State: string(run.State), Reason: run.Reason}
	if run.State != store.StateRunning && run.State != store.StatePaused {
		info.Run.Missed = missedPoints(st, id, rec, pts, device)
	}
	info.GeneratedAt = run.Updated
	return &runResult{Result: res, Points: pts, Info: info, Device: device}, nil
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
func missedPoints(st runStore, id store.RunID, rec record.Run, pts []analysis.Point, device string) []report.MissedPoint {
	if procedure.Mode(rec.Procedure.Mode) != procedure.Planned {
		return nil
	}
	steps := procedure.Plan(rec.Procedure, rec.Device.LowerPa)
	have := map[string]bool{}
	for _, p := range pts {
		have[procedure.PointKey(p)] = true
	}
	why := missedReasons(st, id, device)
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
func missedReasons(st runStore, id store.RunID, device string) map[int]string {
	out := map[int]string{}
	var since uint64
	for {
		evs, err := st.Events(since, 1000)
		if err != nil || len(evs) == 0 {
			return out
		}
		for _, ev := range evs {
			since = ev.ID
			if ev.Run != id || ev.Type != "missed" || ev.Instrument != device {
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

// printResult writes the result table for the terminal: for a run of
// several devices, a summary of every device first, then each one's table.
func printResult(w io.Writer, rs ...*runResult) error {
	if len(rs) == 1 {
		return report.Text(w, rs[0].Info, rs[0].Result)
	}
	printSummary(w, rs)
	for _, r := range rs {
		fmt.Fprintf(w, "\n════ device %s ════\n", r.Device)
		if r.Empty {
			fmt.Fprintln(w, r.Why)
			continue
		}
		if err := report.Text(w, r.Info, r.Result); err != nil {
			return err
		}
	}
	return nil
}

// printSummary is the table of every device of a run.
func printSummary(w io.Writer, rs []*runResult) {
	fmt.Fprintf(w, "DEVICES UNDER TEST (run %s)\n", rs[0].Info.Run.ID)
	fmt.Fprintf(w, "  %-12s %-16s %-14s %18s  %s\n", "instrument", "id", "serial", "largest |error|", "verdict")
	for _, r := range rs {
		largest, verdict := summaryOf(r)
		fmt.Fprintf(w, "  %-12s %-16s %-14s %18s  %s\n", r.Device, r.Info.Device.ID, r.Info.Device.Serial, largest, verdict)
	}
}

// summaryOf is a device's largest error and verdict for the summary.
func summaryOf(r *runResult) (largest, verdict string) {
	if r.Empty {
		return "—", "no points captured"
	}
	return readout.MeanWithUnit(r.Result.MaxAbsErrorPa, r.Info.Unit, r.Result.Device.ResolutionPa), strings.ToUpper(string(r.Result.Decision))
}

// writeHTMLReport renders a run's report to path, whole or not at all. For
// a run of several devices path is the summary, which links one report
// per device written beside it (path's name with the device's appended).
func writeHTMLReport(path string, rs ...*runResult) error {
	if len(rs) == 1 {
		return writeOneHTML(path, rs[0])
	}
	var b bytes.Buffer
	ext := filepath.Ext(path)
	base := strings.TrimSuffix(path, ext)
	links := make([]string, len(rs))
	for i, r := range rs {
		if r.Empty {
			continue
		}
		one := base + "-" + r.Device + ext
		if err := writeOneHTML(one, r); err != nil {
			return err
		}
		links[i] = filepath.Base(one)
	}
	htmlSummary(&b, rs, links)
	if err := os.WriteFile(path, b.Bytes(), 0o644); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

func writeOneHTML(path string, r *runResult) error {
	var buf bytes.Buffer
	if err := report.HTML(&buf, r.Info, r.Result); err != nil {
		return fmt.Errorf("report for %s: %w", r.Info.Run.ID, err)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

// htmlSummary is the page that opens the report of a run of several devices.
func htmlSummary(w io.Writer, rs []*runResult, links []string) {
	esc := html.EscapeString
	fmt.Fprintf(w, "<!doctype html><html><head><meta charset=\"utf-8\"><title>Run %s: devices under test</title>", esc(rs[0].Info.Run.ID))
	fmt.Fprint(w, "<style>body{font-family:sans-serif;margin:2em}table{border-collapse:collapse}td,th{border:1px solid #999;padding:.3em .6em;text-align:left}</style></head><body>")
	fmt.Fprintf(w, "<h1>Run %s: %d devices under test</h1><table><tr><th>instrument</th><th>id</th><th>serial</th><th>largest |error|</th><th>verdict</th><th>report</th></tr>",
		esc(rs[0].Info.Run.ID), len(rs))
	for i, r := range rs {
		largest, verdict := summaryOf(r)
		link := "—"
		if links[i] != "" {
			link = fmt.Sprintf("<a href=\"%s\">%s</a>", esc(links[i]), esc(r.Device))
		}
		fmt.Fprintf(w, "<tr><td>%s</td><td>%s</td><td>%s</td><td>%s</td><td>%s</td><td>%s</td></tr>",
			esc(r.Device), esc(r.Info.Device.ID), esc(r.Info.Device.Serial), esc(largest), esc(verdict), link)
	}
	fmt.Fprint(w, "</table></body></html>")
}

func init() { newReportRenderer = daemonReport }

// daemonReport renders reports for the API from the daemon's store, each
// from the record its run was frozen with. For a run of several devices,
// device selects one; without it the text and HTML forms give the summary
// (HTML links each device's report) and JSON gives every device's result.
func daemonReport(st *store.Store, _ *config.Config) api.RenderFunc {
	return func(format string, w io.Writer, runID, device string) error {
		id, err := store.ParseRunID(runID)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrInvalid, err)
		}
		if _, err := st.Run(id); err != nil {
			return fmt.Errorf("%w: %v", api.ErrNotFound, err)
		}
		all, err := evaluateAll(st, id)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrConflict, err)
		}
		if device != "" {
			var pick []*runResult
			for _, r := range all {
				if r.Device == device {
					pick = append(pick, r)
				}
			}
			if len(pick) == 0 {
				return fmt.Errorf("%w: run %s has no device %q", api.ErrNotFound, id, device)
			}
			all = pick
		}
		if len(all) > 1 {
			switch format {
			case "text":
				return printResult(w, all...)
			case "html":
				links := make([]string, len(all))
				for i, r := range all {
					if !r.Empty {
						links[i] = fmt.Sprintf("report?format=html&device=%s", url.QueryEscape(r.Device))
					}
				}
				htmlSummary(w, all, links)
				return nil
			case "json":
				w.Write([]byte("["))
				first := true
				for _, r := range all {
					if r.Empty {
						continue
					}
					if !first {
						w.Write([]byte(","))
					}
					first = false
					if err := report.JSON(w, r.Info, r.Result); err != nil {
						return err
					}
				}
				_, err := w.Write([]byte("]"))
				return err
			}
			return fmt.Errorf("%w: run %s calibrated %d devices: choose one with device=NAME for %s", api.ErrInvalid, id, len(all), format)
		}
		res := all[0]
		if res.Empty {
			return fmt.Errorf("%w: %s", api.ErrConflict, res.Why)
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
