package acquire

import (
	"context"
	"errors"
	"math"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

const ambientYAML = `
device: {upper: 16 bar, resolution: 0.01 bar, class: "1", conditions: {temperature: 20 ± 2 °C}}
reference: {uncertainty: 0.01 %, lower: 0 bar(a), upper: 20 bar(a)}
procedure: {points: [0 %, 20 %, 40 %, 60 %, 80 %, 100 %], decision: simple}
instruments:
  - {name: ref, role: reference, mode: absolute, unit: bar, link: {kind: modbus-tcp, address: "127.0.0.1:1502"}}
  - {name: dut, role: device, unit: bar, link: {kind: modbus-tcp, address: "127.0.0.1:1503"}}
  - {name: pump, role: source, mode: absolute, unit: bar, link: {kind: modbus-tcp, address: "127.0.0.1:1504"}, source: {vent_coil: 0}}
  - {name: baro, role: ambient, quantity: barometric, unit: hPa, poll: 1s, link: {kind: modbus-tcp, address: "127.0.0.1:1505"}}
  - {name: room, role: ambient, quantity: temperature, unit: °F, poll: 10s, link: {kind: modbus-tcp, address: "127.0.0.1:1505"}, value: {register: 2}}
`

// fixedGauge returns one reading, or an error.
type fixedGauge struct {
	r   drivers.Reading
	err error
}

func (g *fixedGauge) Read(context.Context) (drivers.Reading, error) { return g.r, g.err }
func (g *fixedGauge) Close() error                                  { return nil }

type recordedSource struct{ set []float64 }

func (s *recordedSource) SetPoint(_ context.Context, pa float64) error {
	s.set = append(s.set, pa)
	return nil
}
func (s *recordedSource) Vent(context.Context) error { return nil }
func (s *recordedSource) Close() error               { return nil }

func ambientSetup(t *testing.T) (*ambientBook, *clock.Manual, Instruments, *recordedSource) {
	t.Helper()
	cfg, err := config.Parse([]byte(ambientYAML), "ambient.yaml")
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewManual(time.Date(2026, 5, 4, 10, 0, 0, 0, time.UTC))
	src := &recordedSource{}
	in := Instruments{
		Reference: Instrument{Name: "ref", Gauge: &fixedGauge{r: drivers.Reading{Pa: 5.2e5, Raw: 5.2, RawUnit: "bar"}}},
		Source:    src,
		Others:    []Instrument{{Name: "baro", Poll: time.Second}, {Name: "room", Poll: 10 * time.Second}},
	}
	b := newAmbientBook(cfg, in.Others, clk)
	return b, clk, b.convert(in), src
}

// The barometer converts the absolute reference to the devices' gauge
// mode with its latest reading (p_gauge = p_abs − p_baro) and the gauge
// setpoints to the absolute controller; a reference read with no fresh
// barometric reading fails as a link fault, so the guard treats it as a
// silent reference.
func TestBarometerConverts(t *testing.T) {
	b, clk, in, src := ambientSetup(t)
	ref := in.Reference.Gauge
	if _, err := ref.Read(context.Background()); drivers.KindOf(err) != drivers.KindLinkDown || !errors.Is(err, errNoBarometric) {
		t.Fatalf("no barometric reading yet: %v", err)
	}
	observe := b.observer("baro")
	observe(drivers.Reading{Time: clk.Now(), Pa: 101000}, nil)
	observe(drivers.Reading{Time: clk.Now(), Pa: 999999}, drivers.Fail("baro", drivers.KindTimeout, errors.New("late"))) // a failure is not kept
	r, err := ref.Read(context.Background())
	if err != nil || math.Abs(r.Pa-(5.2e5-101000)) > 1e-9 || r.Raw != 5.2 {
		t.Fatalf("converted reading %+v %v: want %g Pa with the raw value kept", r, err, 5.2e5-101000)
	}
	if err := in.Source.SetPoint(context.Background(), 4e5); err != nil || len(src.set) != 1 || src.set[0] != 4e5+101000 {
		t.Fatalf("setpoint 4 bar gauge sent as %v (%v), want %g Pa absolute", src.set, err, 4e5+101000)
	}
	observe(drivers.Reading{Time: clk.Now(), Pa: 1013}, nil) // 1013 Pa: a barometer scaled wrong
	if _, err := ref.Read(context.Background()); !errors.Is(err, errNoBarometric) || !strings.Contains(err.Error(), "10.13 hPa, which no laboratory's air has") {
		t.Errorf("an implausible barometric reading was used: %v", err)
	}
	observe(drivers.Reading{Time: clk.Now(), Pa: 101000}, nil)
	clk.Advance(freshBarometric + time.Second)
	if _, err := ref.Read(context.Background()); !errors.Is(err, errNoBarometric) {
		t.Errorf("stale barometer: %v", err)
	}
	if err := in.Source.SetPoint(context.Background(), 4e5); err == nil || len(src.set) != 1 {
		t.Errorf("a setpoint went out without a fresh barometric reading: %v %v", src.set, err)
	}
	if b.observer("ref") != nil {
		t.Error("the reference has an ambient observer")
	}
}

// Window means: the readings inside a point's window, else the newest one
// before it when it is at most two polls old.
func TestAmbientWindowMeans(t *testing.T) {
	b, clk, _, _ := ambientSetup(t)
	room := b.byKey["room"]
	observe := b.observer("room")
	t0 := clk.Now()
	for i, c := range []float64{20.0, 20.2, 20.4, 20.6} {
		observe(drivers.Reading{Time: t0.Add(time.Duration(i) * 10 * time.Second), Pa: c}, nil)
	}
	m, ok := room.over(t0.Add(5*time.Second), t0.Add(30*time.Second))
	if !ok || m.Count != 3 || math.Abs(m.Mean-20.4) > 1e-12 || m.Min != 20.2 || m.Max != 20.6 || m.Kind != "temperature" {
		t.Errorf("window mean %+v", m)
	}
	if m, ok := room.over(t0.Add(31*time.Second), t0.Add(39*time.Second)); !ok || m.Count != 1 || m.Mean != 20.6 {
		t.Errorf("a window between two readings takes the one before: %+v %v", m, ok)
	}
	if _, ok := room.over(t0.Add(55*time.Second), t0.Add(59*time.Second)); ok {
		t.Error("a reading three polls old stood for a window")
	}
	for i := range 2 * ambientRing { // the ring keeps the newest readings only
		observe(drivers.Reading{Time: t0.Add(time.Hour + time.Duration(i)*time.Millisecond), Pa: 25}, nil)
	}
	if m, ok := room.over(t0, t0.Add(2*time.Hour)); !ok || m.Count != ambientRing || m.Mean != 25 {
		t.Errorf("after the ring wrapped: %d readings, mean %g", m.Count, m.Mean)
	}
}

// An ambient instrument in °F gives its value in °C; the raw value stays.
func TestAmbientGaugeUnits(t *testing.T) {
	cfg, err := config.Parse([]byte(ambientYAML), "ambient.yaml")
	if err != nil {
		t.Fatal(err)
	}
	a, _ := config.AmbientOf(cfg.Instruments[4])
	g := &ambientGauge{Gauge: &fixedGauge{r: drivers.Reading{Pa: 71.6, Raw: 71.6, RawUnit: "Pa"}}, unit: a.Unit}
	r, err := g.Read(context.Background())
	// t/°C = (t/°F − 32)/1.8 (NIST SP 811 (2008) B.8).
	if err != nil || math.Abs(r.Pa-22) > 1e-12 || r.Raw != 71.6 || r.RawUnit != "°F" {
		t.Errorf("71.6 °F read as %+v %v", r, err)
	}
}

// An ambient instrument read by a person: its entries are taken by name,
// in its quantity's units or, for a bare number (which the enter command
// sends in the device's unit), in its own; an implausible one is refused.
func TestAmbientEntries(t *testing.T) {
	yaml := ambientYAML + `  - {name: hyg, role: ambient, quantity: humidity, unit: "%RH", link: {kind: manual}}` + "\n"
	cfg, err := config.Parse([]byte(yaml), "ambient.yaml")
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(filepath.Join(t.TempDir(), "amb.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	clk := clock.NewManual(time.Date(2026, 5, 4, 10, 0, 0, 0, time.UTC))
	g := &fixedGauge{r: drivers.Reading{Pa: 1e5}}
	in := Instruments{
		Reference: Instrument{Name: "ref", Gauge: g, Poll: time.Second},
		Devices:   []Instrument{{Name: "dut", Gauge: g, Poll: time.Second}},
		Others:    []Instrument{{Name: "hyg", Gauge: g, ByPerson: true}},
	}
	e, err := New(Options{Config: cfg, Store: st, Clock: clk, Instruments: in})
	if err != nil {
		t.Fatal(err)
	}
	if len(e.others) != 0 {
		t.Fatal("an ambient instrument read by a person is polled")
	}
	// A unit of another quantity is refused, never read as the
	// instrument's own; a bare number is in the instrument's own unit.
	for _, unit := range []string{"bar", "°C"} {
		if err := e.Enter(Entry{Device: "hyg", Value: 55, Unit: unit}); err == nil || !strings.Contains(err.Error(), "hyg reads humidity") {
			t.Errorf("55 %s for a hygrometer: %v", unit, err)
		}
	}
	if err := e.Enter(Entry{Device: "hyg", Value: 55}); err != nil {
		t.Fatal(err)
	}
	if m, ok := e.ambient.byKey["hyg"].over(clk.Now().Add(40*time.Minute), clk.Now().Add(50*time.Minute)); !ok || m.Mean != 55 {
		t.Errorf("an entry stands for the next points: %+v %v", m, ok)
	}
	if err := e.Enter(Entry{Device: "hyg", Value: 150, Unit: "%"}); err == nil || !strings.Contains(err.Error(), "no humidity of a laboratory") {
		t.Errorf("150 %%RH: %v", err)
	}
	if err := e.Enter(Entry{Device: "room", Value: 21}); err == nil {
		t.Error("an entry for a polled thermometer was taken")
	}
	evs, err := st.Events(0, 100)
	if err != nil || len(evs) != 1 || evs[0].Type != "entry" || evs[0].Message != "hyg: humidity entered as 55.0 %RH" {
		t.Errorf("events %+v %v", evs, err)
	}
}
