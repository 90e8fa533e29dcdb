package recorded

import (
	"errors"
	"fmt"
	"io"
	"strings"

	"plateau/analysis"
	"plateau/analysis/balance"
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
	cr, _, err := openTable(r, nil)
	if err != nil {
		return false
	}
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
	cr, sep, err := openTable(r, nil)
	if err != nil {
		return Loadings{}, err
	}
	var need []string
	if !b.TemperatureEntered {
		need = append(need, "piston_temperature")
	}
	t, err := readHeader(cr, sep, "table of loadings", "cycle,direction,nominal,loading,piston_temperature,dut,unit", loadingColumns,
		"cycle, direction, nominal, loading, piston_temperature, dut, unit, kind, time, note", need...)
	if err != nil {
		return Loadings{}, err
	}
	var out Loadings
	if err := t.eachRow(func(rec []string) {
		if p, res, ok := t.loadingRow(rec, b); ok {
			out.Points = append(out.Points, p)
			if res != nil {
				out.Results = append(out.Results, *res)
			}
		}
	}); err != nil {
		return Loadings{}, err
	}
	if len(out.Points) == 0 {
		return Loadings{}, errors.New("table of loadings: the table has a header but no readings")
	}
	numberPoints(out.Points)
	return out, nil
}

// loadingRow reads one row; every bad field is noted as a problem. A
// measurement row also gives the balance's result.
func (t *table) loadingRow(rec []string, b Balance) (analysis.Point, *balance.Result, bool) {
	before := len(t.problems)
	h, ok := t.head(rec)
	if !ok {
		return analysis.Point{}, nil, false
	}
	p, measure, field := h.p, h.measure, h.field
	p.Nominal = h.pressure("nominal", !measure)
	p.DUT = h.window(h.pressure("dut", false))

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
		p.Reference = h.window(r.DevicePa)
	}
	if res == nil {
		p.Reference = h.window(0)
	}
	return p, res, len(t.problems) == before
}
