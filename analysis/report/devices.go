package report

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"sort"
	"strings"
	"text/tabwriter"

	"plateau/analysis"
	"plateau/analysis/units"
)

// DeviceReport is one device of a run: its description and its result, or
// why it has none.
type DeviceReport struct {
	Info   Info
	Result analysis.Result
	// Missing says why the device has no result (no reading of it was
	// captured, say); Result is then zero and only Info is shown.
	Missing string
}

// DeviceName is what names the device in a report of several, in the
// device column and field, and what selects it: its instrument's name,
// else its identity number.
func (i Info) DeviceName() string {
	if i.Device.Instrument != "" {
		return i.Device.Instrument
	}
	return i.Device.ID
}

// identityText is a device's identity on one line.
func identityText(d DeviceIdentity) string {
	return joinNonEmpty(" · ", d.ID, joinNonEmpty(" ", d.Manufacturer, d.Model), prefixed("serial ", d.Serial))
}

// summaryRow is one device of the table that opens a report of several.
type summaryRow struct {
	Index, Name, Anchor, Identity, Range, Accuracy, Largest, Span, Verdict, Missed string
	Outcome                                                                        analysis.Outcome
}

func summaryRows(ds []DeviceReport, anchors []string) []summaryRow {
	out := make([]summaryRow, len(ds))
	for i, d := range ds {
		r := summaryRow{Index: itoa(i + 1), Name: d.Info.DeviceName(), Identity: identityText(d.Info.Device), Missed: missedText(d.Info.Run)}
		if anchors != nil {
			r.Anchor = anchors[i]
		}
		if d.Missing != "" {
			r.Verdict = "NO RESULT: " + d.Missing
		} else {
			n := newNumbers(d.Info.unit(), d.Result.Device.ResolutionPa)
			r.Range = n.pu(d.Result.Device.LowerPa) + " … " + n.pu(d.Result.Device.UpperPa)
			r.Accuracy = n.accuracy(d.Result.Device.Accuracy)
			r.Largest = n.pu(d.Result.MaxAbsErrorPa)
			r.Span = n.pu(d.Result.MaxErrorSpanPa) + " (" + pct(d.Result.MaxErrorSpanPercentSpan) + " of span)"
			r.Verdict, r.Outcome = outcomeText(d.Result.Decision), d.Result.Decision
		}
		out[i] = r
	}
	return out
}

// missedText counts the planned readings a device missed, with their
// reasons.
func missedText(r RunIdentity) string {
	if len(r.Missed) == 0 {
		return "none"
	}
	seen := map[string]bool{}
	var why []string
	for _, m := range r.Missed {
		if m.Reason != "" && !seen[m.Reason] {
			seen[m.Reason] = true
			why = append(why, m.Reason)
		}
	}
	sort.Strings(why)
	s := itoa(len(r.Missed))
	if len(why) > 0 {
		s += " (" + strings.Join(why, "; ") + ")"
	}
	return s
}

// anchorsOf gives each device's section an id made of its name's letters,
// digits and dashes, unique in the document.
func anchorsOf(ds []DeviceReport) []string {
	out := make([]string, len(ds))
	used := map[string]bool{}
	for i, d := range ds {
		var b strings.Builder
		for _, r := range strings.ToLower(d.Info.DeviceName()) {
			switch {
			case r >= 'a' && r <= 'z', r >= '0' && r <= '9', r == '-', r == '_':
				b.WriteRune(r)
			default:
				b.WriteByte('-')
			}
		}
		a := "device-" + b.String()
		for k := 2; used[a]; k++ {
			a = "device-" + b.String() + "-" + itoa(k)
		}
		used[a] = true
		out[i] = a
	}
	return out
}

// runLines describe what the devices of a run share: the run and the
// reference standard.
func runLines(ds []DeviceReport) []identityLine {
	info := ds[0].Info
	r := info.Reference
	n := newNumbers(info.unit(), 0)
	var lines identityLines
	lines.add("Run", joinNonEmpty(" · ", info.Run.Label, info.Run.ID))
	if !(RunIdentity{State: info.Run.State}).finished() {
		lines.add("Run state", strings.ToUpper(info.Run.State)+prefixed(": ", info.Run.Reason))
	}
	lines = append(lines, info.Certificate.lines()...)
	lines.add("Devices under test", itoa(len(ds))+", compared at the same steps against one reference")
	lines.add("Reference standard", joinNonEmpty(" · ", r.ID, r.Model, prefixed("serial ", r.Serial), r.Kind))
	lines.add("Reference certificate", joinNonEmpty(", ", r.Certificate, prefixed("valid until ", date(r.Expires))))
	lines.add("Points", n.plannedPoints(info, ds[0].Result))
	lines.add("Generated", stamp(info.GeneratedAt))
	return lines
}

func severalView(ds []DeviceReport) pageView {
	title := joinNonEmpty(" — ", "Calibration report", ds[0].Info.Run.Label, itoa(len(ds))+" devices")
	return pageView{Title: title, Several: true, Run: runLines(ds), Table: summaryRows(ds, anchorsOf(ds))}
}

// TextDevices writes the terminal report of a run: for several devices a
// table of every device first, then each device's report. One device
// prints as Text.
func TextDevices(w io.Writer, ds []DeviceReport) error {
	if len(ds) == 0 {
		return fmt.Errorf("text report: no device to report")
	}
	if len(ds) == 1 && ds[0].Missing == "" {
		return Text(w, ds[0].Info, ds[0].Result)
	}
	bw := bufio.NewWriter(w)
	fmt.Fprintf(bw, "PRESSURE CALIBRATION BY COMPARISON — %d DEVICES UNDER TEST\n\n", len(ds))
	lw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', 0)
	for _, l := range runLines(ds) {
		fmt.Fprintf(lw, "%s\t%s\n", l.Label, l.Value)
	}
	if err := lw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(bw, "\nDevices")
	tw := tabwriter.NewWriter(bw, 0, 0, 2, ' ', 0)
	fmt.Fprint(tw, "  #\tdevice\tidentity\tpermissible error\tlargest |error|\tlargest |error| + U\tverdict\tmissed readings\n")
	for _, r := range summaryRows(ds, nil) {
		fmt.Fprintf(tw, "  %s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", r.Index, r.Name, r.Identity, r.Accuracy, r.Largest, r.Span, r.Verdict, r.Missed)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for i, d := range ds {
		fmt.Fprintf(bw, "\n════ device %d of %d: %s ════\n\n", i+1, len(ds), d.Info.DeviceName())
		if d.Missing != "" {
			if id := identityText(d.Info.Device); id != "" {
				fmt.Fprintln(bw, id)
			}
			fmt.Fprintf(bw, "No result: %s\n", d.Missing)
			continue
		}
		if err := Text(bw, d.Info, d.Result); err != nil {
			return err
		}
	}
	return bw.Flush()
}

// CSVDevices writes one table of every device's points, each row naming
// its device. Pressures are in the display unit of the first device with
// a result (the header says which), so the rows of every device line up.
func CSVDevices(w io.Writer, ds []DeviceReport) error {
	u := units.Pascal
	for i := len(ds) - 1; i >= 0; i-- {
		if ds[i].Missing == "" {
			u = ds[i].Info.unit()
		}
	}
	cw := newCSVWriter(w, u)
	for _, d := range ds {
		if d.Missing == "" {
			cw.rows(d.Info.DeviceName(), d.Result)
		}
	}
	return cw.close()
}

// deviceJSON is one device in the JSON document.
type deviceJSON struct {
	Device  string           `json:"device"`
	Info    infoJSON         `json:"info"`
	Result  *analysis.Result `json:"result,omitempty"`
	Missing string           `json:"missing,omitempty"`
}

func toJSON(d DeviceReport) deviceJSON {
	out := deviceJSON{Device: d.Info.DeviceName(), Info: infoJSON{d.Info, d.Info.unit().Symbol}, Missing: d.Missing}
	if d.Missing == "" {
		res := d.Result
		out.Result = &res
	}
	return out
}

// JSONDevices writes the JSON of a run: one device as JSON writes it, and
// several as {"devices": [{"device": …, "info": …, "result": …}, …]},
// where a device without a result has "missing" (why) instead.
func JSONDevices(w io.Writer, ds []DeviceReport) error {
	if len(ds) == 1 {
		return encodeJSON(w, toJSON(ds[0]))
	}
	doc := struct {
		Devices []deviceJSON `json:"devices"`
	}{make([]deviceJSON, len(ds))}
	for i, d := range ds {
		doc.Devices[i] = toJSON(d)
	}
	return encodeJSON(w, doc)
}

// ReadJSON reads what JSON or JSONDevices wrote back into the devices of
// a report, so that a report made elsewhere (by the daemon) can be shown
// in another format or for one of its devices.
func ReadJSON(r io.Reader) ([]DeviceReport, error) {
	var doc struct {
		deviceJSON
		Devices []deviceJSON `json:"devices"`
	}
	dec := json.NewDecoder(io.LimitReader(r, 256<<20))
	if err := dec.Decode(&doc); err != nil {
		return nil, fmt.Errorf("read report JSON: %w", err)
	}
	all := doc.Devices
	if all == nil {
		all = []deviceJSON{doc.deviceJSON}
	}
	out := make([]DeviceReport, len(all))
	for i, d := range all {
		if d.Result == nil && d.Missing == "" {
			return nil, fmt.Errorf("read report JSON: device %d (%q) has neither a result nor the reason it has none", i+1, d.Device)
		}
		info := d.Info.Info
		if d.Info.DisplayUnit != "" {
			u, err := units.Lookup(d.Info.DisplayUnit)
			if err != nil {
				return nil, fmt.Errorf("read report JSON: device %d (%q): display unit: %w", i+1, d.Device, err)
			}
			info.Unit = u
		}
		out[i] = DeviceReport{Info: info, Missing: d.Missing}
		if d.Result != nil {
			out[i].Result = *d.Result
		}
	}
	return out, nil
}
