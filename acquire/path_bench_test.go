package acquire

import (
	"sort"
	"testing"
	"time"

	"plateau/acquire/benchtest"
	"plateau/acquire/poll"
	"plateau/acquire/safety"
	"plateau/acquire/settle"
	"plateau/drivers/clock"
)

// pathRounds measures, in interleaved rounds of n reads each, the CPU time
// per read of the driver alone and of the whole acquisition path (the
// poller with the safety guard first, the sample hand-off to a store
// writer goroutine, the settle detector) on the same connection, and
// returns the median of the per-round ratios.
func pathRounds(tb testing.TB, rounds, n int) (driver, whole time.Duration, ratio float64) {
	rp := benchtest.OpenReadPath(tb)
	ctx, g := tb.Context(), rp.Gauge
	rec := newRecorder(rp.Store, 1<<16, func(err error) { tb.Error(err) })
	rec.setRun(rp.Run)
	go rec.loop()
	defer rec.close()
	guard := safety.New(nil, safety.Options{Limit: 16.5e5, LimitSet: true})
	p, err := poll.New(poll.Options{Name: rp.Name, Gauge: g, Interval: time.Millisecond, Clock: clock.Wall{},
		Rules: settle.Rules{Window: 10 * time.Second, MinSamples: 10, MaxDrift: 10, MaxSpread: 100},
		Sink:  rec, First: guard.Observe})
	if err != nil {
		tb.Fatal(err)
	}
	var ratios []float64
	for r := 0; r < rounds; r++ {
		t0 := benchtest.CPUTime()
		for i := 0; i < n; i++ {
			g.Read(ctx)
		}
		t1 := benchtest.CPUTime()
		for i := 0; i < n; i++ {
			rd, err := g.Read(ctx)
			p.Record(rd, err)
		}
		if err := rec.flush(); err != nil {
			tb.Fatal(err)
		}
		t2 := benchtest.CPUTime()
		driver += t1 - t0
		whole += t2 - t1
		ratios = append(ratios, float64(t2-t1)/float64(t1-t0))
	}
	sort.Float64s(ratios)
	return driver / time.Duration(rounds*n), whole / time.Duration(rounds*n), ratios[len(ratios)/2]
}

// BenchmarkPathOverDriver: the whole acquisition path per read next to the
// driver alone, on the same simulated instrument over loopback Modbus TCP,
// in one run (median of interleaved rounds). Target: at most 1.2.
func BenchmarkPathOverDriver(b *testing.B) {
	driver, whole, ratio := pathRounds(b, 9, max(b.N, 200))
	b.ReportMetric(float64(driver.Nanoseconds())/1e3, "driver-cpu-µs/read")
	b.ReportMetric(float64(whole.Nanoseconds())/1e3, "path-cpu-µs/read")
	b.ReportMetric(ratio, "path/driver")
}

// The benchmark's body runs with a short count in every test run, so it
// cannot rot; the figure itself is a benchmark's, not a test's.
func TestPathOverDriverRuns(t *testing.T) {
	driver, whole, ratio := pathRounds(t, 3, 50)
	if driver <= 0 || whole <= 0 || ratio <= 0 {
		t.Fatalf("driver %s, path %s, ratio %.2f", driver, whole, ratio)
	}
	t.Logf("driver %s, whole path %s per read, ratio %.2f (short count; see the benchmark)", driver, whole, ratio)
}
