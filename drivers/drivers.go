// Package drivers defines what plateau needs from an instrument — a gauge
// that returns a timestamped reading, a pressure source that takes a setpoint
// and can vent — and opens instruments from their configuration by link kind.
// Wire formats live in the sub-packages; procedures live in acquire.
package drivers

import (
	"context"
	"errors"
	"fmt"
	"time"
)

// Reading is one value from one instrument.
type Reading struct {
	Time    time.Time // when the value was taken (from the acquisition clock)
	Pa      float64   // the value converted to pascal (after scaling and 4–20 mA conversion)
	Raw     float64   // the value as the instrument gave it, in RawUnit
	RawUnit string    // unit symbol of Raw ("bar", "mA", "counts", …)
	Wire    string    // the raw register words (hex) or reply line, for audit; may be empty
}

// Gauge is anything that reads a pressure. A failed read returns a *ReadError
// and never a number; a good one never holds NaN or ±Inf. Read does not touch
// the wire once ctx has ended.
type Gauge interface {
	Read(ctx context.Context) (Reading, error)
	Close() error
}

// Source is a pressure controller: it moves toward a setpoint and can vent.
// Neither command is sent once its ctx has ended, so vent with a context of
// its own rather than one a shutdown or a trip cancels.
type Source interface {
	SetPoint(ctx context.Context, pa float64) error
	Vent(ctx context.Context) error
	Close() error
}

// Reacher is an optional ability of a Source: report whether the controller
// says its setpoint is reached.
type Reacher interface {
	Reached(ctx context.Context) (bool, error)
}

// Kind classifies why a read failed, so the engine can count failures by reason.
type Kind int

const (
	KindTimeout    Kind = iota + 1 // no reply in time
	KindLinkDown                   // port or connection not available
	KindBadReply                   // reply could not be understood (CRC, garbled line, exception)
	KindOutOfRange                 // value outside what the instrument can report (a NAMUR NE 43 fault current, a value that is not finite once scaled)
	KindOverload                   // the instrument itself says over- or under-range
)

var kindNames = map[Kind]string{
	KindTimeout:    "timeout",
	KindLinkDown:   "link_down",
	KindBadReply:   "bad_reply",
	KindOutOfRange: "out_of_range",
	KindOverload:   "overload",
}

func (k Kind) String() string {
	if s, ok := kindNames[k]; ok {
		return s
	}
	return fmt.Sprintf("kind(%d)", int(k))
}

// ReadError is the one error type a failed read returns.
type ReadError struct {
	Instrument string
	Kind       Kind
	Err        error
}

func (e *ReadError) Error() string {
	return fmt.Sprintf("read %s: %s: %v", e.Instrument, e.Kind, e.Err)
}

func (e *ReadError) Unwrap() error { return e.Err }

// Is lets errors.Is(err, drivers.ErrTimeout) and friends match by kind.
func (e *ReadError) Is(target error) bool {
	var k kindError
	if errors.As(target, &k) {
		return Kind(k) == e.Kind
	}
	return false
}

type kindError Kind

func (k kindError) Error() string { return Kind(k).String() }

// Sentinels to compare with errors.Is.
var (
	ErrTimeout    error = kindError(KindTimeout)
	ErrLinkDown   error = kindError(KindLinkDown)
	ErrBadReply   error = kindError(KindBadReply)
	ErrOutOfRange error = kindError(KindOutOfRange)
	ErrOverload   error = kindError(KindOverload)
)

// Fail builds a *ReadError.
func Fail(instrument string, kind Kind, err error) *ReadError {
	return &ReadError{Instrument: instrument, Kind: kind, Err: err}
}

// KindOf returns the failure kind of err, or 0 when err is not a *ReadError.
func KindOf(err error) Kind {
	var re *ReadError
	if errors.As(err, &re) {
		return re.Kind
	}
	return 0
}
