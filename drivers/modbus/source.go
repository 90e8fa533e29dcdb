package modbus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/regcodec"
)

// Source drives a pressure controller: it writes the setpoint (float or
// scaled integer) to holding registers, vents through a coil or a register
// and, when configured, reads a "setpoint reached" discrete input.
type Source struct {
	*Gauge       // shares link, unit and logging; its value is the setpoint
	ventCoil     int
	ventRegister int
	ventValue    uint16
	reachedInput int
}

var (
	_ drivers.Source  = (*Source)(nil)
	_ drivers.Reacher = (*Source)(nil)
)

// OpenSource opens a Modbus pressure controller from its configuration
// (instrument.source). Absent coil and register numbers mean "not used".
func OpenSource(inst config.Instrument, env drivers.OpenEnv) (drivers.Source, error) {
	set := inst.Set
	if set.Setpoint.Table != "holding" {
		return nil, fmt.Errorf("source.setpoint.table %q: setpoints are written to holding registers", set.Setpoint.Table)
	}
	if set.VentCoil == nil && set.VentRegister == nil {
		return nil, errors.New("source: give vent_coil or vent_register; a controller plateau cannot vent is not safe to drive")
	}
	if set.VentValue < 0 || set.VentValue > 0xFFFF {
		return nil, fmt.Errorf("source.vent_value %d: want 0 … 65535", set.VentValue)
	}
	gi := inst
	gi.Loop = config.CurrentLoop{} // a setpoint is a pressure in Instrument.Unit
	g, err := openGauge(gi, set.Setpoint, "source.setpoint", env)
	if err != nil {
		return nil, err
	}
	src := &Source{Gauge: g, ventCoil: -1, ventRegister: -1, ventValue: uint16(set.VentValue), reachedInput: -1}
	for _, f := range []struct {
		key string
		p   *int
		dst *int
	}{{"vent_coil", set.VentCoil, &src.ventCoil}, {"vent_register", set.VentRegister, &src.ventRegister}, {"reached_input", set.ReachedInput, &src.reachedInput}} {
		if f.p == nil {
			continue
		}
		if *f.p < 0 || *f.p > 0xFFFF {
			g.Close()
			return nil, fmt.Errorf("source.%s %d: want a 0-based wire address 0 … 65535", f.key, *f.p)
		}
		*f.dst = *f.p
	}
	return src, nil
}

// SetPoint writes the setpoint, converted to the instrument's unit and the
// register's scale. A setpoint that is not a finite number, before or after
// conversion, is refused before anything is sent.
func (s *Source) SetPoint(ctx context.Context, pa float64) error {
	v := s.val.lin.Invert(s.conv.FromPa(pa))
	if math.IsNaN(pa) || math.IsInf(pa, 0) || math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Errorf("setpoint %s: %g Pa (%g in the register) is not a finite number; nothing sent", s.name, pa, v)
	}
	words, err := regcodec.Encode(v, s.val.spec)
	if err != nil {
		return fmt.Errorf("setpoint %s: %w", s.name, err)
	}
	if s.log.Enabled(ctx, slog.LevelDebug) {
		s.log.Debug("modbus write setpoint", "unit", s.unit, "register", s.val.addr, "pa", pa, "words", regcodec.Hex(words))
	}
	return s.write(ctx, &op{code: opWriteRegisters, unit: s.unit, addr: s.val.addr, words: words})
}

// Vent opens the controller to atmosphere. It goes ahead of every ordinary
// request waiting for the line (reads of other units, a queued setpoint),
// after the one on the wire. Like any request it is not sent once ctx has
// ended: vent with a context of its own, not one a shutdown cancels.
func (s *Source) Vent(ctx context.Context) error {
	if s.ventCoil >= 0 {
		return s.write(ctx, &op{code: opWriteCoil, urgent: true, unit: s.unit, addr: uint16(s.ventCoil)})
	}
	return s.write(ctx, &op{code: opWriteRegister, urgent: true, unit: s.unit, addr: uint16(s.ventRegister), value: s.ventValue})
}

// Reached reads the controller's "setpoint reached" discrete input. Without
// one configured it reports an error, and the engine judges by the readings.
func (s *Source) Reached(ctx context.Context) (bool, error) {
	if s.reachedInput < 0 {
		return false, fmt.Errorf("source %s: no reached_input configured", s.name)
	}
	res, err := s.link.run(ctx, &op{code: opReadDiscrete, unit: s.unit, addr: uint16(s.reachedInput)})
	if err != nil {
		return false, drivers.Fail(s.name, kindOf(err), err)
	}
	return res.on, nil
}

func (s *Source) write(ctx context.Context, o *op) error {
	if _, err := s.link.run(ctx, o); err != nil {
		return drivers.Fail(s.name, kindOf(err), fmt.Errorf("%s: %w", o, err))
	}
	return nil
}
