// Package api is the daemon's HTTP surface: status, runs and their points,
// run control, operator entry of dial readings, reports, the live event
// stream as Server-Sent Events and Prometheus metrics. It serves on a unix
// socket (the default way in, guarded by file permissions) and optionally on
// a TCP address, where every call that changes something needs a bearer
// token. The package also holds the Go client the CLI uses.
//
// The engine, the store and the report renderer are reached through the
// small interfaces below, so the daemon wires them in and tests can too.
package api

import (
	"context"
	"errors"
	"io"
	"time"

	"plateau/acquire/store"
	"plateau/analysis"
)

// Control is what the API needs from the acquisition engine.
type Control interface {
	// Status describes the daemon and the current run right now.
	Status(ctx context.Context) Status
	// Start begins a new run and returns its id once it is committed.
	Start(ctx context.Context, req StartRequest) (store.RunID, error)
	// Stop ends the current run for good; reason goes into the run's record.
	Stop(ctx context.Context, reason string) error
	// Pause holds the current run where it is; Resume carries it on.
	Pause(ctx context.Context) error
	Resume(ctx context.Context) error
	// Enter hands over a reading an operator took from an analog dial.
	Enter(ctx context.Context, e Entry) error
}

// Records is the committed history: runs, points and events. *store.Store
// satisfies it as it is.
type Records interface {
	Runs() ([]store.Run, error)
	Run(id store.RunID) (store.Run, error)
	Points(run store.RunID) ([]analysis.Point, error)
	// Events returns up to limit events with ids above since, oldest first.
	Events(since uint64, limit int) ([]store.Event, error)
	LastEventID() (uint64, error)
}

// Feed is the live side of the event log: events are published after they
// are committed. Publishing must never wait for a viewer; a viewer that
// falls behind has its channel closed (the stream then catches up from the
// store, so nothing committed is missed).
type Feed interface {
	Subscribe(buffer int) (events <-chan store.Event, cancel func())
}

// RenderFunc writes a run's report in format "json", "csv" or "html"; device
// selects one device of a run that calibrated several ("" for all, or the
// only one).
type RenderFunc func(format string, w io.Writer, runID, device string) error

// Errors that Control and RenderFunc may wrap so the API answers with the
// right status; any other error is a 500 with no detail sent.
var (
	// ErrNotFound: no such run (404).
	ErrNotFound = errors.New("not found")
	// ErrConflict: the run's state does not allow it now, e.g. stop when
	// nothing runs, start while a run is in progress (409).
	ErrConflict = errors.New("not possible now")
	// ErrInvalid: the request was understood but a value is unacceptable,
	// e.g. an operator reading outside the gauge's scale (400).
	ErrInvalid = errors.New("invalid request")
)

// AsConflict marks err as a refusal for the state things are in (409),
// keeping its message as it is.
func AsConflict(err error) error {
	if err == nil {
		return nil
	}
	return classified{err, ErrConflict}
}

// classified gives an error one of the kinds above without changing its text.
type classified struct {
	err  error
	kind error
}

func (c classified) Error() string        { return c.err.Error() }
func (c classified) Unwrap() error        { return c.err }
func (c classified) Is(target error) bool { return target == c.kind }

// StartRequest is the body of a start call. Every field is optional.
type StartRequest struct {
	// Label names the run in lists and reports, e.g. "as-found PG-0421".
	Label string `json:"label,omitempty"`
	// Certificate, Customer and Operator are this run's certificate
	// number, customer and operator, in place of the configuration's.
	Certificate string `json:"certificate,omitempty"`
	Customer    string `json:"customer,omitempty"`
	Operator    string `json:"operator,omitempty"`
}

// StopRequest is the optional body of a stop call.
type StopRequest struct {
	Reason string `json:"reason,omitempty"`
}

// Entry is an operator's reading of an analog dial at the current step,
// or of an ambient instrument read by a person (a room thermometer).
type Entry struct {
	// Device names the dial when the run has several, or the ambient
	// instrument; empty for the only dial.
	Device string  `json:"device,omitempty"`
	Value  float64 `json:"value"`
	// Unit is the unit as typed: a pressure unit symbol ("bar", "kPa",
	// "psi"), or an ambient instrument's ("°C", "K", "°F", "%RH", "hPa").
	Unit string `json:"unit"`
	// Confirm takes an entry that the daemon found implausible (outside
	// the range, far from the target) after the operator checked it.
	Confirm bool `json:"confirm,omitempty"`
}

// Started is the reply to a start call.
type Started struct {
	Run string `json:"run"`
}

// Status is the reply to a status call. The engine fills it except
// LastEventID, which the API adds from the store.
type Status struct {
	Version string    `json:"version"`
	Since   time.Time `json:"since"` // when the daemon started
	// Run is the current (or resumed) run; nil when the bench is idle.
	Run *RunInfo `json:"run,omitempty"`
	// Step says in words what the procedure is doing now.
	Step string `json:"step,omitempty"`
	// Progress is the share of the current run's planned points captured, 0…1.
	Progress float64 `json:"progress"`
	// PointsCaptured counts points captured since the daemon started.
	PointsCaptured uint64 `json:"points_captured"`
	// Unit is the unit the device under test indicates in, for display
	// and as the default unit of an operator's reading.
	Unit        string           `json:"unit,omitempty"`
	Instruments []InstrumentInfo `json:"instruments"`
	LastEventID uint64           `json:"last_event_id"`
	// State and Reason are the current run's state and why it is in it
	// ("paused" with the safety trip, say); empty when idle.
	State  string `json:"state,omitempty"`
	Reason string `json:"reason,omitempty"`
	// Trip says why the safety guard is latched (no setpoint is sent until
	// a person resumes or starts a run); empty when it is not.
	Trip string `json:"trip,omitempty"`
	// StoreFault says why the store cannot write; empty when it can.
	StoreFault string `json:"store_fault,omitempty"`
	// Last is how the last run ended: this daemon's, else the newest of
	// the store (Earlier).
	Last *LastRun `json:"last,omitempty"`
	// StateSince is when the current run entered its state: the pause
	// time while it is paused.
	StateSince time.Time `json:"state_since,omitzero"`
	// Current is the step the run is at; nil when idle.
	Current *StepNow `json:"current,omitempty"`
	// Settle is the rule a step waits for.
	Settle *SettleRule `json:"settle,omitempty"`
	// Plan lists the configured plan's steps in order (empty in free mode).
	Plan []PlanStep `json:"plan,omitempty"`
	// ExpectedSeconds and ExpectedMostSeconds bound the whole plan in wall
	// time: every hold and settle window, or every point to its time-out;
	// reaching each pressure comes on top.
	ExpectedSeconds     float64 `json:"expected_seconds,omitempty"`
	ExpectedMostSeconds float64 `json:"expected_most_seconds,omitempty"`
	// Source says whether plateau drives a pressure source on this bench;
	// without one the pressure is set by hand.
	Source bool `json:"source"`
	// Held says that the run is paused with the source holding the step's
	// pressure; a pause by the safety guard, a store fault or a restart
	// vents it instead.
	Held bool `json:"held"`
}

// StepNow is where the current run is.
type StepNow struct {
	Index    int     `json:"index"` // 0-based position in Plan
	Of       int     `json:"of"`
	Phase    string  `json:"phase,omitempty"`
	TargetPa float64 `json:"target_pa"`
	// Estimated says whether StepLeftSeconds and RunLeftSeconds hold an
	// estimate (wall time) of what the step and the whole run still need,
	// from the plan scaled by how long the steps so far took.
	Estimated       bool    `json:"estimated"`
	StepLeftSeconds float64 `json:"step_left_seconds,omitempty"`
	RunLeftSeconds  float64 `json:"run_left_seconds,omitempty"`
}

// SettleRule is when a step counts as settled: over a window of
// WindowSeconds, drift and scatter within their limits and the mean within
// BandPa of the target (0: not checked).
type SettleRule struct {
	WindowSeconds  float64 `json:"window_seconds"`
	MaxDriftPaPerS float64 `json:"max_drift_pa_per_s"`
	MaxSpreadPa    float64 `json:"max_spread_pa"`
	BandPa         float64 `json:"band_pa"`
}

// PlanStep is one step of the plan.
type PlanStep struct {
	Kind      string  `json:"kind"` // exercise | capture
	Cycle     int     `json:"cycle"`
	Direction string  `json:"direction,omitempty"`
	TargetPa  float64 `json:"target_pa"`
	What      string  `json:"what"` // in words, e.g. "cycle 1 up point 2"
}

// LastRun is how a run ended.
type LastRun struct {
	ID     string `json:"id"`
	State  string `json:"state"`
	Reason string `json:"reason,omitempty"`
	// Verdict is the decision on its points ("pass", "fail", …; one per
	// device, "PG-1 pass, PG-2 fail", when it calibrated several); empty
	// when it has none.
	Verdict string `json:"verdict,omitempty"`
	// Earlier says the run ended before this daemon started (status shows
	// the newest run of the store until the daemon ends one itself).
	Earlier bool `json:"earlier,omitempty"`
}

// InstrumentInfo is one instrument's state. Reads and Errors count since
// the daemon started and only ever grow.
type InstrumentInfo struct {
	Name      string            `json:"name"`
	Role      string            `json:"role"` // reference | device | source | ambient
	Up        bool              `json:"up"`   // the last read succeeded
	Reads     uint64            `json:"reads"`
	Errors    map[string]uint64 `json:"errors,omitempty"` // failed reads by reason (timeout, link_down, …)
	LastPa    float64           `json:"last_pa"`          // an ambient instrument's in its quantity's base unit: °C, %RH or Pa
	LastAt    time.Time         `json:"last_at,omitzero"`
	Settled   bool              `json:"settled"`
	LastError string            `json:"last_error,omitempty"`
	// ReadsPerSecond is the rate it actually gets (several devices on one
	// line share it), next to what its poll interval asks.
	ReadsPerSecond float64 `json:"reads_per_second,omitempty"`
	AskedPerSecond float64 `json:"asked_per_second,omitempty"`
	// Device is the identity of a device under test (its serial or tag).
	Device string `json:"device,omitempty"`
	// Raw and RawUnit are the last good reading as the instrument gave it
	// (bar, mA, counts…, an ambient one's °C, %RH, hPa…), before
	// conversion to pascal.
	Raw     float64 `json:"raw"`
	RawUnit string  `json:"raw_unit,omitempty"`
	// Quantity is what an ambient instrument reads: temperature, humidity
	// or barometric; empty for the others, and for an ambient instrument
	// whose readings have not said it yet.
	Quantity string `json:"quantity,omitempty"`
	// Why says what the instrument's settle rule still waits for ("drifting
	// 0.004 bar/min, limit 0.002 bar/min"); empty when settled.
	Why string `json:"why,omitempty"`
	// Waiting says what a dial read by a person waits for; empty when no
	// entry is due.
	Waiting string `json:"waiting,omitempty"`
}

// RunInfo describes a run in lists and status.
type RunInfo struct {
	ID      string      `json:"id"`
	Label   string      `json:"label"`
	State   store.State `json:"state"`
	Reason  string      `json:"reason,omitempty"`
	Created time.Time   `json:"created"`
	Updated time.Time   `json:"updated"`
}

// RunDetail is one run with its configuration and point count.
type RunDetail struct {
	RunInfo
	Points int    `json:"points"`
	Config string `json:"config,omitempty"` // the configuration the run used (YAML)
}

// Info turns a stored run into its wire form.
func Info(r store.Run) RunInfo {
	return RunInfo{ID: r.ID.String(), Label: r.Label, State: r.State, Reason: r.Reason, Created: r.Created, Updated: r.Updated}
}

// Problem is the body of every error reply.
type Problem struct {
	Error string `json:"error"`
}
