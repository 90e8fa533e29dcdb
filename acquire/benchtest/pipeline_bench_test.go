package benchtest

import (
	"context"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"plateau/acquire/settle"
	"plateau/acquire/store"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

func cpuTime() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// BenchmarkPipeline reads the simulated reference over loopback Modbus TCP,
// feeds the settle detector and stores the sample: the whole path of one
// sample. It reports the CPU time of this process (client, detector, store
// writer and the in-process simulator serving the request) per sample.
func BenchmarkPipeline(b *testing.B) {
	cfg, err := config.Load("../../testdata/config/sim.yaml")
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	rig, err := sim.New(cfg.Simulator, clock.Wall{})
	if err != nil {
		b.Fatal(err)
	}
	if _, err := rig.Start(ctx); err != nil {
		b.Fatal(err)
	}
	defer rig.Stop()
	inst, err := rig.Resolve(cfg.Instruments[0])
	if err != nil {
		b.Fatal(err)
	}
	g, err := drivers.OpenGauge(inst, drivers.OpenEnv{})
	if err != nil {
		b.Fatal(err)
	}
	defer g.Close()
	st, err := store.Open(filepath.Join(b.TempDir(), "bench.db"), store.Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	run, err := st.CreateRun("bench", nil)
	if err != nil {
		b.Fatal(err)
	}
	det, err := settle.New(settle.Rules{Window: 10 * time.Second, MinSamples: 10, MaxDrift: 10, MaxSpread: 100})
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	start := cpuTime()
	for i := 0; i < b.N; i++ {
		r, err := g.Read(ctx)
		if err == nil {
			det.Add(r.Time, r.Pa)
		}
		smp := store.Sample{Time: r.Time, Pa: r.Pa, Raw: r.Raw, RawUnit: r.RawUnit, Wire: r.Wire}
		if err != nil {
			smp = store.Sample{Time: r.Time, Failed: true, Kind: drivers.KindOf(err), Message: err.Error()}
		}
		if err := st.Put(run.ID, inst.Name, smp); err != nil {
			b.Fatal(err)
		}
	}
	if err := st.Flush(); err != nil {
		b.Fatal(err)
	}
	b.StopTimer()
	b.ReportMetric(float64(cpuTime()-start)/float64(b.N)/1e3, "cpu-µs/sample")
}
