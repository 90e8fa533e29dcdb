package recorded

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"

	"plateau/analysis"
	"plateau/analysis/readout"
	"plateau/analysis/units"
)

// A transmitter's output may be recorded as it was read, in mA: the
// optional column dut_unit, "mA" on such a row, makes the dut column a loop
// current (blank: a pressure in the row's unit). A current needs the
// loop range — the pressures of 4 and 20 mA — from the command line or
// from a line before the header of the table:
//
//	# current_loop: 0 bar … 10 bar
//
// (also "0 bar, 10 bar" or "0 bar .. 10 bar"). The current becomes a
// pressure by the 4–20 mA scaling, p = lower + (I − 4 mA)/16 mA × span,
// whatever its value: a current outside the NE 43 measuring band is kept
// and flagged on its point (analysis.ClassifyCurrent), as the bench does
// for a device under test.

func init() { columns["dut_unit"] = false }

// Loop is the loop range of a transmitter recorded in mA, in Pa, and the
// unit it was written in (the zero Unit when built from pascals alone).
type Loop struct {
	LowerPa, UpperPa float64
	Unit             units.Unit
}

// Text is the range for people, in its own unit (else the one given) with
// digits to a thousandth of its span: "0.00 bar … 10.00 bar".
func (l Loop) Text(or units.Unit) string {
	u := l.Unit
	if u.Symbol == "" {
		u = or
	}
	res := math.Abs(l.UpperPa-l.LowerPa) / 1000
	return readout.WithUnit(l.LowerPa, u, res) + " … " + readout.WithUnit(l.UpperPa, u, res)
}

// Options are what a table may need from outside it.
type Options struct {
	// Loop is the loop range given on the command line; nil when none.
	Loop *Loop
	// currents is set when the dut column held a current on some row;
	// needLoop when one could not be read for want of the loop range.
	currents, needLoop bool
}

// ErrNeedsLoop is matched (errors.Is) by the error of a table whose
// currents could not be read for want of the loop range, so that a caller
// can read it again once it knows the range.
var ErrNeedsLoop = errors.New("a table of currents without its loop range")

type needsLoop struct{ error }

func (e needsLoop) Is(target error) bool { return target == ErrNeedsLoop }
func (e needsLoop) Unwrap() error        { return e.error }

// ReadWith reads a recorded run as Read does, with the loop range for dut
// values in mA. It returns the loop range the currents were scaled with
// (the table's or opt's), nil when the table holds no current.
func ReadWith(r io.Reader, opt Options) ([]analysis.Point, *Loop, error) {
	pts, err := readWith(r, &opt)
	if err != nil && opt.needLoop {
		return nil, nil, needsLoop{err}
	}
	if err != nil || !opt.currents {
		return pts, nil, err
	}
	return pts, opt.Loop, nil
}

const loopDirective = "current_loop:"

// headerLoop reads the loop range a "# current_loop:" line before the
// header gives. With a range from the command line too, the two must
// agree: a table recorded on one range is not evaluated on another.
func (o *Options) headerLoop(br *bufio.Reader) error {
	head, _ := br.Peek(64 << 10)
	for _, line := range strings.Split(strings.TrimPrefix(string(head), "\ufeff"), "\n") {
		l := strings.TrimSpace(line)
		if l == "" {
			continue
		}
		if l[0] != '#' {
			return nil // the header: no directive before it
		}
		rest, ok := strings.CutPrefix(strings.TrimSpace(l[1:]), loopDirective)
		if !ok {
			continue
		}
		loop, err := parseLoop(rest)
		if err != nil {
			return fmt.Errorf("recorded run: %q: %w", l, err)
		}
		if o.Loop != nil && !sameLoop(*o.Loop, loop) {
			return fmt.Errorf("recorded run: the table's %q differs from the loop range given (%s): a table recorded on one range is not evaluated on another", l, o.Loop.Text(loop.Unit))
		}
		o.Loop = &loop
		return nil
	}
	return nil
}

// ParseLoop reads a loop range written "0 bar … 10 bar" (or with ".." or
// ","), as on the command line.
func ParseLoop(s string) (Loop, error) { return parseLoop(s) }

func parseLoop(s string) (Loop, error) {
	for _, sep := range []string{"…", "..", ","} {
		lo, hi, ok := strings.Cut(s, sep)
		if !ok {
			continue
		}
		l, _, err1 := loopEnd(lo)
		h, u, err2 := loopEnd(hi)
		switch {
		case err1 != nil:
			return Loop{}, err1
		case err2 != nil:
			return Loop{}, err2
		case !(h > l) || math.IsInf(h-l, 0):
			return Loop{}, fmt.Errorf("the upper range value must be above the lower, by a finite span")
		}
		return Loop{LowerPa: l, UpperPa: h, Unit: u}, nil
	}
	return Loop{}, fmt.Errorf("give the loop range as \"0 bar … 10 bar\"")
}

func loopEnd(s string) (float64, units.Unit, error) {
	q, err := units.ParseQuantity(strings.TrimSpace(s))
	if err != nil {
		return 0, units.Unit{}, err
	}
	pa, err := q.Pa()
	return pa, q.Unit, err
}

func sameLoop(a, b Loop) bool {
	slack := 1e-9 * math.Abs(a.UpperPa-a.LowerPa)
	return math.Abs(a.LowerPa-b.LowerPa) <= slack && math.Abs(a.UpperPa-b.UpperPa) <= slack
}

// dut reads the row's dut value in Pa: a pressure in the row's unit, or a
// loop current (dut_unit mA) that flags p.
func (t *table) dut(field func(string) (string, int), pressure func(string, bool) float64, p *analysis.Point) float64 {
	unit, ui := field("dut_unit")
	if unit == "" {
		return pressure("dut", false)
	}
	s, i := field("dut")
	v, ok := t.number(s)
	if !ok {
		t.problem(i, "%q is not a number", s)
		return 0
	}
	if unit != "mA" {
		t.problem(ui, "%q: dut_unit is for a transmitter's output current, mA (a pressure takes the row's unit)", unit)
		return 0
	}
	loop := t.opt.Loop
	if loop == nil {
		t.opt.needLoop = true
		t.problem(ui, "a current in mA needs the loop range: give it on the command line or in a line \"# current_loop: 0 bar … 10 bar\" before the header")
		return 0
	}
	pa := loop.LowerPa + (v-analysis.LoopZeroMA)/analysis.LoopSpanMA*(loop.UpperPa-loop.LowerPa)
	if math.IsInf(pa, 0) || math.IsNaN(pa) {
		t.problem(i, "%q mA is too large", s)
		return 0
	}
	t.opt.currents = true
	p.Signal = analysis.ClassifyCurrent(v)
	return pa
}
