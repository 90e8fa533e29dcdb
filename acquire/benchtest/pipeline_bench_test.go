package benchtest

import (
	"testing"
	"time"

	"plateau/acquire/settle"
	"plateau/acquire/store"
)

// BenchmarkPipeline reads the simulated reference over loopback Modbus TCP,
// feeds the settle detector and stores the sample: the whole path of one
// sample. It reports the CPU time of this process (client, detector, store
// writer and the in-process simulator serving the request) per sample.
func BenchmarkPipeline(b *testing.B) {
	rp := OpenReadPath(b)
	det, err := settle.New(settle.Rules{Window: 10 * time.Second, MinSamples: 10, MaxDrift: 10, MaxSpread: 100})
	if err != nil {
		b.Fatal(err)
	}
	ctx := b.Context()
	b.ResetTimer()
	start := CPUTime()
	for i := 0; i < b.N; i++ {
		r, err := rp.Gauge.Read(ctx)
		if err == nil {
			det.Add(r.Time, r.Pa)
		}
		if err := rp.Store.Put(rp.Run, rp.Name, store.SampleOf(r, err)); err != nil {
			b.Fatal(err)
		}
	}
	if err := rp.Store.Flush(); err != nil {
		b.Fatal(err)
	}
	b.StopTimer()
	b.ReportMetric(float64(CPUTime()-start)/float64(b.N)/1e3, "cpu-µs/sample")
}
