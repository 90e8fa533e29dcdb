package modbus

import (
	"context"
	"encoding/binary"
	"io"
	"log"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/crc16"
)

// One RS-485 line, several units, on a pseudo-terminal. A pty carries bytes
// at memory speed; to behave like the line, the responder answers a request
// only when it would have been complete on the wire, followed by the
// 3.5-character silence, and the reply's own characters (11 bits a
// character: start, 8 data, parity or a second stop, stop — Modbus over
// Serial Line V1.02 §2.5.1, §2.5.1.1 for the silence).

const lineBaud = 19200

// charTime is one RTU character on the line.
func charTime(baud int) time.Duration { return 11 * time.Second / time.Duration(baud) }

// lineUnits answers function 03 and 04 reads for units 1 … n; unit u holds
// the float32 value u at every register pair, so a reply from the wrong
// unit shows.
type lineUnits struct {
	n      int
	baud   int
	off    uint8 // a unit that is switched off: asked, never answers
	asked  [248]atomic.Int64
	served [248]atomic.Int64
}

func (l *lineUnits) serve(master *os.File) { serveRTU(master, l.answer) }

func (l *lineUnits) answer(req []byte, arrived time.Time) []byte {
	unit, fc, count := req[0], req[1], binary.BigEndian.Uint16(req[4:6])
	l.asked[unit].Add(1)
	if unit == l.off || unit < 1 || int(unit) > l.n || (fc != 3 && fc != 4) || count == 0 || count%2 != 0 || count > 124 {
		return nil // not ours, or not a read this responder serves: stay silent
	}
	bits := math.Float32bits(float32(unit))
	reply := []byte{unit, fc, byte(2 * count)}
	for range count / 2 {
		reply = binary.BigEndian.AppendUint32(reply, bits)
	}
	reply = crc16.Append(reply)
	chars := float64(len(req)) + 3.5 + float64(len(reply))
	time.Sleep(time.Until(arrived.Add(time.Duration(chars * float64(charTime(l.baud))))))
	l.served[unit].Add(1) // before the reply leaves, so a client never counts more than was served
	return reply
}

// serveRTU plays the units of one line: it reads 8-byte requests from rw
// and writes what answer makes of each (nil: stay silent); arrived is when
// the request's last bytes came in.
func serveRTU(rw io.ReadWriter, answer func(req []byte, arrived time.Time) []byte) {
	var buf []byte
	chunk := make([]byte, 64)
	for {
		k, err := rw.Read(chunk)
		if err != nil {
			return
		}
		arrived := time.Now()
		buf = append(buf, chunk[:k]...)
		for len(buf) >= 8 {
			req := buf[:8]
			if crc16.Modbus(req[:6]) != binary.LittleEndian.Uint16(req[6:]) {
				buf = buf[1:] // out of step: look for the next frame, as a device would after a silence
				continue
			}
			buf = buf[8:]
			if reply := answer(req, arrived); reply != nil {
				if _, err := rw.Write(reply); err != nil {
					return
				}
			}
		}
	}
}

// startLine makes the pty, starts the responder and returns the device name
// the client side opens.
func startLine(tb testing.TB, units int) (string, *lineUnits) {
	tb.Helper()
	master, dev := rawPty(tb)
	l := &lineUnits{n: units, baud: lineBaud}
	go l.serve(master)
	return dev, l
}

// lineRound is one timed stretch of reads of every unit on the line.
type lineRound struct {
	perSecond float64 // good reads
	perUnit   []int
	failed    int // reads that failed (a time-out on a loaded machine); the line carried them too
}

// driverRound reads units 1 … n through plateau's driver: one gauge per
// unit, each on its own goroutine as a poller would be, all sharing the
// port's one owner. It also returns each gauge's own view of its rate.
func driverRound(tb testing.TB, dev string, units int, pause, d time.Duration) (lineRound, []drivers.Rate) {
	gauges := make([]drivers.Gauge, units)
	for i := range gauges {
		in := inst("dev"+strconv.Itoa(i+1), config.LinkModbusRTU, dev, config.ValueRead{Register: 0, Type: "float32"})
		in.Link.UnitID, in.Link.Pause, in.Link.Retries = i+1, pause, 0
		g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
		if err != nil {
			tb.Fatal(err)
		}
		gauges[i] = g
	}
	ctx, cancel := context.WithTimeout(context.Background(), d)
	defer cancel()
	counts := make([]int, units)
	var failed atomic.Int64
	var wg sync.WaitGroup
	start := time.Now()
	for i, g := range gauges {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for ctx.Err() == nil {
				r, err := g.Read(ctx)
				if err != nil {
					if ctx.Err() == nil {
						failed.Add(1)
						time.Sleep(10 * time.Millisecond) // as a poller waits after a failure
					}
					continue
				}
				if r.Raw != float64(i+1) {
					tb.Errorf("unit %d read %v: another unit's reply", i+1, r.Raw)
					return
				}
				counts[i]++
			}
		}()
	}
	wg.Wait()
	elapsed := time.Since(start)
	rates := make([]drivers.Rate, units)
	for i, g := range gauges {
		rates[i] = g.(drivers.RateReporter).ReadRate()
		g.Close()
	}
	return lineRound{perSecond: float64(sum(counts)) / elapsed.Seconds(), perUnit: counts, failed: int(failed.Load())}, rates
}

// bareRound reads units 1 … n in turn with the bare simonvetter/modbus
// client on the same port.
func bareRound(tb testing.TB, dev string, units int, d time.Duration) lineRound {
	c, err := mb.NewClient(&mb.ClientConfiguration{URL: "rtu://" + dev, Speed: lineBaud, DataBits: 8, Parity: mb.PARITY_NONE,
		StopBits: 1, Timeout: 500 * time.Millisecond, Logger: log.New(io.Discard, "", 0)})
	if err != nil {
		tb.Fatal(err)
	}
	if err := c.Open(); err != nil {
		tb.Fatal(err)
	}
	defer c.Close()
	counts := make([]int, units)
	failed := 0
	start := time.Now()
	for time.Since(start) < d {
		for u := range units {
			if err := c.SetUnitId(uint8(u + 1)); err != nil {
				tb.Fatal(err)
			}
			if _, err := c.ReadRegisters(0, 2, mb.HOLDING_REGISTER); err != nil {
				failed++
				continue
			}
			counts[u]++
		}
	}
	return lineRound{perSecond: float64(sum(counts)) / time.Since(start).Seconds(), perUnit: counts, failed: failed}
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

// BenchmarkRTULine: eight units on one RTU line at 19 200 Bd on a pty, read
// as fast as the line allows (no pause): reads per second through plateau's
// driver, through the bare library client on the same pty in the same run
// (interleaved rounds), and the line's wire-time limit; then the driver
// again with a 20 ms pause between requests, next to its limit.
func BenchmarkRTULine(b *testing.B) {
	const units, rounds = 8, 3
	const pause = 20 * time.Millisecond // a usual pause for RS-485 devices that are slow to release the line
	dev, _ := startLine(b, units)
	per := min(max(time.Duration(b.N)*time.Millisecond, 500*time.Millisecond), 5*time.Second) // b.N sets the length of a round
	var drv, bare, fair, paused []float64
	failed := 0
	for i := range rounds {
		var d, c lineRound
		if i%2 == 0 {
			d, _ = driverRound(b, dev, units, 0, per)
			c = bareRound(b, dev, units, per)
		} else {
			c = bareRound(b, dev, units, per)
			d, _ = driverRound(b, dev, units, 0, per)
		}
		drv, bare = append(drv, d.perSecond), append(bare, c.perSecond)
		fair = append(fair, float64(slices.Min(d.perUnit))/float64(slices.Max(d.perUnit)))
		p, _ := driverRound(b, dev, units, pause, per)
		paused = append(paused, p.perSecond)
		failed += d.failed + c.failed + p.failed
	}
	b.ReportMetric(0, "ns/op")
	b.ReportMetric(median(drv), "driver-reads/s")
	b.ReportMetric(median(bare), "bare-reads/s")
	b.ReportMetric(LineReadsPerSecond(lineBaud, 2, 0), "wire-limit-reads/s")
	b.ReportMetric(median(fair), "fewest/most-per-unit")
	b.ReportMetric(median(paused), "driver-reads/s-pause-20ms")
	b.ReportMetric(LineReadsPerSecond(lineBaud, 2, pause), "wire-limit-reads/s-pause-20ms")
	b.ReportMetric(float64(failed), "failed-reads")
}

// The benchmark's path as a short test: every unit answers, with its own
// value, every unit gets its turn, and each gauge's own rate adds up to
// what the line carried.
func TestRTULineTakesTurns(t *testing.T) {
	const units = 8
	dev, line := startLine(t, units)
	r, rates := driverRound(t, dev, units, 0, 800*time.Millisecond)
	if r.failed > 0 {
		t.Errorf("%d reads failed on a line with every unit answering", r.failed)
	}
	var sumRates float64
	for i, n := range r.perUnit {
		if n == 0 {
			t.Fatalf("unit %d never read: %v", i+1, r.perUnit)
		}
		if got := int(line.served[i+1].Load()); got < n {
			t.Errorf("unit %d: %d reads but the line served %d", i+1, n, got)
		}
		sumRates += rates[i].PerSecond
	}
	if lo, hi := slices.Min(r.perUnit), slices.Max(r.perUnit); hi > 2*lo+2 {
		t.Errorf("units are not asked in turn: reads per unit %v", r.perUnit)
	}
	if r.perSecond > 1.1*LineReadsPerSecond(lineBaud, 2, 0) {
		t.Errorf("%.1f reads/s is more than the line carries (%.1f): the responder does not keep wire time", r.perSecond, LineReadsPerSecond(lineBaud, 2, 0))
	}
	if slices.Min(r.perUnit) >= 4 && math.Abs(sumRates-r.perSecond) > 0.5*r.perSecond { // a rate needs a few reads
		t.Errorf("gauges report %.1f reads/s together, the line carried %.1f", sumRates, r.perSecond)
	}
	b := bareRound(t, dev, units, 300*time.Millisecond)
	t.Logf("driver %.1f reads/s %v, bare %.1f reads/s, wire limit %.1f", r.perSecond, r.perUnit, b.perSecond, LineReadsPerSecond(lineBaud, 2, 0))
}

// A unit that is switched off must not hold the line for its time-out on
// every turn: after two unanswered requests it is benched (asked again when
// its back-off ends) and the others share the line. Without that, asked in
// turn, it would be asked as often as each live unit.
func TestSilentUnitDoesNotHoldTheLine(t *testing.T) {
	const units = 8
	dev, line := startLine(t, units)
	line.off = 3
	gauges := make([]drivers.Gauge, units)
	for i := range gauges {
		in := inst("dev"+strconv.Itoa(i+1), config.LinkModbusRTU, dev, config.ValueRead{Register: 0, Type: "float32"})
		in.Link.UnitID, in.Link.Retries = i+1, 0
		in.Link.Timeout, in.Link.Backoff = 500*time.Millisecond, time.Second
		gauges[i] = mustOpen(t, in)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 4*time.Second)
	defer cancel()
	var wg sync.WaitGroup
	var benched atomic.Int64
	for i, g := range gauges {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for ctx.Err() == nil {
				_, err := g.Read(ctx)
				switch {
				case err == nil && i+1 == int(line.off):
					t.Error("the switched-off unit answered")
				case err != nil && ctx.Err() == nil && i+1 != int(line.off):
					t.Errorf("unit %d: %v", i+1, err)
				case err != nil && ctx.Err() == nil:
					if drivers.KindOf(err) != drivers.KindTimeout {
						t.Errorf("switched-off unit: kind %s, want timeout (%v)", drivers.KindOf(err), err)
					}
					if strings.Contains(err.Error(), "asked again in") {
						benched.Add(1)
					}
					time.Sleep(10 * time.Millisecond) // as a poller waits after a failure
				}
			}
		}()
	}
	wg.Wait()
	off := line.asked[line.off].Load()
	fewest := int64(math.MaxInt64)
	for u := 1; u <= units; u++ {
		if u != int(line.off) {
			fewest = min(fewest, line.served[u].Load())
		}
	}
	t.Logf("switched-off unit asked %d times, each live unit at least %d; %d reads refused while benched", off, fewest, benched.Load())
	// Asked in turn without benching, it would be asked about as often as a
	// live unit; benched, it is asked at 0, 0.5 and about 2 s.
	if benched.Load() == 0 || 2*off > fewest {
		t.Errorf("switched-off unit asked %d times against %d for the live ones: it holds the line", off, fewest)
	}
}
