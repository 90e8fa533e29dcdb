package benchtest

import (
	"context"
	"path/filepath"
	"runtime"
	"syscall"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/config"
	"plateau/drivers"
	_ "plateau/drivers/all" // the simulator's instruments resolve to these links
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

// ReadPath is what the benchmarks of the acquisition path share: the
// simulated reference read over loopback Modbus TCP, and a fresh store
// with one run to put its samples in.
type ReadPath struct {
	Gauge drivers.Gauge
	Name  string // the instrument's name, as its samples are stored
	Store *store.Store
	Run   store.RunID
}

// OpenReadPath starts the simulated bench of testdata/config/sim.yaml on
// the wall clock, opens its reference over loopback Modbus TCP and a store
// in tb's temporary folder with one run. When tb ends the store is
// checked (bbolt's consistency check and every block) and everything is
// closed.
func OpenReadPath(tb testing.TB) ReadPath {
	tb.Helper()
	_, self, _, _ := runtime.Caller(0)
	cfg, err := config.Load(filepath.Join(filepath.Dir(self), "..", "..", "testdata", "config", "sim.yaml"))
	if err != nil {
		tb.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	tb.Cleanup(cancel)
	rig, err := sim.New(cfg.Simulator, clock.Wall{})
	if err != nil {
		tb.Fatal(err)
	}
	if _, err := rig.Start(ctx); err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(rig.Stop)
	inst, err := rig.Resolve(cfg.Instruments[0])
	if err != nil {
		tb.Fatal(err)
	}
	g, err := drivers.OpenGauge(inst, drivers.OpenEnv{})
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { g.Close() })
	st, err := store.Open(filepath.Join(tb.TempDir(), "path.db"), store.Options{})
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() {
		if err := st.Check(); err != nil {
			tb.Error(err)
		}
		if err := st.Close(); err != nil {
			tb.Error(err)
		}
	})
	run, err := st.CreateRun("path", nil)
	if err != nil {
		tb.Fatal(err)
	}
	return ReadPath{Gauge: g, Name: inst.Name, Store: st, Run: run.ID}
}

// CPUTime is the processor time, user and system, this process has used:
// the benchmarks' measure, since a loopback peer's wall time is noise.
func CPUTime() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
