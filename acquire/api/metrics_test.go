package api

import (
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"

	"plateau/acquire/store"
	"plateau/drivers"
)

// TestAlertMetrics checks the series the alerting rules in
// systemd/prometheus/alerts.yml read, for the states a bench can be in.
func TestAlertMetrics(t *testing.T) {
	running := &RunInfo{ID: "r000002", State: store.StateRunning}
	for _, c := range []struct {
		name string
		st   Status
		want string
	}{
		{"idle, never ran", Status{}, `
plateau_safety_tripped 0
plateau_store_fault 0
`},
		{"last run failed, idle", Status{Last: &LastRun{ID: "r000001", State: "failed", Reason: "reference lost"}}, `
plateau_last_run_state{state="failed"} 1
plateau_last_run_state{state="finished"} 0
plateau_last_run_state{state="stopped"} 0
plateau_safety_tripped 0
plateau_store_fault 0
`},
		{"tripped with a store fault while running", Status{Run: running, Trip: "reference above safety.max_pressure", StoreFault: "disk full",
			Last: &LastRun{ID: "r000001", State: "finished"}}, `
plateau_last_run_state{state="failed"} 0
plateau_last_run_state{state="finished"} 1
plateau_last_run_state{state="stopped"} 0
plateau_safety_tripped 1
plateau_store_fault 1
`},
	} {
		t.Run(c.name, func(t *testing.T) {
			col := newStatusCollector(func(context.Context) Status { return c.st })
			err := testutil.CollectAndCompare(col, strings.NewReader(help+c.want),
				"plateau_last_run_state", "plateau_safety_tripped", "plateau_store_fault")
			if err != nil {
				t.Fatal(err)
			}
			running := testutil.ToFloat64(gaugeVecValue(t, col, "plateau_run_state", "running"))
			if want := boolValue(c.st.Run != nil); running != want {
				t.Fatalf("plateau_run_state{state=running} = %g, want %g", running, want)
			}
		})
	}
}

const help = `
# HELP plateau_last_run_state 1 for the state the last run of this daemon ended in (finished, failed, stopped), 0 for the others; absent until a run has ended.
# TYPE plateau_last_run_state gauge
# HELP plateau_safety_tripped 1 while the safety guard is latched: no setpoint is sent until a person resumes or starts a run.
# TYPE plateau_safety_tripped gauge
# HELP plateau_store_fault 1 while the store cannot write.
# TYPE plateau_store_fault gauge
`

// gaugeVecValue picks one labelled series out of a collector as a
// collector of its own, for testutil.ToFloat64.
func gaugeVecValue(t *testing.T, c prometheus.Collector, name, state string) prometheus.Collector {
	t.Helper()
	reg := prometheus.NewPedanticRegistry()
	reg.MustRegister(c)
	fams, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range fams {
		if f.GetName() != name {
			continue
		}
		for _, m := range f.GetMetric() {
			for _, l := range m.GetLabel() {
				if l.GetName() == "state" && l.GetValue() == state {
					g := prometheus.NewGauge(prometheus.GaugeOpts{Name: name})
					g.Set(m.GetGauge().GetValue())
					return g
				}
			}
		}
	}
	t.Fatalf("no %s{state=%q}", name, state)
	return nil
}

// TestStoreCommitMetrics reads the writer's metrics off a real store: no
// commit time before the first commit, then the commit's time and count.
func TestStoreCommitMetrics(t *testing.T) {
	st, err := store.Open(filepath.Join(t.TempDir(), "plateau.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	reg := prometheus.NewPedanticRegistry()
	registerStoreMetrics(reg, st)
	if n, err := testutil.GatherAndCount(reg, "plateau_store_last_commit_timestamp_seconds"); err != nil || n != 0 {
		t.Fatalf("before any commit: %d commit-time series, %v", n, err)
	}
	run, err := st.CreateRun("metrics", []byte("procedure: {}\n"))
	if err != nil {
		t.Fatal(err)
	}
	before := time.Now()
	for i := range 10 {
		r := drivers.Reading{Time: before.Add(time.Duration(i) * time.Millisecond), Pa: 1e5, Raw: 1, RawUnit: "bar"}
		if err := st.Put(run.ID, "ref", store.SampleOf(r, nil)); err != nil {
			t.Fatal(err)
		}
	}
	if err := st.Flush(); err != nil {
		t.Fatal(err)
	}
	fams, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]float64{}
	for _, f := range fams {
		m := f.GetMetric()[0]
		got[f.GetName()] = m.GetGauge().GetValue() + m.GetCounter().GetValue()
	}
	if at := got["plateau_store_last_commit_timestamp_seconds"]; at < float64(before.Unix())-1 || at > float64(time.Now().Unix())+1 {
		t.Errorf("last commit at %g, want about %d", at, before.Unix())
	}
	if _, ok := got["plateau_store_reopens_total"]; !ok {
		t.Errorf("no plateau_store_reopens_total in %v", got)
	}
	if got["plateau_store_committed_total"] < 10 || got["plateau_store_commit_failures_total"] != 0 {
		t.Errorf("writer metrics %v", got)
	}

	// Records without a writer add nothing.
	other := prometheus.NewPedanticRegistry()
	registerStoreMetrics(other, recordsOnly{st})
	if n, _ := testutil.GatherAndCount(other); n != 0 {
		t.Errorf("records without a writer exported %d series", n)
	}
}

// recordsOnly hides the store's writer.
type recordsOnly struct{ Records }

// TestAlertRulesReadExportedMetrics checks that every plateau metric the
// alerting rules name is one the daemon exports, so a renamed metric
// cannot silence an alert.
func TestAlertRulesReadExportedMetrics(t *testing.T) {
	rules, err := os.ReadFile("../../systemd/prometheus/alerts.yml")
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(filepath.Join(t.TempDir(), "plateau.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	// The status collector and what registerStoreMetrics registers.
	var rec recorder
	rec.MustRegister(newStatusCollector(nil))
	registerStoreMetrics(&rec, st)
	exported := map[string]bool{}
	fq := regexp.MustCompile(`fqName: "([a-z_]+)"`)
	for _, c := range rec.collectors {
		descs := make(chan *prometheus.Desc, 100)
		c.Describe(descs)
		close(descs)
		for d := range descs {
			if m := fq.FindStringSubmatch(d.String()); m != nil {
				exported[m[1]] = true
			}
		}
	}
	named := regexp.MustCompile(`expr:.*`).FindAllString(string(rules), -1)
	count := 0
	for _, expr := range named {
		for _, name := range regexp.MustCompile(`plateau_[a-z_]+`).FindAllString(expr, -1) {
			count++
			if !exported[name] {
				t.Errorf("alerts.yml reads %s, which the daemon does not export (%s)", name, expr)
			}
		}
	}
	if count < 6 {
		t.Fatalf("found only %d metric names in the rules' expressions", count)
	}
}

// recorder is a Registerer that keeps what is registered with it.
type recorder struct{ collectors []prometheus.Collector }

func (r *recorder) Register(c prometheus.Collector) error {
	r.collectors = append(r.collectors, c)
	return nil
}
func (r *recorder) MustRegister(cs ...prometheus.Collector) {
	r.collectors = append(r.collectors, cs...)
}
func (r *recorder) Unregister(prometheus.Collector) bool { return false }

// Several devices in one run: the metrics say which instrument reads which
// device, so a dashboard shows "PG-0421" rather than "dut2".
func TestInstrumentInfoNamesTheDevice(t *testing.T) {
	st := Status{Instruments: []InstrumentInfo{
		{Name: "ref", Role: "reference", Up: true},
		{Name: "dut1", Role: "device", Device: "PG-0421", Up: true},
		{Name: "dut2", Role: "device", Device: "PG-0422"},
	}}
	col := newStatusCollector(func(context.Context) Status { return st })
	want := `
# HELP plateau_instrument_info Always 1: which instrument reads which device under test (its identity; empty for the reference and the source), to join the other instrument metrics with.
# TYPE plateau_instrument_info gauge
plateau_instrument_info{device="",instrument="ref",role="reference"} 1
plateau_instrument_info{device="PG-0421",instrument="dut1",role="device"} 1
plateau_instrument_info{device="PG-0422",instrument="dut2",role="device"} 1
`
	if err := testutil.CollectAndCompare(col, strings.NewReader(want), "plateau_instrument_info"); err != nil {
		t.Fatal(err)
	}
}

// statusOnly is a control that only tells its status.
type statusOnly struct {
	Control
	st Status
}

func (c statusOnly) Status(context.Context) Status { return c.st }

// Ambient instruments have a series of their own in their quantity's base
// unit, named from the unit of their readings (a °F thermometer still
// gives °C, 71.6 °F = 22 °C exactly); only the barometer's reading is a
// pressure in pascal, and one that has not read yet has no series.
func TestAmbientMetrics(t *testing.T) {
	at := time.Date(2026, 3, 1, 21, 0, 0, 0, time.UTC)
	st := Status{Instruments: []InstrumentInfo{
		{Name: "ref", Role: "reference", Up: true, LastPa: 4e5, LastAt: at, Raw: 4, RawUnit: "bar"},
		{Name: "room", Role: "ambient", Up: true, LastPa: 22, LastAt: at, Raw: 71.6, RawUnit: "°F"},
		{Name: "humidity", Role: "ambient", Up: true, LastPa: 45.1, LastAt: at, Raw: 45.1, RawUnit: "%RH"},
		{Name: "baro", Role: "ambient", Up: true, LastPa: 101338, LastAt: at, Raw: 1013.38, RawUnit: "hPa"},
		{Name: "typed", Role: "ambient", Up: true},
	}}
	col := newStatusCollector(statusOf(statusOnly{st: st}))
	want := `
# HELP plateau_ambient An ambient instrument's last good reading in its quantity's base unit, whatever unit the instrument reads in: °C for temperature, %RH for humidity, Pa for barometric.
# TYPE plateau_ambient gauge
plateau_ambient{instrument="baro",quantity="barometric"} 101338
plateau_ambient{instrument="humidity",quantity="humidity"} 45.1
plateau_ambient{instrument="room",quantity="temperature"} 22
# HELP plateau_instrument_last_value_pascals The last good reading in pascal of an instrument that reads a pressure (a barometer too; a temperature or humidity is in plateau_ambient).
# TYPE plateau_instrument_last_value_pascals gauge
plateau_instrument_last_value_pascals{instrument="baro"} 101338
plateau_instrument_last_value_pascals{instrument="ref"} 400000
`
	if err := testutil.CollectAndCompare(col, strings.NewReader(want), "plateau_ambient", "plateau_instrument_last_value_pascals"); err != nil {
		t.Fatal(err)
	}
	if st.Instruments[1].Quantity != "" {
		t.Error("naming the quantities changed the control's own status")
	}
}
