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
// One row is one reading. Numbers use a decimal point. Blank lines and lines
// starting with # are ignored. Readings at the same nominal pressure form one
// calibration point; points are numbered by ascending nominal.
package recorded

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"plateau/analysis"
	"plateau/analysis/units"
)

// MaxRows bounds a table so that a wrong file cannot exhaust memory; an
// overnight run of 100 cycles × 21 points has about 4 400 rows.
const MaxRows = 1_000_000

var columns = map[string]bool{
	"cycle": true, "direction": true, "nominal": true, "reference": true, "dut": true, "unit": true,
	"kind": false, "time": false, "note": false, "reference_sd": false, "reference_samples": false,
}

// Read parses a recorded run. Errors name the line and column at fault.
func Read(r io.Reader) ([]analysis.Point, error) {
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.TrimLeadingSpace = true
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, errors.New("recorded run: empty table (expected a header row such as \"cycle,direction,nominal,reference,dut,unit\")")
	}
	if err != nil {
		return nil, fmt.Errorf("recorded run: %w", err)
	}
	col := map[string]int{}
	for i, h := range header {
		name := strings.ToLower(strings.TrimSpace(h))
		if _, known := columns[name]; !known {
			line, c := cr.FieldPos(i)
			return nil, fmt.Errorf("recorded run: line %d, column %d: unknown column %q (known: cycle, direction, nominal, reference, dut, unit, kind, time, note, reference_sd, reference_samples)", line, c, h)
		}
		if _, dup := col[name]; dup {
			line, c := cr.FieldPos(i)
			return nil, fmt.Errorf("recorded run: line %d, column %d: column %q appears twice", line, c, name)
		}
		col[name] = i
	}
	for name, required := range columns {
		if _, ok := col[name]; required && !ok {
			return nil, fmt.Errorf("recorded run: header lacks the required column %q", name)
		}
	}

	var points []analysis.Point
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("recorded run: %w", err)
		}
		if len(points) == MaxRows {
			line, _ := cr.FieldPos(0)
			return nil, fmt.Errorf("recorded run: line %d: more than %d readings", line, MaxRows)
		}
		p, err := parseRow(cr, rec, col)
		if err != nil {
			return nil, fmt.Errorf("recorded run: %w", err)
		}
		points = append(points, p)
	}
	if len(points) == 0 {
		return nil, errors.New("recorded run: the table has a header but no readings")
	}
	numberPoints(points)
	return points, nil
}

// fieldError names the place of a bad field.
func fieldError(cr *csv.Reader, i int, name, format string, args ...any) error {
	line, c := cr.FieldPos(i)
	return fmt.Errorf("line %d, column %d (%s): %s", line, c, name, fmt.Sprintf(format, args...))
}

func parseRow(cr *csv.Reader, rec []string, col map[string]int) (analysis.Point, error) {
	field := func(name string) (string, int) {
		i, ok := col[name]
		if !ok {
			return "", -1
		}
		return strings.TrimSpace(rec[i]), i
	}
	p := analysis.Point{Kind: analysis.Measurement}
	if s, i := field("kind"); s != "" {
		switch k := analysis.PointKind(strings.ToLower(s)); k {
		case analysis.Measurement, analysis.ZeroBefore, analysis.ZeroAfter:
			p.Kind = k
		default:
			return p, fieldError(cr, i, "kind", "%q is not one of %s, %s, %s", s, analysis.Measurement, analysis.ZeroBefore, analysis.ZeroAfter)
		}
	}
	measure := p.Kind == analysis.Measurement

	s, i := field("cycle")
	c, err := strconv.Atoi(s)
	if err != nil || c < 1 {
		return p, fieldError(cr, i, "cycle", "%q is not a whole number of 1 or more", s)
	}
	p.Cycle = c

	s, i = field("direction")
	switch d := analysis.Direction(strings.ToLower(s)); {
	case d == analysis.Ascending || d == analysis.Descending:
		p.Direction = d
	case s == "" && !measure:
	default:
		return p, fieldError(cr, i, "direction", "%q is not %s or %s", s, analysis.Ascending, analysis.Descending)
	}

	s, i = field("unit")
	u, err := units.Lookup(s)
	if err != nil {
		return p, fieldError(cr, i, "unit", "%v", err)
	}
	number := func(name string, blankOK bool) (float64, error) {
		s, i := field(name)
		if s == "" && blankOK {
			return 0, nil
		}
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, fieldError(cr, i, name, "%q is not a number", s)
		}
		if pa := u.ToPa(v); !math.IsInf(pa, 0) {
			return pa, nil
		}
		return 0, fieldError(cr, i, name, "%q %s is too large", s, u.Symbol)
	}
	if p.Nominal, err = number("nominal", !measure); err != nil {
		return p, err
	}
	ref, err := number("reference", false)
	if err != nil {
		return p, err
	}
	dut, err := number("dut", false)
	if err != nil {
		return p, err
	}
	var at time.Time
	if s, i := field("time"); s != "" {
		if at, err = time.Parse(time.RFC3339Nano, s); err != nil {
			return p, fieldError(cr, i, "time", "%q is not an RFC 3339 time such as 2025-03-01T21:04:05Z", s)
		}
	}
	// A typed-in reading is one sample: Count 1, no spread, unless the
	// table gives the window it was averaged from.
	p.Reference = analysis.Window{Mean: ref, Count: 1, Start: at, End: at}
	sd, err := number("reference_sd", true)
	if err != nil {
		return p, err
	}
	s, i = field("reference_samples")
	switch {
	case s == "" && sd == 0:
	case s == "":
		return p, fieldError(cr, col["reference_sd"], "reference_sd", "needs reference_samples, the number of samples it was computed from")
	default:
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 || n > 1_000_000_000 {
			return p, fieldError(cr, i, "reference_samples", "%q is not a whole number of 1 or more", s)
		}
		if sd < 0 || (n == 1 && sd != 0) {
			return p, fieldError(cr, col["reference_sd"], "reference_sd", "must be ≥ 0, and 0 for a single sample")
		}
		p.Reference.Count, p.Reference.StdDev = n, sd
	}
	p.DUT = analysis.Window{Mean: dut, Count: 1, Start: at, End: at}
	p.Note, _ = field("note")
	return p, nil
}

// numberPoints gives each measurement its Index: the rank of its nominal
// among the distinct nominals, lowest first. Nominals given in different
// units match when they convert to the same pascal value.
func numberPoints(points []analysis.Point) {
	var nominals []float64
	seen := map[float64]bool{}
	for _, p := range points {
		if p.Kind == analysis.Measurement && !seen[p.Nominal] {
			seen[p.Nominal] = true
			nominals = append(nominals, p.Nominal)
		}
	}
	sort.Float64s(nominals)
	rank := make(map[float64]int, len(nominals))
	for i, n := range nominals {
		rank[n] = i
	}
	for i := range points {
		if points[i].Kind == analysis.Measurement {
			points[i].Index = rank[points[i].Nominal]
		}
	}
}
