package sim_test

import (
	"context"
	"fmt"
	"io"
	"log"
	"slices"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

// lineBaud is the line of the benchmark: 19 200 Bd, the usual rate of an
// RS-485 line of transmitters.
const lineBaud = 19200

// eightOnALine is a rig of eight simulated devices on one RTU line whose
// replies keep the wire time at lineBaud (rtu.wire_time): a pseudo-terminal
// has no baud rate, so the simulator holds each reply back until the
// request's characters, the 3.5-character silence and the reply's
// characters would have crossed the line, counted from the request's first
// byte, at 11 bits a character.
func eightOnALine(tb testing.TB) (*sim.Rig, sim.Endpoints) {
	tb.Helper()
	s := config.Simulator{Seed: 3, RTU: config.SimRTU{Baud: lineBaud, WireTime: true}}
	for i := range 8 {
		s.Devices = append(s.Devices, config.SimUnit{Instrument: fmt.Sprintf("pt-%d", i+1)})
	}
	rig, err := sim.New(s, clock.Wall{})
	if err != nil {
		tb.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	ep, err := rig.Start(ctx)
	if err != nil {
		cancel()
		tb.Fatal(err)
	}
	tb.Cleanup(func() { cancel(); rig.Stop() })
	return rig, ep
}

// lineRound is one timed stretch of reads of every device on the line.
type lineRound struct {
	perSecond float64 // good reads, all devices together
	perDevice []int
	failed    int
}

// driverRound reads the eight devices through plateau's driver for d: one
// gauge per device, each on its own goroutine as a poller is, all sharing
// the port's one owner, which asks them in turn with pause between requests.
func driverRound(tb testing.TB, rig *sim.Rig, pause, d time.Duration) lineRound {
	n := rig.Devices()
	gauges := make([]drivers.Gauge, n)
	for i := range gauges {
		in, err := rig.Resolve(config.Instrument{Name: fmt.Sprintf("pt-%d", i+1), Role: config.RoleDevice, Poll: time.Millisecond,
			SimPart: sim.PartDevice, SimVia: config.LinkModbusRTU,
			Link: config.Link{Kind: config.LinkSim, Timeout: 500 * time.Millisecond, Retries: 0, Pause: pause}})
		if err != nil {
			tb.Fatal(err)
		}
		g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
		if err != nil {
			tb.Fatal(err)
		}
		gauges[i] = g
	}
	defer func() {
		for _, g := range gauges {
			g.Close()
		}
	}()
	ctx, cancel := context.WithTimeout(context.Background(), d)
	defer cancel()
	counts := make([]int, n)
	var failed atomic.Int64
	var wg sync.WaitGroup
	start := time.Now()
	for i, g := range gauges {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for ctx.Err() == nil {
				if _, err := g.Read(ctx); err != nil {
					if ctx.Err() == nil {
						failed.Add(1)
						time.Sleep(10 * time.Millisecond) // as a poller waits after a failure
					}
					continue
				}
				counts[i]++
			}
		}()
	}
	wg.Wait()
	return lineRound{perSecond: float64(sum(counts)) / time.Since(start).Seconds(), perDevice: counts, failed: int(failed.Load())}
}

// bareRound reads the eight devices in turn with the bare
// simonvetter/modbus client on the same pseudo-terminal, the same
// registers (the device's float32 at holding register 2).
func bareRound(tb testing.TB, ep sim.Endpoints, d time.Duration) lineRound {
	c, err := modbus.NewClient(&modbus.ClientConfiguration{URL: "rtu://" + ep.RTU, Speed: lineBaud, DataBits: 8,
		Parity: modbus.PARITY_EVEN, StopBits: 1, Timeout: 500 * time.Millisecond, Logger: log.New(io.Discard, "", 0)})
	if err != nil {
		tb.Fatal(err)
	}
	if err := c.Open(); err != nil {
		tb.Fatal(err)
	}
	defer c.Close()
	counts := make([]int, len(ep.Devices))
	failed := 0
	start := time.Now()
	for time.Since(start) < d {
		for i, dev := range ep.Devices {
			if err := c.SetUnitId(uint8(dev.UnitID)); err != nil {
				tb.Fatal(err)
			}
			if _, err := c.ReadRegisters(sim.RegDevice, 2, modbus.HOLDING_REGISTER); err != nil {
				failed++
				continue
			}
			counts[i]++
		}
	}
	return lineRound{perSecond: float64(sum(counts)) / time.Since(start).Seconds(), perDevice: counts, failed: failed}
}

func sum(v []int) int {
	n := 0
	for _, x := range v {
		n += x
	}
	return n
}

func median(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	return s[len(s)/2]
}

// wireLimit is the most reads a second the line carries for reads of two
// registers with pause between requests: request 8 characters, reply 9, at
// 11 bits a character, with the two 3.5-character silences (the pause
// stands in for the second when it is longer) — config.TransactionTime.
func wireLimit(pause time.Duration) float64 {
	return 1 / config.TransactionTime(lineBaud, 2, pause).Seconds()
}

// BenchmarkEightDevicesOnOneLine: eight simulated devices on one RTU line at
// 19 200 Bd on a pseudo-terminal, the simulator keeping the wire time.
// Reads per second through plateau's driver (the line's owner asking the
// devices in turn), next to the bare simonvetter/modbus client on the same
// pty in the same run (interleaved rounds, medians), next to the line's
// wire-time limit; then the driver with a 20 ms pause between requests,
// next to its limit.
func BenchmarkEightDevicesOnOneLine(b *testing.B) {
	const rounds = 3
	const pause = 20 * time.Millisecond // a usual pause for RS-485 devices slow to release the line
	rig, ep := eightOnALine(b)
	per := min(max(time.Duration(b.N)*time.Millisecond, 500*time.Millisecond), 5*time.Second) // b.N sets a round's length
	var drv, bare, paused, fair []float64
	failed := 0
	for i := range rounds {
		var d, c lineRound
		if i%2 == 0 {
			d, c = driverRound(b, rig, 0, per), bareRound(b, ep, per)
		} else {
			c, d = bareRound(b, ep, per), driverRound(b, rig, 0, per)
		}
		p := driverRound(b, rig, pause, per)
		drv, bare, paused = append(drv, d.perSecond), append(bare, c.perSecond), append(paused, p.perSecond)
		fair = append(fair, float64(slices.Min(d.perDevice))/float64(max(slices.Max(d.perDevice), 1)))
		failed += d.failed + c.failed + p.failed
	}
	b.ReportMetric(0, "ns/op")
	b.ReportMetric(median(drv), "plateau-reads/s")
	b.ReportMetric(median(bare), "bare-reads/s")
	b.ReportMetric(wireLimit(0), "wire-limit-reads/s")
	b.ReportMetric(median(fair), "fewest/most-per-device")
	b.ReportMetric(median(paused), "plateau-reads/s-pause-20ms")
	b.ReportMetric(wireLimit(pause), "wire-limit-reads/s-pause-20ms")
	b.ReportMetric(float64(failed), "failed-reads")
}

// The benchmark's path as a short test: every device answers on the
// wire-timed line, each gets its turn, and neither plateau's driver nor the
// bare client reads faster than the wire would carry (the pacing works).
func TestEightDevicesOnOneLine(t *testing.T) {
	rig, ep := eightOnALine(t)
	d := driverRound(t, rig, 0, time.Second)
	c := bareRound(t, ep, 500*time.Millisecond)
	for i, n := range d.perDevice {
		if n == 0 {
			t.Fatalf("device %d never read: %v", i+1, d.perDevice)
		}
	}
	if lo, hi := slices.Min(d.perDevice), slices.Max(d.perDevice); hi > 2*lo+2 {
		t.Errorf("devices are not asked in turn: reads per device %v", d.perDevice)
	}
	// The bare client's t3.5 after a reply is 1.75 ms at 19 200 Bd, a
	// little under the 3.5 characters (2.0 ms) of the limit: allow 5 %.
	for name, r := range map[string]lineRound{"plateau": d, "bare": c} {
		if r.perSecond > 1.05*wireLimit(0) {
			t.Errorf("%s: %.1f reads/s, more than the line carries (%.1f): replies do not keep the wire time", name, r.perSecond, wireLimit(0))
		}
	}
	t.Logf("plateau %.1f reads/s %v, bare %.1f, wire limit %.1f", d.perSecond, d.perDevice, c.perSecond, wireLimit(0))
}
