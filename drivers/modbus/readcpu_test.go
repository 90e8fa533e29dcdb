package modbus

import (
	"context"
	"io"
	"log"
	"slices"
	"strconv"
	"syscall"
	"testing"
	"time"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
)

// cpuTime is the CPU (user + system) this process has used so far: every
// goroutine, the garbage collector included, so allocations are paid for.
func cpuTime(tb testing.TB) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		tb.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// cpuRound is one interleaved round: CPU per read through plateau's driver
// and through the bare simonvetter/modbus client, same server, same registers.
type cpuRound struct{ driver, bare time.Duration }

// readCPURounds runs rounds of reads of a float32 (holding 10–11) from the
// libmodbus peer over loopback TCP, alternating plateau's driver and the
// bare library client (which one goes first alternates too, so drift of the
// machine's speed spreads over both). The peer serves one connection at a
// time, so each side connects outside its timed loop and disconnects after.
// The server runs in its own process and its CPU is not counted.
func readCPURounds(tb testing.TB, rounds, reads int) []cpuRound {
	port, _ := startTCPPeer(tb, 0)
	addr := "127.0.0.1:" + strconv.Itoa(port)
	ctx := context.Background()
	in := inst("ref", config.LinkModbusTCP, addr, config.ValueRead{Table: "holding", Register: 10, Type: "float32", WordOrder: "ABCD", Scale: 1})
	const want = 123.45600128173828 // what peer.c stores at 10–11 (see modbus_test.go)

	driver := func() time.Duration {
		g, err := drivers.OpenGauge(in, drivers.OpenEnv{}) // logging off, as in a daemon at level info
		if err != nil {
			tb.Fatal(err)
		}
		defer g.Close()
		if r, err := g.Read(ctx); err != nil || r.Raw != want { // connects
			tb.Fatalf("driver read: %v %v", r.Raw, err)
		}
		start := cpuTime(tb)
		for range reads {
			if _, err := g.Read(ctx); err != nil {
				tb.Fatal(err)
			}
		}
		return (cpuTime(tb) - start) / time.Duration(reads)
	}
	bare := func() time.Duration {
		c, err := mb.NewClient(&mb.ClientConfiguration{URL: "tcp://" + addr, Timeout: time.Second, Logger: log.New(io.Discard, "", 0)})
		if err != nil {
			tb.Fatal(err)
		}
		if err := c.Open(); err != nil {
			tb.Fatal(err)
		}
		defer c.Close()
		if w, err := c.ReadRegisters(10, 2, mb.HOLDING_REGISTER); err != nil || len(w) != 2 {
			tb.Fatalf("bare read: %v %v", w, err)
		}
		start := cpuTime(tb)
		for range reads {
			if _, err := c.ReadRegisters(10, 2, mb.HOLDING_REGISTER); err != nil {
				tb.Fatal(err)
			}
		}
		return (cpuTime(tb) - start) / time.Duration(reads)
	}
	out := make([]cpuRound, rounds)
	for i := range out {
		if i%2 == 0 {
			out[i].driver = driver()
			out[i].bare = bare()
		} else {
			out[i].bare = bare()
			out[i].driver = driver()
		}
	}
	return out
}

// medianRatio is the median over rounds of driver ÷ bare CPU per read, and
// the medians of each side.
func medianRatio(rs []cpuRound) (ratio float64, driver, bare time.Duration) {
	var q []float64
	var d, b []time.Duration
	for _, r := range rs {
		q = append(q, float64(r.driver)/float64(r.bare))
		d, b = append(d, r.driver), append(b, r.bare)
	}
	slices.Sort(q)
	slices.Sort(d)
	slices.Sort(b)
	return q[len(q)/2], d[len(d)/2], b[len(b)/2]
}

// BenchmarkReadCPU is the read-path target: CPU per read through plateau's
// driver at most 1.2 × the bare library's client, median of interleaved
// rounds. b.N sets the reads per round.
func BenchmarkReadCPU(b *testing.B) {
	const rounds = 11
	reads := max(b.N/rounds, 200)
	rs := readCPURounds(b, rounds, reads)
	ratio, d, bare := medianRatio(rs)
	b.ReportMetric(0, "ns/op")
	b.ReportMetric(float64(d.Nanoseconds()), "driver-cpu-ns/read")
	b.ReportMetric(float64(bare.Nanoseconds()), "bare-cpu-ns/read")
	b.ReportMetric(ratio, "cpu-ratio")
}

// The benchmark's code path as a test with a short count, so it cannot rot;
// the ratio is printed, not judged (timing is the benchmark's business).
func TestReadCPURoundsRun(t *testing.T) {
	rs := readCPURounds(t, 3, 50)
	ratio, d, bare := medianRatio(rs)
	if d <= 0 || bare <= 0 {
		t.Fatalf("no CPU measured: driver %s, bare %s", d, bare)
	}
	t.Logf("short run: driver %s, bare %s per read, ratio %.2f", d, bare, ratio)
}
