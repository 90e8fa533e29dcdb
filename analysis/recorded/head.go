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

// What every kind of table shares: the reader (byte-order mark, separator,
// quoting), the header against its known columns, the loop over the rows
// with its bounds, and the head of a row (kind, cycle, direction, unit,
// time) with its pressures.

// openTable skips a byte-order mark and finds the separator; before, when
// set, reads what comes before the header (a comparison table's loop range).
func openTable(r io.Reader, before func(*bufio.Reader) error) (*csv.Reader, rune, error) {
	br := bufio.NewReader(r)
	if b, err := br.Peek(3); err == nil && string(b) == "\ufeff" {
		br.Discard(3) // the byte-order mark spreadsheets put first
	}
	sep := separator(br)
	if before != nil {
		if err := before(br); err != nil {
			return nil, 0, err
		}
	}
	cr := csv.NewReader(br)
	cr.Comma = sep
	cr.Comment = '#'
	cr.TrimLeadingSpace = sep != '\t'
	cr.FieldsPerRecord = -1 // a short row is one problem among the others
	return cr, sep, nil
}

// readHeader reads the header row into a table named name ("recorded run",
// "table of loadings") that knows the columns known (true: required),
// listed in list for a message; example is a header to suggest for an
// empty file. need adds columns the caller requires besides. Every problem
// of the header is noted.
func readHeader(cr *csv.Reader, sep rune, name, example string, known map[string]bool, list string, need ...string) (*table, error) {
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("%s: empty table (expected a header row such as %q)", name, example)
	}
	if err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	t := &table{name: name, cr: cr, header: header, col: map[string]int{}, decimalComma: sep != ','}
	for i, h := range header {
		c := strings.ToLower(strings.TrimSpace(h))
		if _, ok := known[c]; !ok {
			t.problem(i, "unknown column %q (known: %s)", h, list)
			continue
		}
		if first, dup := t.col[c]; dup {
			t.problem(i, "column %q appears twice (first in column %s)", c, letters(first))
			continue
		}
		t.col[c] = i
	}
	var lacking []string
	for c, required := range known {
		if _, ok := t.col[c]; required && !ok {
			lacking = append(lacking, c)
		}
	}
	for _, c := range need {
		if _, ok := t.col[c]; !ok {
			lacking = append(lacking, c)
		}
	}
	sort.Strings(lacking)
	for _, c := range lacking {
		t.problems = append(t.problems, fmt.Sprintf("header lacks the required column %q", c))
	}
	return t, nil
}

// eachRow hands every row to row, within MaxRows and maxProblems; the
// error lists the problems noted.
func (t *table) eachRow(row func(rec []string)) error {
	if len(t.problems) > 0 {
		return t.err()
	}
	for rows := 0; ; rows++ {
		rec, err := t.cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			// A broken quote leaves the rest of the file unreadable.
			t.problems = append(t.problems, err.Error())
			return t.err()
		}
		if rows == MaxRows {
			line, _ := t.cr.FieldPos(0)
			return fmt.Errorf("%s: line %d: more than %d readings", t.name, line, MaxRows)
		}
		row(rec)
		if len(t.problems) >= maxProblems {
			t.problems = append(t.problems, "… more problems not listed; fix these first")
			return t.err()
		}
	}
	if len(t.problems) > 0 {
		return t.err()
	}
	return nil
}

// rowHead is the start of one row: the point with its kind, cycle and
// direction, the row's unit and time.
type rowHead struct {
	t       *table
	rec     []string
	p       analysis.Point
	unit    units.Unit
	at      time.Time
	measure bool // a measurement row (not a zero reading)
}

// head reads what every row of every table has; false when the row has the
// wrong number of fields (noted as a problem), when nothing else can be read.
func (t *table) head(rec []string) (rowHead, bool) {
	if len(rec) != len(t.header) {
		line, _ := t.cr.FieldPos(0)
		t.problems = append(t.problems, fmt.Sprintf("line %d: %d fields, but the header has %d", line, len(rec), len(t.header)))
		return rowHead{}, false
	}
	h := rowHead{t: t, rec: rec, p: analysis.Point{Kind: analysis.Measurement}}
	if s, i := h.field("kind"); s != "" {
		switch k := analysis.PointKind(strings.ToLower(s)); k {
		case analysis.Measurement, analysis.ZeroBefore, analysis.ZeroAfter:
			h.p.Kind = k
		default:
			t.problem(i, "%q is not one of %s, %s, %s", s, analysis.Measurement, analysis.ZeroBefore, analysis.ZeroAfter)
		}
	}
	h.measure = h.p.Kind == analysis.Measurement
	s, i := h.field("cycle")
	if c, err := strconv.Atoi(s); err != nil || c < 1 {
		t.problem(i, "%q is not a whole number of 1 or more", s)
	} else {
		h.p.Cycle = c
	}
	s, i = h.field("direction")
	switch d := analysis.Direction(strings.ToLower(s)); {
	case d == analysis.Ascending || d == analysis.Descending:
		h.p.Direction = d
	case s == "" && !h.measure:
	default:
		t.problem(i, "%q is not %s or %s", s, analysis.Ascending, analysis.Descending)
	}
	s, i = h.field("unit")
	t.noteMode(i, s)
	u, err := units.Lookup(s)
	if err != nil {
		t.problem(i, "%v", err)
		u = units.Pascal // the numbers are still checked
	}
	h.unit = u
	if s, i := h.field("time"); s != "" {
		if h.at, err = time.Parse(time.RFC3339Nano, s); err != nil {
			t.problem(i, "%q is not an RFC 3339 time such as 2025-03-01T21:04:05Z", s)
		}
	}
	h.p.Note, _ = h.field("note")
	return h, true
}

// field is the named column's text in this row and its index; "" (and
// index 0, so that a problem still has a place) when the table has none.
func (h rowHead) field(name string) (string, int) {
	i, ok := h.t.col[name]
	if !ok {
		return "", 0
	}
	return strings.TrimSpace(h.rec[i]), i
}

// pressure is the named column as a pressure in the row's unit, Pa; a
// blank field is 0 when blankOK.
func (h rowHead) pressure(name string, blankOK bool) float64 {
	s, i := h.field(name)
	if s == "" && blankOK {
		return 0
	}
	v, ok := h.t.number(s)
	if !ok {
		h.t.problem(i, "%q is not a number", s)
		return 0
	}
	pa := h.unit.ToPa(v)
	if math.IsInf(pa, 0) {
		h.t.problem(i, "%q %s is too large", s, h.unit.Symbol)
		return 0
	}
	return pa
}

// window is one typed-in reading at the row's time: one sample, no spread.
func (h rowHead) window(mean float64) analysis.Window {
	return analysis.Window{Mean: mean, Count: 1, Start: h.at, End: h.at}
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
