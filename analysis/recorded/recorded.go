// Package recorded reads a calibration run that was written down elsewhere —
// on a paper sheet, in a spreadsheet, or by another rig — as a CSV table, so
// that `plateau analyze` can evaluate it like a captured run.
//
// The table has a header row naming its columns, in any order and any case:
//
//	cycle      required  measuring cycle, 1, 2, …
//	direction  required on measurement rows: up or down; may be blank on zero rows
//	nominal    required on measurement rows: the target pressure; blank on zero rows means 0
//	reference  required  the reference standard's reading
//	dut        required  the device under test's reading
//	unit       required  unit of nominal, reference and dut on this row (bar, kPa, psi, …)
//	kind       optional  measure (default), zero-before or zero-after
//	time       optional  when the reading was taken, RFC 3339 (2025-03-01T21:04:05Z);
//	                     needed for drift trends
//	note       optional  free text, carried into the analysis warnings
//	reference_sd       optional  standard deviation of the reference over the
//	                             window the reading was averaged from (same unit)
//	reference_samples  optional  number of samples in that window (with reference_sd)
//
// One row is one reading. Blank lines and lines starting with # are ignored.
// Readings at the same nominal pressure form one calibration point; points
// are numbered by ascending nominal.
//
// What spreadsheets write is read as it comes: a UTF-8 byte-order mark,
// fields separated by commas, semicolons or tabs (taken from the header
// row), quoted fields, and decimal commas when the separator is not a
// comma. Every bad field is reported at once, by line and by the
// spreadsheet's column letter and header.
package recorded

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"plateau/analysis"
)

// MaxRows bounds a table so that a wrong file cannot exhaust memory; an
// overnight run of 100 cycles × 21 points has about 4 400 rows.
const MaxRows = 1_000_000

var columns = map[string]bool{
	"cycle": true, "direction": true, "nominal": true, "reference": true, "dut": true, "unit": true,
	"kind": false, "time": false, "note": false, "reference_sd": false, "reference_samples": false,
}

// maxProblems bounds the problems reported for one table: a file of the
// wrong kind would otherwise give one per field.
const maxProblems = 50

// Read parses a recorded run. Its error lists every bad field, each named
// by line, column letter and header.
func Read(r io.Reader) ([]analysis.Point, error) {
	pts, _, err := ReadWith(r, Options{})
	return pts, err
}

func readWith(r io.Reader, opt *Options) ([]analysis.Point, error) {
	cr, sep, err := openTable(r, opt.headerLoop)
	if err != nil {
		return nil, err
	}
	t, err := readHeader(cr, sep, "recorded run", "cycle,direction,nominal,reference,dut,unit", columns,
		"cycle, direction, nominal, reference, dut, unit, kind, time, note, reference_sd, reference_samples")
	if err != nil {
		return nil, err
	}
	t.opt = opt
	var points []analysis.Point
	if err := t.eachRow(func(rec []string) {
		if p, ok := t.row(rec); ok {
			points = append(points, p)
		}
	}); err != nil {
		return nil, err
	}
	if len(points) == 0 {
		return nil, errors.New("recorded run: the table has a header but no readings")
	}
	numberPoints(points)
	return points, nil
}

// table is the state of one read: where the columns are and the problems
// found so far.
type table struct {
	name         string // "recorded run", "table of loadings": the start of its errors
	cr           *csv.Reader
	header       []string
	col          map[string]int
	decimalComma bool
	problems     []string
	opt          *Options // the loop range of currents (current.go)
	modes        modeSeen // the mode the units carry (mode.go)
}

func (t *table) err() error {
	if len(t.problems) == 1 {
		return fmt.Errorf("%s: %s", t.name, t.problems[0])
	}
	return fmt.Errorf("%s: %d problems:\n  %s", t.name, len(t.problems), strings.Join(t.problems, "\n  "))
}

// problem notes a bad field i of the current row, named by line, column
// letter and header.
func (t *table) problem(i int, format string, args ...any) {
	line, _ := t.cr.FieldPos(i)
	name := ""
	if i < len(t.header) {
		name = fmt.Sprintf(" (%s)", strings.TrimSpace(t.header[i]))
	}
	t.problems = append(t.problems, fmt.Sprintf("line %d, column %s%s: %s", line, letters(i), name, fmt.Sprintf(format, args...)))
}

// letters is a spreadsheet's name of column i (0 → A, 25 → Z, 26 → AA).
func letters(i int) string {
	s := ""
	for i++; i > 0; i = (i - 1) / 26 {
		s = string(rune('A'+(i-1)%26)) + s
	}
	return s
}

// number reads a decimal number, with a decimal comma where the
// separator allows one.
func (t *table) number(s string) (float64, bool) {
	if t.decimalComma && strings.Count(s, ",") == 1 && !strings.Contains(s, ".") {
		s = strings.Replace(s, ",", ".", 1)
	}
	v, err := strconv.ParseFloat(s, 64)
	return v, err == nil && !math.IsNaN(v) && !math.IsInf(v, 0)
}

// row reads one reading; every bad field of it is noted as a problem.
func (t *table) row(rec []string) (analysis.Point, bool) {
	before := len(t.problems)
	h, ok := t.head(rec)
	if !ok {
		return analysis.Point{}, false
	}
	p := h.p
	p.Nominal = h.pressure("nominal", !h.measure)
	ref := h.pressure("reference", false)
	dut := t.dut(h.field, h.pressure, &p)
	// A typed-in reading is one sample: Count 1, no spread, unless the
	// table gives the window it was averaged from.
	p.Reference = h.window(ref)
	sd := h.pressure("reference_sd", true)
	s, i := h.field("reference_samples")
	switch {
	case s == "" && sd == 0:
	case s == "":
		t.problem(t.col["reference_sd"], "needs reference_samples, the number of samples it was computed from")
	default:
		n, err := strconv.Atoi(s)
		switch {
		case err != nil || n < 1 || n > 1_000_000_000:
			t.problem(i, "%q is not a whole number of 1 or more", s)
		case sd < 0 || (n == 1 && sd != 0):
			t.problem(t.col["reference_sd"], "must be ≥ 0, and 0 for a single sample")
		default:
			p.Reference.Count, p.Reference.StdDev = n, sd
		}
	}
	p.DUT = h.window(dut)
	return p, len(t.problems) == before
}
