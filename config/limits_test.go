package config

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"
)

// base is a complete, valid file; tests append or replace keys.
const base = `
device: {upper: 16 bar, resolution: 0.01 bar, class: "1"}
reference: {uncertainty: 0.01 %}
instruments:
  - {name: ref, role: reference, link: {kind: sim}, sim_part: reference}
  - {name: dut, role: device, link: {kind: sim}, sim_part: device}
`

func TestBaseIsClean(t *testing.T) {
	cfg, err := Parse([]byte(base), "base.yaml")
	if err != nil {
		t.Fatal(err)
	}
	// Its only warning: no decision rule is assumed.
	if len(cfg.Warnings) != 1 || cfg.Warnings[0].Key != "procedure.decision" {
		t.Fatalf("warnings: %v", cfg.Warnings)
	}
}

// numericKeys lists every key whose default is a number or a duration.
func numericKeys() []string {
	var keys []string
	for k, v := range defaults() {
		switch v.(type) {
		case int, int64, float64, time.Duration:
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	return keys
}

// withKey returns base with key set to v (nested as the key says).
func withKey(t *testing.T, key string, v any) []byte {
	t.Helper()
	var m map[string]any
	if err := yaml.Unmarshal([]byte(base), &m); err != nil {
		t.Fatal(err)
	}
	parts := strings.Split(key, ".")
	at := m
	for _, p := range parts[:len(parts)-1] {
		next, ok := at[p].(map[string]any)
		if !ok {
			next = map[string]any{}
			at[p] = next
		}
		at = next
	}
	at[parts[len(parts)-1]] = v
	out, err := yaml.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// No key takes a number that is not finite, from the file or from the
// environment: .nan > limit is false, so a NaN limit never trips.
func TestNonFiniteRefusedEverywhere(t *testing.T) {
	keys := numericKeys()
	if len(keys) < 30 {
		t.Fatalf("only %d numeric keys", len(keys))
	}
	for _, key := range keys {
		for _, v := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
			t.Run(fmt.Sprint(key, "=", v), func(t *testing.T) {
				_, err := Parse(withKey(t, key, v), "nan.yaml")
				p, ok := AsProblems(err)
				if !ok || !strings.Contains(p.Error(), key) || !strings.Contains(p.Error(), "finite") {
					t.Fatalf("want a problem naming %s as not finite, got %v", key, err)
				}
			})
		}
		t.Run(key+" from the environment", func(t *testing.T) {
			t.Setenv(EnvName(key), "NaN")
			_, err := Parse([]byte(base), "env.yaml")
			p, ok := AsProblems(err)
			if !ok || !strings.Contains(p.Error(), "environment "+EnvName(key)) {
				t.Fatalf("want a problem naming %s, got %v", EnvName(key), err)
			}
		})
	}
	// The same in lists of structs and in quantities.
	for _, extra := range []string{
		"  - {name: src, role: source, unit: bar, link: {kind: modbus-tcp, address: \"127.0.0.1:502\"}, value: {scale: .nan}, source: {vent_coil: 0}}\n",
		"  - {name: amb, role: ambient, unit: bar, link: {kind: modbus-tcp, address: \"127.0.0.1:502\"}, value: {offset: -.inf}}\n",
	} {
		if _, err := Parse([]byte(base+extra), "list.yaml"); err == nil || !strings.Contains(err.Error(), "not a finite number") {
			t.Errorf("%s: got %v", extra, err)
		}
	}
	if _, err := Parse([]byte(strings.Replace(base, "16 bar", "inf bar", 1)), "q.yaml"); err == nil || !strings.Contains(err.Error(), "device.upper") {
		t.Errorf("a quantity of inf bar: got %v", err)
	}
}

func TestCountsAndDurations(t *testing.T) {
	tests := []struct {
		yaml, want string
	}{
		{"procedure: {cycles: 2.5}", "procedure.cycles: 2.5 is not a whole number: give a count such as 3"},
		{"procedure: {cycles: 1e300}", "procedure.cycles: 1e+300 is too large"},
		{"procedure: {cycles: \"3\"}", ""},
		{"procedure: {settle: {window: 30}}", "procedure.settle.window: 30 has no unit"},
		{"procedure: {settle: {window: \"30\"}}", "procedure.settle.window: 30 has no unit"},
		{"procedure: {settle: {window: 30 seconds}}", `"30 seconds" is not a duration`},
		{"procedure: {hold: 0}", ""},
		{"procedure: {cycles: true}", "procedure.cycles: expected a whole number, found true"},
		{"listen: {allow_remote: 1}", "listen.allow_remote: expected true or false, found 1"},
	}
	for _, tc := range tests {
		t.Run(tc.yaml, func(t *testing.T) {
			_, err := Parse([]byte(base+tc.yaml+"\n"), "t.yaml")
			switch {
			case tc.want == "" && err != nil:
				t.Fatalf("want no problem, got %v", err)
			case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
				t.Fatalf("want %q, got %v", tc.want, err)
			}
		})
	}
}

// A file far beyond any bench's is refused before it is parsed, by Load
// (from its size on disk) and by Parse.
func TestSizeLimit(t *testing.T) {
	big := bytes.Repeat([]byte("# padding\n"), 1<<20) // 10 MiB
	if _, err := Parse(big, "big.yaml"); err == nil || !strings.Contains(err.Error(), "more than a configuration file may hold") {
		t.Fatalf("Parse: %v", err)
	}
	path := filepath.Join(t.TempDir(), "big.yaml")
	if err := os.WriteFile(path, big, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Load(path); err == nil || !strings.Contains(err.Error(), "10485760 bytes") {
		t.Fatalf("Load: %v", err)
	}
	// Just under the limit, 80 000 unknown keys are all reported, the
	// listing capped.
	var b strings.Builder
	for i := 0; b.Len() < MaxFileSize-20; i++ {
		fmt.Fprintf(&b, "k%d: 1\n", i)
	}
	_, err := Parse([]byte(b.String()), "keys.yaml")
	p, ok := AsProblems(err)
	if !ok || p.Len() < 80000 || strings.Count(p.Error(), "\n") > maxListed+2 || !strings.Contains(p.Error(), "more") {
		t.Fatalf("got %d problems, %d lines", p.Len(), strings.Count(err.Error(), "\n"))
	}
}

// A million points cannot fit in a file plateau reads; a long list that
// does fit is refused by count.
func TestPointCount(t *testing.T) {
	var b strings.Builder
	b.WriteString(base + "procedure:\n  points:\n")
	for i := 0; i < 1_000_000; i++ {
		b.WriteString("    - 1 bar\n")
	}
	if _, err := Parse([]byte(b.String()), "million.yaml"); err == nil || !strings.Contains(err.Error(), "more than a configuration file may hold") {
		t.Fatalf("a million points: %v", err)
	}
	pts := make([]string, 5000)
	for i := range pts {
		pts[i] = fmt.Sprintf("%g bar", float64(i)*16/5000)
	}
	_, err := Parse([]byte(base+"procedure: {points: ["+strings.Join(pts, ", ")+"]}\n"), "many.yaml")
	if err == nil || !strings.Contains(err.Error(), "a plan has at most 100 points") {
		t.Fatalf("5000 points: %v", err)
	}
}

// The same file gives the same list, in the same order, every time.
func TestDeterministicOrder(t *testing.T) {
	bad := `
device: {upper: 16 bar, resolution: 0.01 bar, class: "1"}
reference: {uncertainty: 0.01 %}
procedure: {exercise_hold: -1s, top_hold: -1s, hold: -1s}
simulator: {faults: {drop: 2, slow: 2, bad_crc: 2, garbage: 2, stuck: 2, spike: 2, slow_by: -1s, stuck_for: -1s}}
`
	first := ""
	for i := 0; i < 30; i++ {
		_, err := Parse([]byte(bad), "order.yaml")
		if err == nil {
			t.Fatal("no problems")
		}
		if i == 0 {
			first = err.Error()
		} else if err.Error() != first {
			t.Fatalf("order changed:\n%s\n---\n%s", first, err)
		}
	}
}

func TestInvalidUTF8NamesTheLine(t *testing.T) {
	data := []byte(base + "procedure:\n  decision: \"simpl\xff\"\n")
	_, err := Parse(data, "bytes.yaml")
	if err == nil || !strings.Contains(err.Error(), "bytes.yaml:8: column 19: the file is not UTF-8 text") {
		t.Fatalf("got %v", err)
	}
	utf16 := append([]byte{0xFF, 0xFE}, []byte("d\x00e\x00")...)
	if _, err := Parse(utf16, "utf16.yaml"); err == nil || !strings.Contains(err.Error(), "utf16.yaml:1: column 1") {
		t.Fatalf("UTF-16: %v", err)
	}
}

// Environment problems name the variable, never a line of the file, even
// when the key is also in the file.
func TestEnvironmentProblemsNameTheVariable(t *testing.T) {
	t.Setenv("PLATEAU_PROCEDURE_CYCLES", "0")
	_, err := Parse([]byte(base+"procedure:\n  cycles: 2\n"), "env.yaml")
	if err == nil || !strings.Contains(err.Error(), `environment PLATEAU_PROCEDURE_CYCLES="0" (procedure.cycles): the number of cycles is from 1 to 1000`) ||
		strings.Contains(err.Error(), "env.yaml:8") {
		t.Fatalf("got %v", err)
	}
}

// A list from the environment: a bad entry names the variable too.
func TestEnvironmentListEntry(t *testing.T) {
	t.Setenv("PLATEAU_PROCEDURE_POINTS", "0 %, 50 %, 200 %")
	_, err := Parse([]byte(base+"procedure:\n  points: [0 %, 100 %]\n"), "env.yaml")
	want := `environment PLATEAU_PROCEDURE_POINTS="200 %" (procedure.points[2]): must be from 0 % to 100 % of span`
	if err == nil || !strings.Contains(err.Error(), want) {
		t.Fatalf("want %q, got %v", want, err)
	}
}

func TestUnknownVariableIsAWarning(t *testing.T) {
	t.Setenv("PLATEAU_SAFETY_MAX_PRESURE", "10 bar")
	t.Setenv("PLATEAU_TOKEN", "secret") // read by the commands, not a key
	cfg, err := Parse([]byte(base+"procedure:\n  decision: simple\n"), "env.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Warnings) != 1 || !strings.Contains(cfg.Warnings[0].String(), "did you mean PLATEAU_SAFETY_MAX_PRESSURE?") {
		t.Fatalf("warnings: %v", cfg.Warnings)
	}
}

func TestReferenceExpired(t *testing.T) {
	cfg, err := Parse([]byte(base+"reference: {uncertainty: 0.01 %, expires: 2030-06-30, id: R-7}\n"), "ref.yaml")
	if err == nil {
		// base already has reference:, so the second one is refused
		t.Fatal("a repeated top-level key must be refused")
	}
	file := strings.Replace(base, "reference: {uncertainty: 0.01 %}", "reference: {uncertainty: 0.01 %, expires: 2030-06-30, id: R-7}", 1)
	if cfg, err = Parse([]byte(file), "ref.yaml"); err != nil {
		t.Fatal(err)
	}
	day := func(s string) time.Time {
		d, err := time.ParseInLocation("2006-01-02 15:04", s, time.Local)
		if err != nil {
			t.Fatal(err)
		}
		return d
	}
	for _, tc := range []struct {
		now     string
		expired bool
	}{
		{"2030-06-29 12:00", false},
		{"2030-06-30 23:59", false}, // valid through the date
		{"2030-07-01 00:00", true},
		{"2031-01-01 08:00", true},
	} {
		err := cfg.ReferenceExpired(day(tc.now))
		if (err != nil) != tc.expired {
			t.Errorf("%s: expired %v, want %v", tc.now, err, tc.expired)
		}
		if err != nil && !strings.Contains(err.Error(), "R-7: calibration expired on 2030-06-30") {
			t.Errorf("message: %v", err)
		}
	}
}

// Every link and value setting a driver reads has its value from here,
// so that no driver keeps a default of its own.
func TestInstrumentDefaultsComplete(t *testing.T) {
	kinds := []string{LinkModbusTCP, LinkModbusRTU, LinkModbusRTUTCP, LinkSerial}
	for _, kind := range kinds {
		in := Instrument{Name: "x", Link: Link{Kind: kind}}
		if err := CompleteInstrument(&in); err != nil {
			t.Fatal(err)
		}
		l := in.Link
		if l.UnitID == 0 || l.Baud == 0 || l.DataBits == 0 || l.Parity == "" || l.StopBits == 0 || l.Timeout == 0 || l.Backoff == 0 || in.Poll == 0 {
			t.Errorf("%s: link left unset: %+v poll %v", kind, l, in.Poll)
		}
		for name, v := range map[string]ValueRead{"value": in.Value, "setpoint": in.Set.Setpoint} {
			if v.Table == "" || v.Type == "" || v.WordOrder == "" || v.Scale == 0 {
				t.Errorf("%s %s left unset: %+v", kind, name, v)
			}
		}
		if in.Line.Terminator == "" || len(in.Line.Overload) == 0 {
			t.Errorf("%s: line protocol left unset: %+v", kind, in.Line)
		}
	}
	// Modbus serial line defaults: 19200 Bd, even parity (common practice,
	// the Modbus serial line guide's defaults).
	rtu := Instrument{Link: Link{Kind: LinkModbusRTU}}
	_ = CompleteInstrument(&rtu)
	if rtu.Link.Baud != 19200 || rtu.Link.Parity != "even" || rtu.Link.Pause <= 0 {
		t.Errorf("RTU defaults: %+v", rtu.Link)
	}
	loop := Instrument{Name: "tx", Unit: "mA", Loop: CurrentLoop{Enabled: true, Lower: "-1 bar", Upper: "9 bar"}}
	if err := CompleteInstrument(&loop); err != nil || loop.Loop.LowerPa != -1e5 || loop.Loop.UpperPa != 9e5 {
		t.Errorf("loop: %v %+v", err, loop.Loop)
	}
	bad := Instrument{Name: "tx", Unit: "mA", Loop: CurrentLoop{Enabled: true, Lower: "0", Upper: "9 bar"}}
	if err := CompleteInstrument(&bad); err == nil || !strings.Contains(err.Error(), "current_loop.lower") {
		t.Errorf("bad loop: %v", err)
	}
}

// The struct's keys and the defaults agree: every key of the file has a
// default (environment overrides need one) and every default is a key.
func TestDefaultsMatchKeys(t *testing.T) {
	var walk func(t reflect.Type, prefix string, out map[string]bool)
	walk = func(t reflect.Type, prefix string, out map[string]bool) {
		for name, ft := range fieldsOf(t) {
			key := join(prefix, name)
			if ft.Kind() == reflect.Struct && ft != reflect.TypeOf(time.Time{}) {
				walk(ft, key, out)
				continue
			}
			out[key] = true
		}
	}
	keys := map[string]bool{}
	walk(reflect.TypeOf(Config{}), "", keys)
	delete(keys, "instruments")       // a list, from the file only
	delete(keys, "simulator.devices") // a list, from the file only
	for k := range keys {
		if _, ok := defaults()[k]; !ok {
			t.Errorf("key %s has no default", k)
		}
	}
	for k := range defaults() {
		if !keys[k] {
			t.Errorf("default %s is no key", k)
		}
	}
}

// FuzzDecodeValue: whatever text an environment variable holds, decoding
// it for a number, a count, a duration or a switch either gives a sound
// value or an error in plain words.
func FuzzDecodeValue(f *testing.F) {
	for _, s := range []string{"3", "2.5", "NaN", "-Inf", "1e400", "30", "30s", "-5s", "0x10", "yes", "", " 7 ", "9223372036854775807"} {
		f.Add(s)
	}
	str := reflect.TypeOf("")
	f.Fuzz(func(t *testing.T, s string) {
		for _, to := range []reflect.Type{reflect.TypeOf(0), reflect.TypeOf(int64(0)), reflect.TypeOf(0.0), durationType, reflect.TypeOf(false)} {
			v, err := decodeHook(str, to, s)
			if err != nil {
				if m := err.Error(); strings.Contains(m, "strconv") || strings.Contains(m, "unconvertible") {
					t.Fatalf("%q as %v: jargon %q", s, to, m)
				}
				continue
			}
			switch x := v.(type) {
			case float64:
				if math.IsNaN(x) || math.IsInf(x, 0) {
					t.Fatalf("%q as %v gave %v", s, to, x)
				}
			case int64:
				if x > maxWhole || x < -maxWhole {
					t.Fatalf("%q as %v gave %v", s, to, x)
				}
			}
		}
	})
}
