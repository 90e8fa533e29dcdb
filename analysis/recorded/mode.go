package recorded

import "plateau/analysis/units"

// modeSeen is the first mode a unit of the table carried (psig, bar(a)
// …), and where: a table is in one mode, since its reference and device
// columns share each row's unit and nothing in it says the barometric
// pressure that would convert between gauge and absolute.
type modeSeen struct {
	mode units.Mode
	line int
	unit string
}

// noteMode refuses a unit whose mode differs from the table's.
func (t *table) noteMode(col int, unit string) {
	m := units.ModeIn(unit)
	if m == units.ModeUnset {
		return
	}
	if t.modes.mode == units.ModeUnset {
		line, _ := t.cr.FieldPos(col)
		t.modes = modeSeen{mode: m, line: line, unit: unit}
		return
	}
	if m != t.modes.mode {
		t.problem(col, "%q is %s pressure but line %d has %q (%s): a table is in one mode; convert its readings with the barometric pressure of each, or analyse the two apart",
			unit, m, t.modes.line, t.modes.unit, t.modes.mode)
	}
}
