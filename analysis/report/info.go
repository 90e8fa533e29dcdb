// Package report renders an analysis.Result for people and for other
// programs: a terminal table (Text), the stable JSON schema (JSON), one row
// per point for spreadsheets (CSV) and a self-contained printable page with
// charts (HTML). Figures are shown in Info.Unit; JSON keeps pascal.
package report

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"plateau/analysis"
	"plateau/analysis/units"
)

// Info is what the Result does not know: who and what was calibrated, with
// what, under which conditions, and how the figures are to be shown.
type Info struct {
	// Certificate is the calibration certificate this report is for;
	// each field is left out of the report when empty.
	Certificate Certificate       `json:"certificate,omitzero"`
	Device      DeviceIdentity    `json:"device"`
	Reference   ReferenceIdentity `json:"reference"`
	Run         RunIdentity       `json:"run"`
	Conditions  []Condition       `json:"conditions"`
	Procedure   Procedure         `json:"procedure"`
	Unit        units.Unit        `json:"-"` // display unit; the zero Unit means pascal
	GeneratedAt time.Time         `json:"generated_at,omitzero"`
}

// Certificate names the calibration certificate: its number, the
// customer, who calibrated and on which day.
type Certificate struct {
	Number   string    `json:"number,omitempty"`
	Customer string    `json:"customer,omitempty"`
	Operator string    `json:"operator,omitempty"`
	Date     time.Time `json:"date,omitzero"` // the date of calibration
}

// lines are the certificate's given fields, in the order a certificate
// lists them; none when nothing was given.
func (c Certificate) lines() []identityLine {
	var out []identityLine
	for _, l := range []identityLine{{"Certificate number", c.Number}, {"Customer", c.Customer}, {"Calibrated by", c.Operator}, {"Date of calibration", date(c.Date)}} {
		if strings.TrimSpace(l.Value) != "" {
			out = append(out, l)
		}
	}
	return out
}

// DeviceIdentity names the device under test.
type DeviceIdentity struct {
	// Instrument is the device's instrument name in the configuration,
	// which names it among several devices of one run; empty otherwise.
	Instrument   string `json:"instrument,omitempty"`
	ID           string `json:"id"`
	Manufacturer string `json:"manufacturer"`
	Model        string `json:"model"`
	Serial       string `json:"serial"`
}

// ReferenceIdentity names the reference standard and its certificate.
type ReferenceIdentity struct {
	ID          string    `json:"id"`
	Model       string    `json:"model"`
	Serial      string    `json:"serial"`
	Certificate string    `json:"certificate"`
	Expires     time.Time `json:"expires,omitzero"`
	// Kind is what the reference is when it is not an indicating
	// instrument: KindBalance for a pressure balance; empty otherwise.
	Kind string `json:"kind,omitempty"`
}

// KindBalance is the Kind of a pressure balance (dead-weight tester),
// whose pressures are worked out from its loadings at the device's height.
const KindBalance = "pressure balance"

// RunIdentity names the run: a label people read and an id machines match,
// and how the run ended. State is empty for a table recorded elsewhere.
type RunIdentity struct {
	Label string `json:"label"`
	ID    string `json:"id"`
	// State is how the run ended, e.g. "finished", "stopped", "aborted",
	// "running"; Reason says why when it did not finish.
	State  string `json:"state,omitempty"`
	Reason string `json:"reason,omitempty"`
	// Missed lists the planned readings that were not captured.
	Missed []MissedPoint `json:"missed,omitempty"`
}

// MissedPoint is one planned reading the run did not capture.
type MissedPoint struct {
	Cycle     int                `json:"cycle"`
	Direction analysis.Direction `json:"direction,omitempty"`
	Kind      analysis.PointKind `json:"kind"`
	Index     int                `json:"index"` // 0-based, as analysis.Point.Index; printed as Index + 1
	NominalPa float64            `json:"nominal_pa"`
	Reason    string             `json:"reason,omitempty"` // e.g. "timed out"
}

// finished says whether the run ended as planned (or is a recorded table).
func (r RunIdentity) finished() bool {
	return (r.State == "" || r.State == "finished" || r.State == "done") && len(r.Missed) == 0
}

// Condition is one stated condition of the calibration, e.g. medium = oil.
type Condition struct {
	Name  string `json:"name"`
	Value string `json:"value"`
}

// Procedure is the plan the run followed. The decision rule is not here:
// the one that was applied travels in the Result.
type Procedure struct {
	PointsPa []float64 `json:"points_pa"` // planned nominal pressures
	Cycles   int       `json:"cycles"`    // planned measuring cycles
	Method   string    `json:"method"`    // how the comparison was made, e.g. set-by-reference
}

// unit returns the display unit, pascal when none was given.
func (i Info) unit() units.Unit {
	if i.Unit.Pa == 0 {
		return units.Pascal
	}
	return i.Unit
}

// numbers formats the figures of one report consistently.
type numbers struct {
	u        units.Unit
	decimals int // for pressures in u
}

// newNumbers shows pressures one digit finer than the device's resolution,
// so that a mean of several readings is not rounded back to a digit step.
func newNumbers(u units.Unit, resolutionPa float64) numbers {
	d := 3
	if r := u.FromPa(resolutionPa); r > 0 && !math.IsInf(r, 0) {
		d = int(math.Ceil(-math.Log10(r)-1e-9)) + 1
	}
	return numbers{u: u, decimals: min(max(d, 0), 9)}
}

// p formats a pressure given in Pa, without the unit.
func (n numbers) p(pa float64) string {
	v := n.u.FromPa(pa)
	s := strconv.FormatFloat(v, 'f', n.decimals, 64)
	if strings.Trim(s, "-0.") == "" {
		s = strings.TrimPrefix(s, "-") // no "-0.000"
	}
	return s
}

// pu formats a pressure given in Pa, with the unit.
func (n numbers) pu(pa float64) string { return n.p(pa) + " " + n.u.Symbol }

// spec formats a pressure from a specification (a floor, a limit) with all
// the digits it was given, so that a small floor is never shown as zero.
func (n numbers) spec(pa float64) string {
	return strconv.FormatFloat(n.u.FromPa(pa), 'g', 6, 64) + " " + n.u.Symbol
}

func pct(v float64) string { return strconv.FormatFloat(v, 'f', 3, 64) + " %" }

// notEvaluated is printed where a figure could not be computed.
const notEvaluated = "not evaluated"

// ratio formats a ratio such as MPE / U as "12.5 : 1".
func ratio(t *float64) string {
	if t == nil {
		return notEvaluated
	}
	return strconv.FormatFloat(*t, 'f', 1, 64) + " : 1"
}

// puIf formats a pressure with its unit, or "not evaluated".
func (n numbers) puIf(pa float64, ok bool) string {
	if !ok {
		return notEvaluated
	}
	return n.pu(pa)
}

// pIf formats a pressure, or "not evaluated".
func (n numbers) pIf(pa float64, ok bool) string {
	if !ok {
		return notEvaluated
	}
	return n.p(pa)
}

// accuracy describes the device's permissible-error specification.
func (n numbers) accuracy(a analysis.Accuracy) string {
	var parts []string
	if a.EN837Class != 0 {
		parts = append(parts, "class "+strconv.FormatFloat(a.EN837Class, 'g', -1, 64)+" (EN 837-1)")
	}
	if a.ASMEGrade != "" {
		parts = append(parts, "grade "+a.ASMEGrade+" (ASME B40.100)")
	}
	if a.PercentOfSpan != 0 {
		parts = append(parts, strconv.FormatFloat(a.PercentOfSpan, 'g', -1, 64)+" % of span")
	}
	if a.PercentOfReading != 0 {
		parts = append(parts, strconv.FormatFloat(a.PercentOfReading, 'g', -1, 64)+" % of reading")
	}
	if a.FloorPa != 0 {
		parts = append(parts, n.spec(a.FloorPa))
	}
	return strings.Join(parts, " + ")
}

// refUncertainty describes the reference certificate's expanded uncertainty.
func (n numbers) refUncertainty(r analysis.Reference) string {
	var parts []string
	if r.PercentOfReading != 0 {
		parts = append(parts, strconv.FormatFloat(r.PercentOfReading, 'g', -1, 64)+" % of reading")
	}
	if r.FloorPa != 0 {
		parts = append(parts, n.spec(r.FloorPa))
	}
	return fmt.Sprintf("%s (k = %g)", strings.Join(parts, " + "), r.K)
}

// ruleText says which ILAC-G8:09/2019 decision rule was applied and what it means.
func ruleText(r analysis.DecisionRule) string {
	switch r {
	case analysis.RuleSimple:
		return "simple acceptance, guard band 0: pass when |error| ≤ MPE (ILAC-G8:09/2019 §4.2.1)"
	case analysis.RuleGuarded:
		return "binary with guard band w = U: pass when |error| < MPE − U (ILAC-G8:09/2019 §4.2.2)"
	case analysis.RuleFourState:
		return "non-binary with guard band w = U: pass, conditional pass, conditional fail, fail (ILAC-G8:09/2019 §4.2.3)"
	}
	return string(r)
}

// judgementText says how a point's verdict is reached.
const judgementText = "every reading of each direction against the MPE (with the U of one reading: the budget without its hysteresis term), " +
	"the mean error against the MPE (with U), and, where the specification limits it, each cycle's hysteresis; a point takes the worst outcome, the run the worst point"

// meanText says what the mean error is.
const meanText = "midpoint of the ascending and the descending mean (one direction's mean where only one was measured)"

// outcomeText is the verdict as printed.
func outcomeText(o analysis.Outcome) string {
	switch o {
	case analysis.Pass:
		return "PASS"
	case analysis.ConditionalPass:
		return "CONDITIONAL PASS"
	case analysis.ConditionalFail:
		return "CONDITIONAL FAIL"
	case analysis.Fail:
		return "FAIL"
	}
	return strings.ToUpper(string(o))
}

// contributionText names a budget line in words.
func contributionText(name string) string {
	switch name {
	case "reference":
		return "reference standard (certificate)"
	case "resolution":
		return "resolution of the device"
	case "zero_deviation":
		return "zero deviation"
	case "repeatability":
		return "repeatability"
	case "hysteresis":
		return "hysteresis"
	case "head_height":
		return "head correction: height"
	case "head_density":
		return "head correction: fluid density"
	case "reference_stability":
		return "reference stability since calibration"
	case "reference_resolution":
		return "resolution of the reference"
	case "reference_noise":
		return "reference noise over the settled window"
	case "temperature":
		return "temperature effect on the device"
	case "interpolation":
		return "interpolation of the correction curve"
	}
	return name
}

// joinNonEmpty joins the given strings that are not blank.
func joinNonEmpty(sep string, ss ...string) string {
	var out []string
	for _, s := range ss {
		if strings.TrimSpace(s) != "" {
			out = append(out, s)
		}
	}
	return strings.Join(out, sep)
}

// date and stamp give "" for a zero time: the field is then left out.
func date(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.Format("2006-01-02")
}

func stamp(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.Format("2006-01-02 15:04:05 MST")
}

// plannedPoints lists the planned nominals, or the measured ones when no plan was given.
func (n numbers) plannedPoints(info Info, res analysis.Result) string {
	pts := info.Procedure.PointsPa
	if len(pts) == 0 {
		for _, p := range res.Points {
			pts = append(pts, p.NominalPa)
		}
	}
	// Nominals in fixed notation with the resolution's own digits (a
	// nominal is set, not averaged, so it gets no extra digit).
	s := make([]string, len(pts))
	for i, p := range pts {
		s[i] = strconv.FormatFloat(n.u.FromPa(p), 'f', max(n.decimals-1, 0), 64)
	}
	return strings.Join(s, ", ") + " " + n.u.Symbol
}

// cyclesText states the cycles measured, and the plan when it differs.
func cyclesText(info Info, res analysis.Result) string {
	s := strconv.Itoa(res.Cycles) + " measured"
	if info.Procedure.Cycles != 0 && info.Procedure.Cycles != res.Cycles {
		s += fmt.Sprintf(" (%d planned)", info.Procedure.Cycles)
	}
	return s
}

// runState describes how the run ended and what it missed; empty for a
// finished run with every planned reading.
func (n numbers) runState(r RunIdentity) []identityLine {
	if r.finished() {
		return nil
	}
	state := r.State
	if state == "" {
		state = "incomplete"
	}
	var out []identityLine
	out = append(out, identityLine{"Run state", strings.ToUpper(state) + prefixed(": ", r.Reason) + " — the results cover only the readings captured"})
	if len(r.Missed) > 0 {
		ms := make([]string, len(r.Missed))
		for i, m := range r.Missed {
			what := string(m.Direction)
			if m.Kind != "" && m.Kind != analysis.Measurement {
				what = string(m.Kind)
			}
			ms[i] = fmt.Sprintf("cycle %d %s point %d (%s)", m.Cycle, what, m.Index+1, n.pu(m.NominalPa)) + prefixed(": ", m.Reason)
		}
		out = append(out, identityLine{"Readings missed", strings.Join(ms, "; ")})
	}
	return out
}

func itoa(i int) string     { return strconv.Itoa(i) }
func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
