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
	"bufio"
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
	br := bufio.NewReader(r)
	if b, err := br.Peek(3); err == nil && string(b) == "\ufeff" {
		br.Discard(3) // the byte-order mark spreadsheets put first
	}
	sep := separator(br)
	if err := opt.headerLoop(br); err != nil {
		return nil, err
	}
	cr := csv.NewReader(br)
	cr.Comma = sep
	cr.Comment = '#'
	cr.TrimLeadingSpace = sep != '\t'
	cr.FieldsPerRecord = -1 // a short row is one problem among the others
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, errors.New("recorded run: empty table (expected a header row such as \"cycle,direction,nominal,reference,dut,unit\")")
	}
	if err != nil {
		return nil, fmt.Errorf("recorded run: %w", err)
	}
	t := table{cr: cr, header: header, col: map[string]int{}, decimalComma: sep != ',', opt: opt}
	for i, h := range header {
		name := strings.ToLower(strings.TrimSpace(h))
		if _, known := columns[name]; !known {
			t.problem(i, "unknown column %q (known: cycle, direction, nominal, reference, dut, unit, kind, time, note, reference_sd, reference_samples)", h)
			continue
		}
		if first, dup := t.col[name]; dup {
			t.problem(i, "column %q appears twice (first in column %s)", name, letters(first))
			continue
		}
		t.col[name] = i
	}
	var lacking []string
	for name, required := range columns {
		if _, ok := t.col[name]; required && !ok {
			lacking = append(lacking, name)
		}
	}
	sort.Strings(lacking)
	for _, name := range lacking {
		t.problems = append(t.problems, fmt.Sprintf("header lacks the required column %q", name))
	}
	if len(t.problems) > 0 {
		return nil, t.err()
	}

	var points []analysis.Point
	for rows := 0; ; rows++ {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			// A broken quote leaves the rest of the file unreadable.
			t.problems = append(t.problems, err.Error())
			return nil, t.err()
		}
		if rows == MaxRows {
			line, _ := cr.FieldPos(0)
			return nil, fmt.Errorf("recorded run: line %d: more than %d readings", line, MaxRows)
		}
		if p, ok := t.row(rec); ok {
			points = append(points, p)
		}
		if len(t.problems) >= maxProblems {
			t.problems = append(t.problems, "… more problems not listed; fix these first")
			return nil, t.err()
		}
	}
	if len(t.problems) > 0 {
		return nil, t.err()
	}
	if len(points) == 0 {
		return nil, errors.New("recorded run: the table has a header but no readings")
	}
	numberPoints(points)
	return points, nil
}

// separator is the field separator of the header row: the one of comma,
// semicolon and tab it holds most of (a header has no decimals), comma
// when it holds none.
func separator(br *bufio.Reader) rune {
	head, _ := br.Peek(64 << 10)
	for _, line := range strings.Split(string(head), "\n") {
		l := strings.TrimSpace(line)
		if l == "" || l[0] == '#' {
			continue
		}
		best, n := ',', strings.Count(l, ",")
		for _, c := range []rune{';', '\t'} {
			if k := strings.Count(l, string(c)); k > n {
				best, n = c, k
			}
		}
		return best
	}
	return ','
}

// table is the state of one read: where the columns are and the problems
// found so far.
type table struct {
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
		return fmt.Errorf("recorded run: %s", t.problems[0])
	}
	return fmt.Errorf("recorded run: %d problems:\n  %s", len(t.problems), strings.Join(t.problems, "\n  "))
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
	if len(rec) != len(t.header) {
		line, _ := t.cr.FieldPos(0)
		t.problems = append(t.problems, fmt.Sprintf("line %d: %d fields, but the header has %d", line, len(rec), len(t.header)))
		return analysis.Point{}, false
	}
	field := func(name string) (string, int) {
		i, ok := t.col[name]
		if !ok {
			return "", i
		}
		return strings.TrimSpace(rec[i]), i
	}
	p := analysis.Point{Kind: analysis.Measurement}
	if s, i := field("kind"); s != "" {
		switch k := analysis.PointKind(strings.ToLower(s)); k {
		case analysis.Measurement, analysis.ZeroBefore, analysis.ZeroAfter:
			p.Kind = k
		default:
			t.problem(i, "%q is not one of %s, %s, %s", s, analysis.Measurement, analysis.ZeroBefore, analysis.ZeroAfter)
		}
	}
	measure := p.Kind == analysis.Measurement

	s, i := field("cycle")
	if c, err := strconv.Atoi(s); err != nil || c < 1 {
		t.problem(i, "%q is not a whole number of 1 or more", s)
	} else {
		p.Cycle = c
	}

	s, i = field("direction")
	switch d := analysis.Direction(strings.ToLower(s)); {
	case d == analysis.Ascending || d == analysis.Descending:
		p.Direction = d
	case s == "" && !measure:
	default:
		t.problem(i, "%q is not %s or %s", s, analysis.Ascending, analysis.Descending)
	}

	s, i = field("unit")
	t.noteMode(i, s)
	u, err := units.Lookup(s)
	if err != nil {
		t.problem(i, "%v", err)
		u = units.Pascal // the numbers are still checked
	}
	number := func(name string, blankOK bool) float64 {
		s, i := field(name)
		if s == "" && blankOK {
			return 0
		}
		v, ok := t.number(s)
		if !ok {
			t.problem(i, "%q is not a number", s)
			return 0
		}
		pa := u.ToPa(v)
		if math.IsInf(pa, 0) {
			t.problem(i, "%q %s is too large", s, u.Symbol)
			return 0
		}
		return pa
	}
	p.Nominal = number("nominal", !measure)
	ref := number("reference", false)
	dut := t.dut(field, number, &p)
	var at time.Time
	if s, i := field("time"); s != "" {
		if at, err = time.Parse(time.RFC3339Nano, s); err != nil {
			t.problem(i, "%q is not an RFC 3339 time such as 2025-03-01T21:04:05Z", s)
		}
	}
	// A typed-in reading is one sample: Count 1, no spread, unless the
	// table gives the window it was averaged from.
	p.Reference = analysis.Window{Mean: ref, Count: 1, Start: at, End: at}
	sd := number("reference_sd", true)
	s, i = field("reference_samples")
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
	p.DUT = analysis.Window{Mean: dut, Count: 1, Start: at, End: at}
	p.Note, _ = field("note")
	return p, len(t.problems) == before
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
