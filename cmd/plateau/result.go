package main

import (
	"encoding/json"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/report"
	"plateau/config"
	"plateau/config/record"
)

// runResult is a run's evaluation: one report per device under test, in
// the order of the configuration.
type runResult struct {
	ID      store.RunID
	Devices []report.DeviceReport
}

// runStore is what evaluating a run reads.
type runStore interface {
	Run(id store.RunID) (store.Run, error)
	Points(run store.RunID) ([]analysis.Point, error)
	Events(since uint64, limit int) ([]store.Event, error)
}

// evaluateAll analyses the captured points of every device of a run, each
// with the description the run was frozen with when it was created (never
// with today's configuration file or environment), against the shared
// reference. A run stored before runs kept a record is evaluated with the
// configuration text it kept. A device of several that has no result says
// why in its report; the others are not held up by it.
func evaluateAll(st runStore, id store.RunID) (*runResult, error) {
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
	names := []string{""}
	if len(rec.Devices) > 0 {
		names = names[:0]
		for _, d := range rec.Devices {
			names = append(names, d.Instrument)
		}
	}
	out := &runResult{ID: id}
	for _, name := range names {
		one, _ := rec.ForDevice(name)
		var mine []analysis.Point
		for _, p := range pts {
			if p.Device == name {
				mine = append(mine, p)
			}
		}
		info := one.ReportInfo()
		info.Device.Instrument = name
		info.Run = report.RunIdentity{ID: id.String(), Label: run.Label, State: string(run.State), Reason: run.Reason}
		if run.State != store.StateRunning && run.State != store.StatePaused {
			info.Run.Missed = missedPoints(st, id, one, mine, name)
		}
		info.GeneratedAt = run.Updated
		if info.Certificate.Date.IsZero() && !run.Created.IsZero() {
			// Not configured: the calibration took place on the run's day.
			y, m, day := run.Created.UTC().Date()
			info.Certificate.Date = time.Date(y, m, day, 0, 0, 0, 0, time.UTC)
		}
		d := report.DeviceReport{Info: info}
		if len(mine) == 0 {
			d.Missing = "no reading of this device was captured"
			out.Devices = append(out.Devices, d)
			continue
		}
		res, err := analysis.Analyze(mine, one.Device, one.Reference, one.Options)
		switch {
		case err != nil && len(names) == 1:
			return nil, fmt.Errorf("analyse %s: %w", id, err)
		case err != nil:
			d.Missing = "its readings could not be evaluated: " + err.Error()
		default:
			d.Result = res
		}
		out.Devices = append(out.Devices, d)
	}
	return out, nil
}

// names lists the devices of the run as --device names them.
func (r *runResult) names() []string {
	out := make([]string, len(r.Devices))
	for i, d := range r.Devices {
		out[i] = d.Info.DeviceName()
	}
	return out
}

// only keeps the device named (every device when name is empty).
func (r *runResult) only(name string) (*runResult, error) {
	if name == "" {
		return r, nil
	}
	for _, d := range r.Devices {
		if d.Info.DeviceName() == name || (len(r.Devices) == 1 && d.Info.Device.ID == name) {
			return &runResult{ID: r.ID, Devices: []report.DeviceReport{d}}, nil
		}
	}
	return nil, fmt.Errorf("run %s has no device %q; its devices: %s", r.ID, name, strings.Join(r.names(), ", "))
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

// printResult writes the result for the terminal: for a run of several
// devices, a summary of every device first, then each one's report.
func printResult(w io.Writer, r *runResult) error {
	return report.TextDevices(w, r.Devices)
}

// writeHTMLReport writes a run's report to path as one document (every
// device in it), whole or not at all.
func writeHTMLReport(path string, r *runResult) error {
	if err := writeWhole(path, func(w io.Writer) error { return report.HTMLDevices(w, r.Devices) }); err != nil {
		return fmt.Errorf("report %s: %w", r.ID, err)
	}
	return nil
}

func init() { newReportRenderer = daemonReport }

// daemonReport renders reports for the API from the daemon's store, each
// from the record its run was frozen with; device selects one device of a
// run of several, and without it every device is in the report.
func daemonReport(st *store.Store, _ *config.Config) api.RenderFunc {
	return func(format string, w io.Writer, runID, device string) error {
		if !slices.Contains(reportFormats, format) {
			return fmt.Errorf("%w: format %q: use %s", api.ErrInvalid, format, strings.Join(reportFormats, ", "))
		}
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
		one, err := all.only(device)
		if err != nil {
			return fmt.Errorf("%w: %v", api.ErrNotFound, err)
		}
		return renderReport(w, format, one)
	}
}
