package main

import (
	"errors"
	"fmt"
	"math"
	"os"
	"strconv"
	"strings"

	"github.com/spf13/pflag"

	"plateau/analysis"
	"plateau/analysis/recorded"
	"plateau/analysis/units"
)

// currentFlags say how analyze reads a transmitter's output recorded in
// mA (a dut_unit column of mA) and what meter read it.
type currentFlags struct {
	loop                                          string
	meterUncertainty, meterFloor, meterResolution string
	meterK                                        float64
}

func (c *currentFlags) register(fl *pflag.FlagSet) {
	fl.StringVar(&c.loop, "current-loop", "", `loop range of a transmitter recorded in mA (column dut_unit: mA), e.g. "0 bar … 10 bar"; `+
		`default: the table's "# current_loop:" line, else the configured transmitter's current_loop`)
	fl.StringVar(&c.meterUncertainty, "loop-meter-uncertainty", "", `current meter's expanded uncertainty, % of reading, e.g. "0.01 %" (overrides reference.loop_meter.uncertainty)`)
	fl.StringVar(&c.meterFloor, "loop-meter-floor", "", `current meter's expanded uncertainty floor, e.g. "0.002 mA" (overrides reference.loop_meter.floor)`)
	fl.Float64Var(&c.meterK, "loop-meter-k", 0, "coverage factor of the current meter's certificate (overrides reference.loop_meter.coverage; default 2)")
	fl.StringVar(&c.meterResolution, "loop-meter-resolution", "", `current meter's resolution, e.g. "0.001 mA" (overrides reference.loop_meter.resolution)`)
}

func (c currentFlags) meterGiven() bool {
	return c.meterUncertainty != "" || c.meterFloor != "" || c.meterResolution != "" || c.meterK != 0
}

// read reads the table again now that the loop range is known — the flag,
// else the table's own line, else the configured transmitter's — and sets
// the device's output when the table holds currents or the configuration
// describes a transmitter. A table of loadings is left as it was read.
func (c currentFlags) read(path string, points []analysis.Point, dev *analysis.Device, loadings bool) ([]analysis.Point, error) {
	if loadings {
		return points, nil
	}
	var given *recorded.Loop
	if c.loop != "" {
		l, err := recorded.ParseLoop(c.loop)
		if err != nil {
			return nil, fmt.Errorf("--current-loop %q: %w", c.loop, err)
		}
		given = &l
	} else if dev.Loop != nil {
		given = &recorded.Loop{LowerPa: dev.Loop.LowerPa, UpperPa: dev.Loop.UpperPa}
	}
	file, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("open recorded run: %w", err)
	}
	defer file.Close()
	pts, loop, err := recorded.ReadWith(file, recorded.Options{Loop: given})
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	if loop == nil && dev.Loop == nil {
		if c.loop != "" || c.meterGiven() {
			return nil, errors.New("--current-loop and --loop-meter-* are for a transmitter's table in mA: this table holds no current (give its dut column a dut_unit of mA)")
		}
		return pts, nil
	}
	out := analysis.Loop{Meter: analysis.LoopMeter{K: 2}}
	if dev.Loop != nil {
		out = *dev.Loop
	}
	if loop != nil {
		out.LowerPa, out.UpperPa = loop.LowerPa, loop.UpperPa
	}
	if err := c.applyMeter(&out.Meter); err != nil {
		return nil, err
	}
	dev.Loop = &out
	return pts, nil
}

func (c currentFlags) applyMeter(m *analysis.LoopMeter) error {
	if c.meterUncertainty != "" {
		q, err := units.ParseQuantity(c.meterUncertainty)
		if err != nil || !q.Percent {
			return fmt.Errorf("--loop-meter-uncertainty %q: give a percentage of reading such as \"0.01 %%\" (a constant part goes in --loop-meter-floor)", c.meterUncertainty)
		}
		m.PercentOfReading = q.Value
	}
	for _, f := range []struct {
		flag, value string
		dst         *float64
	}{{"--loop-meter-floor", c.meterFloor, &m.FloorMA}, {"--loop-meter-resolution", c.meterResolution, &m.ResolutionMA}} {
		if f.value == "" {
			continue
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(f.value), "mA")), 64)
		if err != nil || math.IsNaN(v) || v < 0 || v > 25 {
			return fmt.Errorf("%s %q: give a current from 0 to 25 mA such as \"0.002 mA\"", f.flag, f.value)
		}
		*f.dst = v
	}
	if c.meterK != 0 {
		m.K = c.meterK
	}
	return nil
}
