package recorded

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"sort"
	"strconv"
	"strings"
	"time"

	"plateau/analysis"
	"plateau/analysis/balance"
	"plateau/analysis/units"
)

// A table of loadings is a run on a pressure balance written down by hand:
// instead of a reference reading, each row names the pieces on the piston,
// and the reference pressure is worked out with the pressure-balance
// equation. Its header names these columns, in any order and any case:
//
//	cycle               required  measuring cycle, 1, 2, …
//	direction           required on measurement rows: up or down
//	nominal             required on measurement rows: the target pressure (unit column)
//	loading             required on measurement rows: the pieces loaded, e.g. P1+M1+M2;
//	                              blank on zero rows and at a nominal of 0 (the balance is vented)
//	piston_temperature  the piston temperature, °C; required on measurement rows
//	                    unless the configuration enters one for the run
//	dut                 required  the device under test's reading
//	unit                required  unit of nominal and dut on this row
//	kind, time, note    optional, as in a comparison table
//
// Separators, quoting, decimal commas and the byte-order mark are read as
// in a comparison table, and every bad field is reported at once by line,
// column letter and header.

var loadingColumns = map[string]bool{
	"cycle": true, "direction": true, "nominal": true, "loading": true, "dut": true, "unit": true,
	"piston_temperature": false, "kind": false, "time": false, "note": false,
}

// Balance is how a table of loadings is evaluated: the balance and the
// conditions every loading shares (air, head, residual pressure, and the
// piston temperature when TemperatureEntered).
type Balance struct {
	Setup              balance.Setup
	Conditions         balance.Conditions
	TemperatureEntered bool // Conditions.PistonTempC holds for every row; a column overrides it
}

// Loadings is a table of loadings evaluated: the points, with the reference
// worked out at the device's level, and each measurement's result in the
// order of the points (zero rows have none).
type Loadings struct {
	Points  []analysis.Point
	Results []balance.Result
}

// IsLoadings says whether a table's header has a loading column, so that
// its reference is worked out from a balance; it reads only the header.
func IsLoadings(r io.Reader) bool {
	br := bufio.NewReader(r)
	if b, err := br.Peek(3); err == nil && string(b) == "\ufeff" {
		br.Discard(3)
	}
	cr := csv.NewReader(br)
	cr.Comma = separator(br)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	header, err := cr.Read()
	if err != nil {
		return false
	}
	for _, h := range header {
		if strings.EqualFold(strings.TrimSpace(h), "loading") {
			return true
		}
	}
	return false
}

// ReadLoadings parses a table of loadings and works out each row's
// reference pressure with b. Its error lists every bad field.
func ReadLoadings(r io.Reader, b Balance) (Loadings, error) {
	if err := b.Setup.Validate(); err != nil {
		return Loadings{}, fmt.Errorf("pressure balance: %w", err)
	}
	br := bufio.NewReader(r)
	if p, err := br.Peek(3); err == nil && string(p) == "\ufeff" {
		br.Discard(3)
	}
	sep := separator(br)
	cr := csv.NewReader(br)
	cr.Comma = sep
	cr.Comment = '#'
	cr.TrimLeadingSpace = sep != '\t'
	cr.FieldsPerRecord = -1
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return Loadings{}, errors.New("table of loadings: empty (expected a header row such as \"cycle,direction,nominal,loading,piston_temperature,dut,unit\")")
	}
	if err != nil {
		return Loadings{}, fmt.Errorf("table of loadings: %w", err)
	}
	t := table{cr: cr, header: header, col: map[string]int{}, decimalComma: sep != ','}
	for i, h := range header {
		name := strings.ToLower(strings.TrimSpace(h))
		if _, known := loadingColumns[name]; !known {
			t.problem(i, "unknown column %q (known: cycle, direction, nominal, loading, piston_temperature, dut, unit, kind, time, note)", h)
			continue
		}
		if first, dup := t.col[name]; dup {
			t.problem(i, "column %q appears twice (first in column %s)", name, letters(first))
			continue
		}
		t.col[name] = i
	}
	var lacking []string
	for name, required := range loadingColumns {
		if _, ok := t.col[name]; required && !ok {
			lacking = append(lacking, name)
		}
	}
	if _, ok := t.col["piston_temperature"]; !ok && !b.TemperatureEntered {
		lacking = append(lacking, "piston_temperature")
	}
	sort.Strings(lacking)
	for _, name := range lacking {
		t.problems = append(t.problems, fmt.Sprintf("header lacks the required column %q", name))
	}
	if len(t.problems) > 0 {
		return Loadings{}, t.loadErr()
	}
	var out Loadings
	for rows := 0; ; rows++ {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.problems = append(t.problems, err.Error())
			return Loadings{}, t.loadErr()
		}
		if rows == MaxRows {
			line, _ := cr.FieldPos(0)
			return Loadings{}, fmt.Errorf("table of loadings: line %d: more than %d readings", line, MaxRows)
		}
		if p, res, ok := t.loadingRow(rec, b); ok {
			out.Points = append(out.Points, p)
			if res != nil {
				out.Results = append(out.Results, *res)
			}
		}
		if len(t.problems) >= maxProblems {
			t.problems = append(t.problems, "… more problems not listed; fix these first")
			return Loadings{}, t.loadErr()
		}
	}
	if len(t.problems) > 0 {
		return Loadings{}, t.loadErr()
	}
	if len(out.Points) == 0 {
		return Loadings{}, errors.New("table of loadings: the table has a header but no readings")
	}
	numberPoints(out.Points)
	return out, nil
}

// loadErr is the table's error under the name of this kind of table.
func (t *table) loadErr() error {
	return errors.New("table of loadings" + strings.TrimPrefix(t.err().Error(), "recorded run"))
}

// loadingRow reads one row; every bad field is noted as a problem. A
// measurement row also gives the balance's result.
func (t *table) loadingRow(rec []string, b Balance) (analysis.Point, *balance.Result, bool) {
	before := len(t.problems)
	if len(rec) != len(t.header) {
		line, _ := t.cr.FieldPos(0)
		t.problems = append(t.problems, fmt.Sprintf("line %d: %d fields, but the header has %d", line, len(rec), len(t.header)))
		return analysis.Point{}, nil, false
	}
	field := func(name string) (string, int) {
		i, ok := t.col[name]
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
	u, err := units.Lookup(s)
	if err != nil {
		t.problem(i, "%v", err)
		u = units.Pascal
	}
	pressure := func(name string, blankOK bool) float64 {
		s, i := field(name)
		if s == "" && blankOK {
			return 0
		}
		v, ok := t.number(s)
		if !ok {
			t.problem(i, "%q is not a number", s)
			return 0
		}
		return u.ToPa(v)
	}
	p.Nominal = pressure("nominal", !measure)
	dut := pressure("dut", false)
	var at time.Time
	if s, i := field("time"); s != "" {
		if at, err = time.Parse(time.RFC3339Nano, s); err != nil {
			t.problem(i, "%q is not an RFC 3339 time such as 2025-03-01T21:04:05Z", s)
		}
	}
	p.DUT = analysis.Window{Mean: dut, Count: 1, Start: at, End: at}
	p.Note, _ = field("note")

	cond := b.Conditions
	load, li := field("loading")
	if s, i := field("piston_temperature"); s != "" {
		if v, ok := t.number(s); ok {
			cond.PistonTempC = v
		} else {
			t.problem(i, "%q is not a temperature in °C", s)
		}
	} else if measure && !b.TemperatureEntered {
		t.problem(i, "is required: the piston temperature in °C when this loading was read")
	}
	var res *balance.Result
	switch {
	case !measure && load != "":
		t.problem(li, "a zero reading is taken with the balance vented: leave the loading blank")
	case !measure || (load == "" && p.Nominal == 0):
		// Vented: the reference is zero gauge pressure (a measurement at a
		// nominal of zero is read vented too).
	default:
		ids, err := balance.ParseLoading(load)
		if err != nil {
			t.problem(li, "%v", err)
			break
		}
		if len(t.problems) > before {
			break // the conditions are not all known
		}
		cond.Loaded = ids
		r, err := b.Setup.Pressure(cond)
		if err != nil {
			t.problem(li, "%v", err)
			break
		}
		res = &r
		p.Reference = analysis.Window{Mean: r.DevicePa, Count: 1, Start: at, End: at}
	}
	if res == nil {
		p.Reference = analysis.Window{Count: 1, Start: at, End: at}
	}
	return p, res, len(t.problems) == before
}
