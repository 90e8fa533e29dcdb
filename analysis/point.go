// Package analysis turns captured comparison points into the figures a
// technician signs: error of indication, hysteresis, repeatability,
// linearity, zero deviation, uncertainty and the conformity decision.
// It is pure: no I/O, no clock; the same points give the same result.
// Every pressure is in pascal.
package analysis

import "time"

// Direction says how a point was approached.
type Direction string

const (
	Ascending  Direction = "up"
	Descending Direction = "down"
)

// PointKind separates the measurement points of a series from the zero
// readings taken at the start and end of each cycle.
type PointKind string

const (
	Measurement PointKind = "measure"
	ZeroBefore  PointKind = "zero-before"
	ZeroAfter   PointKind = "zero-after"
)

// Window summarises one instrument's samples over the settled window a point
// was captured from. An operator-entered reading has Count 1 and StdDev 0.
type Window struct {
	Mean   float64   `json:"mean_pa"`
	StdDev float64   `json:"stddev_pa"` // sample standard deviation (n − 1); 0 when Count < 2
	Count  int       `json:"count"`
	Start  time.Time `json:"start"`
	End    time.Time `json:"end"`
	Slope  float64   `json:"slope_pa_per_s"` // least-squares drift over the window, for audit
}

// Point is one captured comparison: the reference and the device under test
// settled together at one nominal pressure.
type Point struct {
	Cycle     int       `json:"cycle"`     // 1-based measuring cycle
	Direction Direction `json:"direction"` // series direction
	Kind      PointKind `json:"kind"`
	Index     int       `json:"index"`          // position of the nominal in the procedure's point list (0-based)
	Nominal   float64   `json:"nominal_pa"`     // the target; never used as the reference value
	Reference Window    `json:"reference"`      // reference standard, Pa, before head correction
	DUT       Window    `json:"dut"`            // device under test, Pa
	Note      string    `json:"note,omitempty"` // e.g. "approached from the wrong side"
	// Device names the device under test the point belongs to when a run
	// calibrates several at once; empty for a run with one device.
	Device string `json:"device,omitempty"`
	// Signal flags a transmitter output outside the NE 43 measuring band
	// (output.go); empty for an ordinary reading and in older records.
	Signal Signal `json:"signal,omitempty"`
	// Ambient holds the ambient conditions over the point's window, one
	// entry per ambient instrument that had samples in it (ambient.go).
	Ambient []AmbientMean `json:"ambient,omitempty"`
}
