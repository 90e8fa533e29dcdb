// Package manual is the gauge for instruments a person reads: analog dial
// gauges. The operator types what the pointer shows; the engine reads it
// like any other gauge.
//
// Semantics: Read returns the newest entry not yet read, once. Until a new
// value has been entered, Read fails with a drivers.ErrTimeout-kind error
// ("no entry yet"), so the engine asks again and never reuses an old value
// for a new point. One entry serves one point.
package manual

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"
	"sync"
	"time"

	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers"
)

func init() {
	drivers.Register(config.LinkManual, drivers.Opener{Gauge: OpenGauge})
}

// ErrNoEntry says the operator has not entered a value since the last read.
var ErrNoEntry = errors.New("no operator entry yet")

// Gauge holds the newest operator entry.
type Gauge struct {
	name string
	unit units.Unit // the dial's unit, for the raw value

	mu      sync.Mutex
	pending *drivers.Reading
	fresh   chan struct{} // closed and replaced on every entry
	closed  bool
}

var _ drivers.Gauge = (*Gauge)(nil)

// OpenGauge makes an operator-entry gauge; Instrument.Unit is the dial's unit.
func OpenGauge(inst config.Instrument, env drivers.OpenEnv) (drivers.Gauge, error) {
	return New(inst.Name, inst.Unit)
}

// New makes an operator-entry gauge for a dial reading in unit.
func New(name, unit string) (*Gauge, error) {
	u, err := units.Lookup(unit)
	if err != nil {
		return nil, fmt.Errorf("manual gauge %q: unit: %w", name, err)
	}
	return &Gauge{name: name, unit: u, fresh: make(chan struct{})}, nil
}

// Enter records a value read off the dial at time at, in unit (which may
// differ from the dial's configured unit; it is converted). A later entry
// replaces one not yet read: the operator corrected a typing mistake.
func (g *Gauge) Enter(value float64, unit string, at time.Time) error {
	if math.IsNaN(value) || math.IsInf(value, 0) {
		return fmt.Errorf("manual gauge %q: %v is not a number", g.name, value)
	}
	u, err := units.Lookup(unit)
	if err != nil {
		return fmt.Errorf("manual gauge %q: %w", g.name, err)
	}
	if at.IsZero() {
		return fmt.Errorf("manual gauge %q: entry has no time", g.name)
	}
	pa := u.ToPa(value)
	raw := g.unit.FromPa(pa)
	if math.IsInf(pa, 0) || math.IsInf(raw, 0) {
		return fmt.Errorf("manual gauge %q: %v %s is too large to be a pressure", g.name, value, u.Symbol)
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.closed {
		return fmt.Errorf("manual gauge %q is closed", g.name)
	}
	g.pending = &drivers.Reading{Time: at, Pa: pa, Raw: raw, RawUnit: g.unit.Symbol,
		Wire: "entered " + strconv.FormatFloat(value, 'g', -1, 64) + " " + u.Symbol}
	close(g.fresh)
	g.fresh = make(chan struct{})
	return nil
}

// Read returns the newest entry not yet read, or an ErrTimeout-kind error
// wrapping ErrNoEntry.
func (g *Gauge) Read(ctx context.Context) (drivers.Reading, error) {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.pending == nil {
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindTimeout, ErrNoEntry)
	}
	r := *g.pending
	g.pending = nil
	return r, nil
}

// Wait blocks until an entry is waiting or ctx ends; the operator API and
// tests use it to avoid polling.
func (g *Gauge) Wait(ctx context.Context) error {
	g.mu.Lock()
	if g.pending != nil {
		g.mu.Unlock()
		return nil
	}
	ch := g.fresh
	g.mu.Unlock()
	select {
	case <-ch:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// Close refuses further entries.
func (g *Gauge) Close() error {
	g.mu.Lock()
	defer g.mu.Unlock()
	g.closed = true
	return nil
}
