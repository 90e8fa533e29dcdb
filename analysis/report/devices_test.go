package report

import (
	"bytes"
	"encoding/csv"
	"regexp"
	"strings"
	"testing"

	"plateau/analysis"
)

// severalDevices is the scenario's gauge and a second one of another
// identity (same readings), both named by their instruments, and a third
// with no reading captured. Invented, for the renderings only.
func severalDevices(t testing.TB) []DeviceReport {
	info, res := scenario(t)
	a, b, c := info, info, info
	a.Device.Instrument = "gauge-1"
	b.Device.Instrument, b.Device.ID, b.Device.Serial = "gauge 2", "PG-0418", "A1235"
	c.Device.Instrument, c.Device.ID, c.Device.Serial = "gauge-3", "PG-0419", "A1236"
	c.Run.Missed = []MissedPoint{{Cycle: 1, Direction: analysis.Ascending, Kind: analysis.Measurement, Index: 1, NominalPa: 2e5, Reason: "link down"}}
	return []DeviceReport{{Info: a, Result: res}, {Info: b, Result: res}, {Info: c, Missing: "no reading of this device was captured"}}
}

func renderDevices(t *testing.T, ds []DeviceReport) string {
	t.Helper()
	var b bytes.Buffer
	if err := HTMLDevices(&b, ds); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// The report of several devices is one document: a summary table with a
// row per device, each linked to the device's section, then one section
// per device with its whole report; printed, each section is a named page
// whose footer names the device beside the report's identity.
func TestHTMLSeveralDevicesIsOneDocument(t *testing.T) {
	ds := severalDevices(t)
	page := renderDevices(t, ds)

	rows := regexp.MustCompile(`<tr><td class="num">(\d)</td><td class="name"><a href="#([^"]+)">([^<]+)</a></td>`).FindAllStringSubmatch(page, -1)
	if len(rows) != 3 {
		t.Fatalf("summary table has %d linked rows, want 3:\n%s", len(rows), page)
	}
	sections := regexp.MustCompile(`<section class="device" id="([^"]+)">`).FindAllStringSubmatch(page, -1)
	if len(sections) != 3 {
		t.Fatalf("%d device sections, want 3", len(sections))
	}
	for i, want := range []struct{ anchor, name string }{{"device-gauge-1", "gauge-1"}, {"device-gauge-2", "gauge 2"}, {"device-gauge-3", "gauge-3"}} {
		if rows[i][2] != want.anchor || rows[i][3] != want.name || sections[i][1] != want.anchor {
			t.Errorf("device %d: row links #%s (%s), section id %s; want #%s (%s)", i+1, rows[i][2], rows[i][3], sections[i][1], want.anchor, want.name)
		}
		if !strings.Contains(page, "@page d"+itoa(i+1)+" ") || !strings.Contains(page, "#"+want.anchor+" { page: d"+itoa(i+1)+"; }") {
			t.Errorf("device %d has no named print page", i+1)
		}
	}
	// Two devices with results, four charts each; the third says why it
	// has none, in the table and in its section.
	if got := strings.Count(page, "<svg"); got != 8 {
		t.Errorf("%d charts, want 8", got)
	}
	if got := strings.Count(page, `<section class="points">`); got != 2 {
		t.Errorf("%d point tables, want 2", got)
	}
	for _, want := range []string{
		"Calibration report — as found &amp; adjusted — 3 devices", "<h2>Devices under test</h2>",
		"PG-0418 · Example Gauges DG-10 &lt;digital&gt; · serial A1235", `<td class="o-conditional-pass">CONDITIONAL PASS</td>`,
		"NO RESULT: no reading of this device was captured", "<td>1 (link down)</td>", "<td>none</td>",
		`<p class="missing">No result: no reading of this device was captured</p>`,
		"Device 2 of 3: gauge 2 — PG-0418", "counter(page)", "counter(pages)", "break-before: page",
		// The report's identity on every page, CSS-escaped: "&" and "<" never raw.
		`content: "Calibration report — as found \26  adjusted — 3 devices · run-0042";`,
		`content: "Calibration report — as found \26  adjusted — 3 devices · run-0042 · Device 2 of 3: gauge 2";`,
		"Device 2 of 3: gauge 2 — PG-0418 · Example Gauges DG-10 &lt;digital&gt; · serial A1235</h2>",
	} {
		if !strings.Contains(page, want) {
			t.Errorf("document lacks %q", want)
		}
	}
	if strings.Count(page, "<html") != 1 || strings.Count(page, "<body>") != 1 {
		t.Error("not one document")
	}
	for i, part := range strings.Split(page, "<svg")[1:] {
		if err := wellFormed("<svg" + part[:strings.Index(part, "</svg>")+len("</svg>")]); err != nil {
			t.Errorf("chart %d is not well-formed: %v", i+1, err)
		}
	}
}

// One device renders as it always has: no summary table, no device
// section; the identity and the page number are on every printed page.
func TestHTMLOneDeviceHasNoSummary(t *testing.T) {
	info, res := scenario(t)
	page := renderHTML(t, info, res)
	for _, banned := range []string{`<section class="device"`, "Devices under test", "@page d1"} {
		if strings.Contains(page, banned) {
			t.Errorf("the report of one device holds %q", banned)
		}
	}
	if !strings.Contains(page, `content: "Calibration report — PG-0417 — as found \26  adjusted · run-0042";`) || !strings.Contains(page, "counter(page)") {
		t.Error("the report of one device has no identity or page number on its printed pages")
	}
}

// CSV names the device of every row, one table for every device; JSON has
// a device field, and a list of devices for several (one without a result
// says why). Reading the JSON back gives the same reports.
func TestCSVAndJSONCarryTheDevice(t *testing.T) {
	ds := severalDevices(t)
	var b bytes.Buffer
	if err := CSVDevices(&b, ds); err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	count := map[string]int{}
	for _, r := range rows[1:] {
		count[r[0]]++
	}
	if rows[0][0] != "device" || rows[0][2] != "nominal_bar" || count["gauge-1"] != 6 || count["gauge 2"] != 6 || len(count) != 2 {
		t.Errorf("CSV header %q, rows per device %v; want a device column and 6 rows each of gauge-1 and gauge 2", rows[0][:3], count)
	}

	b.Reset()
	if err := JSONDevices(&b, ds); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"devices": [`, `"device": "gauge 2"`, `"instrument": "gauge-1"`, `"missing": "no reading of this device was captured"`} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("JSON lacks %s", want)
		}
	}
	back, err := ReadJSON(bytes.NewReader(b.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	var again bytes.Buffer
	if err := JSONDevices(&again, back); err != nil {
		t.Fatal(err)
	}
	if again.String() != b.String() {
		t.Error("JSON read back and written again differs")
	}
	if renderDevices(t, back) != renderDevices(t, ds) {
		t.Error("the HTML of the JSON read back differs")
	}

	b.Reset()
	if err := JSONDevices(&b, ds[1:2]); err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(b.String(), "{\n  \"device\": \"gauge 2\",\n  \"info\"") {
		t.Errorf("JSON of one device does not start with its device:\n%.80s", b.String())
	}
}

// The text report of several devices prints the summary, then each device.
func TestTextSeveralDevices(t *testing.T) {
	var b bytes.Buffer
	if err := TextDevices(&b, severalDevices(t)); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	order := []string{"3 DEVICES UNDER TEST", "Devices", "gauge 2  PG-0418 · Example Gauges DG-10 <digital> · serial A1235",
		"════ device 1 of 3: gauge-1 ════", "VERDICT: CONDITIONAL PASS", "════ device 2 of 3: gauge 2 ════", "VERDICT: CONDITIONAL PASS",
		"════ device 3 of 3: gauge-3 ════", "No result: no reading of this device was captured"}
	at := 0
	for _, want := range order {
		i := strings.Index(out[at:], want)
		if i < 0 {
			t.Fatalf("text lacks %q after position %d:\n%s", want, at, out)
		}
		at += i + len(want)
	}
}

func TestReadJSONRefuses(t *testing.T) {
	for _, c := range []struct{ in, want string }{
		{`{"devices": [{"device": "a"}]}`, "neither a result nor the reason"},
		{`{"device": "a", "info": {"display_unit": "furlong"}, "result": {}}`, "display unit"},
		{`[1, 2]`, "read report JSON"},
	} {
		if _, err := ReadJSON(strings.NewReader(c.in)); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want %q", c.in, err, c.want)
		}
	}
}

// The daemon's JSON is read back by the command line: never a panic.
func FuzzReadJSON(f *testing.F) {
	var b bytes.Buffer
	if err := JSONDevices(&b, severalDevices(f)); err != nil {
		f.Fatal(err)
	}
	f.Add(b.String())
	f.Add(`{"device":"a","info":{},"result":{"points":[{}]}}`)
	f.Fuzz(func(t *testing.T, s string) {
		ds, err := ReadJSON(strings.NewReader(s))
		if err != nil {
			return
		}
		// Whatever was read renders, or says why not, without a panic.
		_ = TextDevices(&bytes.Buffer{}, ds)
		_ = CSVDevices(&bytes.Buffer{}, ds)
	})
}
