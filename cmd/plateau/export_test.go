package main

import (
	"bytes"
	"encoding/csv"
	"errors"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/drivers"
)

// export on a real store file: every sample of a run (instrument by
// instrument, by name), a window of it, one instrument, pressures in another
// unit, a failed read with its reason, and a loop current outside the
// NE 43 band with its flag.
func TestExportSamples(t *testing.T) {
	path := filepath.Join(t.TempDir(), "export.db")
	st, err := store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	run, err := st.CreateRun("export", []byte("procedure: {}\n"))
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 1, 21, 0, 0, 0, time.UTC)
	for i := range 10 {
		at := t0.Add(time.Duration(i) * time.Second)
		if err := st.Put(run.ID, "ref", store.Sample{Time: at, Pa: 4e5 + float64(i), Raw: 4 + float64(i)*1e-5, RawUnit: "bar"}); err != nil {
			t.Fatal(err)
		}
		var readErr error
		r := drivers.Reading{Time: at, Pa: 4e5, Raw: 12.5, RawUnit: "mA"}
		switch i {
		case 3:
			readErr = &drivers.ReadError{Instrument: "dut", Kind: drivers.KindTimeout, Err: errors.New("no reply within 300ms")}
			r = drivers.Reading{Time: at}
		case 5: // an as-found zero below the NE 43 band (3.8–20.5 mA, REFERENCES.md §7)
			r.Raw, r.Pa = 3.70, -0.3e5/16
		case 6: // held at the band's lower limit
			r.Raw, r.Pa = 3.8, -0.2e5/16
		}
		if err := st.Put(run.ID, "dut", store.SampleOf(r, readErr)); err != nil {
			t.Fatal(err)
		}
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
	export := func(args ...string) [][]string {
		t.Helper()
		root := newRoot()
		var out, errOut bytes.Buffer
		root.SetOut(&out)
		root.SetErr(&errOut)
		root.SetArgs(append([]string{"export", "last", "--store", path}, args...))
		if err := root.Execute(); err != nil {
			t.Fatalf("export %v: %v\n%s", args, err, errOut.String())
		}
		rows, err := csv.NewReader(&out).ReadAll()
		if err != nil {
			t.Fatalf("export %v is not CSV: %v\n%s", args, err, out.String())
		}
		if strings.Join(rows[0], ",") != "time,instrument,value,unit,status,detail" {
			t.Fatalf("header %v", rows[0])
		}
		return rows[1:]
	}
	cases := []struct {
		name string
		args []string
		rows int
		row  int
		want string
	}{
		{"whole run", nil, 20, 11, "2026-03-01T21:00:01Z,ref,4.00001,bar,ok,"},
		{"failed read", nil, 20, 3, "2026-03-01T21:00:03Z,dut,,,timeout,"},
		{"loop current as read", nil, 20, 0, "2026-03-01T21:00:00Z,dut,12.5,mA,ok,"},
		{"loop current below the band", nil, 20, 5, "2026-03-01T21:00:05Z,dut,3.7,mA,under-range,below the NE 43 measuring band (3.8–20.5 mA)"},
		{"loop current at the band's limit", nil, 20, 6, "2026-03-01T21:00:06Z,dut,3.8,mA,saturated,at the NE 43 saturation limit"},
		{"window", []string{"--from", "2026-03-01T21:00:02Z", "--to", "2026-03-01T21:00:04Z"}, 6, 3, "2026-03-01T21:00:02Z,ref,4.00002,bar,ok,"},
		{"one instrument", []string{"--instrument", "ref"}, 10, 9, "2026-03-01T21:00:09Z,ref,4.00009,bar,ok,"},
		{"in kPa", []string{"--instrument", "ref", "--unit", "kPa"}, 10, 2, "2026-03-01T21:00:02Z,ref,400.002,kPa,ok,"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rows := export(c.args...)
			if len(rows) != c.rows {
				t.Fatalf("%d rows, want %d", len(rows), c.rows)
			}
			if got := strings.Join(rows[c.row], ","); !strings.HasPrefix(got, c.want) {
				t.Errorf("row %d = %s, want %s…", c.row, got, c.want)
			}
		})
	}
	bad := []struct{ args, want string }{
		{"--instrument gauge", `no samples of instrument "gauge"`},
		{"--from yesterday", `--from "yesterday"`},
		{"--from 2026-03-01T22:00:00Z --to 2026-03-01T21:00:00Z", "is before --from"},
		{"--unit furlong", "unknown pressure unit"},
	}
	for _, b := range bad {
		root := newRoot()
		root.SetOut(&bytes.Buffer{})
		root.SetErr(&bytes.Buffer{})
		root.SetArgs(append([]string{"export", "last", "--store", path}, strings.Fields(b.args)...))
		if err := root.Execute(); err == nil || !strings.Contains(err.Error(), b.want) {
			t.Errorf("%s: %v, want an error containing %q", b.args, err, b.want)
		}
	}
}
