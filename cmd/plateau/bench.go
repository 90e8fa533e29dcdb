package main

import (
	"context"
	"fmt"
	"log/slog"
	"os"
	"time"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/config"
	"plateau/config/record"
	"plateau/drivers"
	_ "plateau/drivers/all"
	"plateau/drivers/clock"
	"plateau/drivers/sim"
)

// bench is everything a run needs: the store, the engine on the configured
// instruments and, when any instrument is simulated, the simulated rig
// serving them over its real transports.
type bench struct {
	cfg              *config.Config
	store            *store.Store
	engine           *acquire.Engine
	rig              *sim.Rig
	clock            clock.Clock
	closeInstruments func() error
}

func usesSimulator(cfg *config.Config) bool {
	for _, in := range cfg.Instruments {
		if in.Link.Kind == config.LinkSim {
			return true
		}
	}
	return false
}

// openBench opens the store, starts the simulated rig if one is configured,
// and opens every instrument. ctx bounds the rig's servers.
func openBench(ctx context.Context, cfg *config.Config, log *slog.Logger) (*bench, error) {
	b := &bench{cfg: cfg, clock: clock.Wall{}}
	var rig acquire.Simulated
	if usesSimulator(cfg) {
		if cfg.Simulator.Speed != 1 {
			b.clock = clock.NewScaled(cfg.Simulator.Speed)
		}
		r, err := sim.New(cfg.Simulator, b.clock, sim.WithLogger(log.With("component", "simulator")))
		if err != nil {
			return nil, fmt.Errorf("simulator: %w", err)
		}
		if _, err := r.Start(ctx); err != nil {
			return nil, fmt.Errorf("start simulator: %w", err)
		}
		b.rig, rig = r, r
	}
	st, err := store.Open(cfg.Store.Path, store.Options{Clock: b.clock})
	if err != nil {
		b.close()
		return nil, fmt.Errorf("open store: %w", err)
	}
	b.store = st
	// Time within a run only moves forward: an accelerated clock resumes
	// from the latest time the store holds.
	if sc, ok := b.clock.(*clock.Scaled); ok {
		last, err := st.LastTime()
		if err != nil {
			b.close()
			return nil, fmt.Errorf("read the store's latest time: %w", err)
		}
		sc.NotBefore(last.Add(time.Millisecond))
	}
	// The file as used is kept with every run, for the record.
	yaml, err := os.ReadFile(cfg.File)
	if err != nil {
		b.close()
		return nil, fmt.Errorf("keep the configuration with the run: %w", err)
	}
	in, closeInstruments, err := acquire.Open(cfg, drivers.OpenEnv{Log: log, Clock: b.clock}, rig)
	if err != nil {
		b.close()
		return nil, err
	}
	b.closeInstruments = closeInstruments
	eng, err := acquire.New(acquire.Options{Config: cfg, ConfigYAML: yaml, Record: record.Of(cfg).Encode(),
		Identity: record.Identity(cfg), Instruments: in, Store: st, Clock: b.clock, Log: log})
	if err != nil {
		b.close()
		return nil, err
	}
	b.engine = eng
	return b, nil
}

// close releases everything; the store is flushed last.
func (b *bench) close() error {
	var err error
	if b.closeInstruments != nil {
		b.closeInstruments()
	}
	if b.rig != nil {
		b.rig.Stop()
	}
	if b.store != nil {
		err = b.store.Close()
	}
	return err
}

// hasSource says whether the configuration drives a pressure controller.
func hasSource(cfg *config.Config) bool {
	for _, in := range cfg.Instruments {
		if in.Role == config.RoleSource {
			return true
		}
	}
	return false
}

// safetyNotice is shown by every command that drives a pressure source.
const safetyNotice = `SAFETY — this command drives a pressure source.
  • Compressed gas stores far more energy than liquid at the same pressure: keep
    gas volumes small, wear eye protection, keep people clear of the test set-up.
  • Never exceed the range of the device under test or of the reference;
    plateau vents and aborts above safety.max_pressure, but fittings, hoses and
    gauges must be rated for the test pressure.
  • Oxygen-service gauges stay free of oil and grease: calibrate them only with
    clean, oil-free, non-flammable gas, never on an oil-filled comparator.
  • Vent the system and confirm zero pressure before disconnecting anything.
  Local codes and your laboratory's own approved procedure take precedence.`
