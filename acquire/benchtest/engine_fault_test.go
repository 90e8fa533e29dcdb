package benchtest

import (
	"fmt"
	"math"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/sim"
)

// instrumentNamed returns the configured instrument playing role.
func instrumentNamed(t *testing.T, cfg *config.Config, role string) *config.Instrument {
	t.Helper()
	for i := range cfg.Instruments {
		if cfg.Instruments[i].Role == role {
			return &cfg.Instruments[i]
		}
	}
	t.Fatalf("no %s instrument in the configuration", role)
	return nil
}

// samplesOf reads every stored sample of one instrument in the run between
// from and to (zero times leave that end open).
func samplesOf(t *testing.T, st *store.Store, id store.RunID, name string, from, to time.Time) []store.Sample {
	t.Helper()
	var out []store.Sample
	if err := st.Samples(id, name, from, to, func(s store.Sample) error {
		out = append(out, s)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	return out
}

// windowStats is what the stored samples of a window hold.
type windowStats struct {
	good, failed int
	mean         float64
	maxDev       float64 // largest |sample − mean| of the good samples
}

func statsOf(smp []store.Sample) windowStats {
	var w windowStats
	sum := 0.0
	for _, s := range smp {
		if s.Failed {
			w.failed++
			continue
		}
		w.good++
		sum += s.Pa
	}
	if w.good == 0 {
		return w
	}
	w.mean = sum / float64(w.good)
	for _, s := range smp {
		if !s.Failed {
			w.maxDev = max(w.maxDev, math.Abs(s.Pa-w.mean))
		}
	}
	return w
}

// checkWindowsFromStore proves from the store that every captured window
// was made of good samples only: the good samples stored over [start, end]
// reproduce the window's count and mean (so no failed read was counted and
// no sample outside the window was used), and none of them lies a spike
// away from the mean (the simulator's spikes are 20 % of span; no good
// window scatters by a twentieth of it). It returns the number of failed
// reads that fell inside captured windows and were left out.
func checkWindowsFromStore(t *testing.T, b *testBench, id store.RunID, pts []analysis.Point) int {
	t.Helper()
	if err := b.st.Flush(); err != nil {
		t.Fatal(err)
	}
	span := b.cfg.Device.UpperPa - b.cfg.Device.LowerPa
	ref := instrumentNamed(t, b.cfg, config.RoleReference).Name
	dut := instrumentNamed(t, b.cfg, config.RoleDevice).Name
	failedInside := 0
	for _, p := range pts {
		for _, w := range []struct {
			name string
			win  analysis.Window
		}{{ref, p.Reference}, {dut, p.DUT}} {
			got := statsOf(samplesOf(t, b.st, id, w.name, w.win.Start, w.win.End))
			failedInside += got.failed
			if got.good != w.win.Count {
				t.Errorf("%s %s: window counts %d samples, the store holds %d good ones (and %d failed) over it",
					describe(p), w.name, w.win.Count, got.good, got.failed)
				continue
			}
			if math.Abs(got.mean-w.win.Mean) > 1e-3 {
				t.Errorf("%s %s: window mean %.4f Pa, stored good samples give %.4f Pa", describe(p), w.name, w.win.Mean, got.mean)
			}
			if got.maxDev > 0.05*span {
				t.Errorf("%s %s: a sample %.0f Pa from the window mean: a spike was captured", describe(p), w.name, got.maxDev)
			}
		}
	}
	return failedInside
}

func describe(p analysis.Point) string {
	return fmt.Sprintf("cycle %d %s %s point %d", p.Cycle, p.Direction, p.Kind, p.Index)
}

// failures counts the run's stored failed reads of one instrument by kind.
func failures(t *testing.T, b *testBench, id store.RunID, name string) map[drivers.Kind]int {
	t.Helper()
	out := map[drivers.Kind]int{}
	for _, s := range samplesOf(t, b.st, id, name, time.Time{}, time.Time{}) {
		if s.Failed {
			out[s.Kind]++
		}
	}
	return out
}

// longestRepeat is the longest run of consecutive good samples with the
// bit-identical value.
func longestRepeat(smp []store.Sample) int {
	best, n, last := 0, 0, math.NaN()
	for _, s := range smp {
		if s.Failed {
			continue
		}
		if s.Pa == last {
			n++
		} else {
			n, last = 1, s.Pa
		}
		best = max(best, n)
	}
	return best
}

// spikes counts good samples that stand a tenth of span or more away from
// both neighbours: single wild values.
func spikes(smp []store.Sample, span float64) int {
	var good []float64
	for _, s := range smp {
		if !s.Failed {
			good = append(good, s.Pa)
		}
	}
	n := 0
	for i := 1; i+1 < len(good); i++ {
		if math.Abs(good[i]-good[i-1]) > 0.1*span && math.Abs(good[i]-good[i+1]) > 0.1*span {
			n++
		}
	}
	return n
}

// Fault runs: with the simulator's fault injection on, over the transport
// each fault needs, the run completes, every point is captured, the
// captured windows are made of good samples only (proven from the store)
// and the errors of indication still agree with the simulator's model.
func TestFaultRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("runs whole procedures")
	}
	type evidence func(t *testing.T, b *testBench, id store.RunID)
	kindSeen := func(role string, kinds ...drivers.Kind) evidence {
		return func(t *testing.T, b *testBench, id store.RunID) {
			name := instrumentNamed(t, b.cfg, role).Name
			f := failures(t, b, id, name)
			for _, k := range kinds {
				if f[k] > 0 {
					t.Logf("%s: failed reads %v", name, f)
					return
				}
			}
			t.Errorf("%s: failed reads %v: the fault never reached the driver as %v", name, f, kinds)
		}
	}
	cases := []struct {
		name   string
		dutVia string
		faults config.SimFaults
		points []float64
		rig    []sim.Option
		saw    evidence
	}{
		{name: "drop", dutVia: config.LinkModbusRTU, faults: config.SimFaults{Drop: 0.03},
			rig: []sim.Option{sim.WithDropHold(150 * time.Millisecond)},
			saw: func(t *testing.T, b *testBench, id store.RunID) {
				kindSeen(config.RoleReference, drivers.KindTimeout, drivers.KindBadReply)(t, b, id)
				kindSeen(config.RoleDevice, drivers.KindTimeout)(t, b, id)
			}},
		{name: "slow", dutVia: config.LinkModbusRTU, faults: config.SimFaults{Slow: 0.01, SlowBy: 150 * time.Millisecond},
			saw: kindSeen(config.RoleDevice, drivers.KindTimeout, drivers.KindBadReply)},
		{name: "bad_crc", dutVia: config.LinkModbusRTU, faults: config.SimFaults{BadCRC: 0.05},
			saw: kindSeen(config.RoleDevice, drivers.KindBadReply)},
		{name: "garbage", dutVia: config.LinkSerial, faults: config.SimFaults{Garbage: 0.05},
			saw: kindSeen(config.RoleDevice, drivers.KindBadReply)},
		{name: "stuck", dutVia: config.LinkModbusTCP, faults: config.SimFaults{Stuck: 0.002, StuckFor: 8 * time.Second},
			saw: func(t *testing.T, b *testBench, id store.RunID) {
				// The reference shows 0.1 mbar of noise at 0.01 mbar
				// resolution: 30 identical values in a row are a frozen value.
				ref := instrumentNamed(t, b.cfg, config.RoleReference).Name
				if n := longestRepeat(samplesOf(t, b.st, id, ref, time.Time{}, time.Time{})); n < 30 {
					t.Errorf("longest run of identical reference values %d: the value never stuck", n)
				}
			}},
		// The reference's spikes are 20 % of the controller's 17.6 bar
		// ceiling: the points stay low enough that a spike never crosses the
		// 16.5 bar safety limit (which would rightly abort the run).
		{name: "spike", dutVia: config.LinkSerial, faults: config.SimFaults{Spike: 0.01}, points: []float64{0, 5e5, 10e5},
			saw: func(t *testing.T, b *testBench, id store.RunID) {
				for _, role := range []string{config.RoleReference, config.RoleDevice} {
					name := instrumentNamed(t, b.cfg, role).Name
					if n := spikes(samplesOf(t, b.st, id, name, time.Time{}, time.Time{}), b.cfg.Device.UpperPa); n == 0 {
						t.Errorf("%s: no spike stored: the fault never happened", name)
					}
				}
			}},
		// An outage of 5 s every 45 s of bench time: at 40× that leaves the
		// device on its RTU line (whose time-outs and resync grace are wall
		// time) room to fill a settle window between outages.
		{name: "link_down", dutVia: config.LinkModbusRTU, faults: config.SimFaults{LinkDown: 5 * time.Second, LinkEvery: 45 * time.Second},
			saw: func(t *testing.T, b *testBench, id store.RunID) {
				kindSeen(config.RoleReference, drivers.KindLinkDown)(t, b, id)
				kindSeen(config.RoleDevice, drivers.KindTimeout)(t, b, id)
			}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			b := bench(t, func(c *config.Config) {
				c.Procedure.Cycles = 1
				c.Procedure.Exercise = 0 // the faults meet every step; the exercise adds nothing
				if tc.points != nil {
					c.Procedure.PointsPa = tc.points
				}
				c.Simulator.Faults = tc.faults
				for i := range c.Instruments {
					in := &c.Instruments[i]
					// Wall-time link settings, short against the
					// scaled clock (100 ms of wall time is 4 s of run).
					in.Link.Timeout = 100 * time.Millisecond
					in.Link.Backoff = 20 * time.Millisecond
					if in.Role == config.RoleDevice {
						in.SimVia = tc.dutVia
					}
				}
			}, withRig(tc.rig...))
			id, state, reason := b.run(t, 40*time.Second)
			if state != store.StateFinished {
				b.logInstruments(t)
				t.Fatalf("run ended %q: %s", state, reason)
			}
			pts := b.points(t, id)
			if want := 1 + 3 + 3 + 1; len(pts) != want {
				t.Errorf("%d points, want %d", len(pts), want)
			}
			left := checkWindowsFromStore(t, b, id, pts)
			t.Logf("%d failed reads inside captured windows, left out of them", left)
			checkErrors(t, b.rig, pts, len(b.cfg.Procedure.PointsPa)-1, 0.012e5)
			tc.saw(t, b, id)
			t.Logf("%d source commands sent again after a failure", len(eventsOf(b.events(t, id), "source")))
		})
	}
}
