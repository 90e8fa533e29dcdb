package acquire

import (
	"errors"
	"fmt"

	"plateau/config"
	"plateau/drivers"
)

// Simulated is the simulated rig as the opener needs it: it rewrites its
// own instruments onto its real endpoints, and its operator reads its dial.
type Simulated interface {
	Resolve(config.Instrument) (config.Instrument, error)
	// DialReader is the simulated operator reading the simulated dial, or
	// nil when the simulated device is not a dial.
	DialReader() drivers.Gauge
}

// Open opens every configured instrument, resolving simulated ones through
// rig (nil when nothing is simulated). The returned close function closes
// whatever was opened; it is also called on error.
func Open(cfg *config.Config, env drivers.OpenEnv, rig Simulated) (Instruments, func() error, error) {
	var in Instruments
	var closers []func() error
	closeAll := func() error {
		var errs []error
		for _, c := range closers {
			errs = append(errs, c())
		}
		return errors.Join(errs...)
	}
	fail := func(err error) (Instruments, func() error, error) {
		closeAll()
		return Instruments{}, func() error { return nil }, err
	}
	for _, inst := range cfg.Instruments {
		simulated := inst.Link.Kind == config.LinkSim
		if simulated {
			if rig == nil {
				return fail(fmt.Errorf("instrument %q: link kind sim needs the simulated rig", inst.Name))
			}
			r, err := rig.Resolve(inst)
			if err != nil {
				return fail(fmt.Errorf("instrument %q: %w", inst.Name, err))
			}
			inst = r
		}
		if inst.Role == config.RoleSource {
			src, err := drivers.OpenSource(inst, env)
			if err != nil {
				return fail(err)
			}
			closers = append(closers, src.Close)
			in.Source = src
			continue
		}
		one := Instrument{Name: inst.Name, Poll: inst.Poll}
		if inst.Role == config.RoleAmbient {
			g, err := openAmbient(inst, env)
			if err != nil {
				return fail(err)
			}
			one.Gauge, one.ByPerson = g, inst.Link.Kind == config.LinkManual
		} else if dial := simulatedDial(inst, rig); simulated && dial != nil {
			one.Gauge, one.ByPerson = dial, true
		} else {
			g, err := drivers.OpenGauge(inst, env)
			if err != nil {
				return fail(err)
			}
			one.Gauge = g
			one.ByPerson = inst.Role == config.RoleDevice && (inst.Link.Kind == config.LinkManual || deviceOf(cfg, inst.Name).Kind == deviceKindDial)
		}
		closers = append(closers, one.Gauge.Close)
		switch inst.Role {
		case config.RoleReference:
			in.Reference = one
		case config.RoleDevice:
			one.ResolutionPa = deviceOf(cfg, inst.Name).ResolutionPa
			in.Devices = append(in.Devices, one)
		default:
			in.Others = append(in.Others, one)
		}
	}
	if in.Reference.Gauge == nil || len(in.Devices) == 0 {
		return fail(errors.New("a reference and a device under test are required"))
	}
	return in, closeAll, nil
}

// deviceKindDial is the device kind of an analog dial read by a person.
const deviceKindDial = "dial"

func simulatedDial(inst config.Instrument, rig Simulated) drivers.Gauge {
	if inst.Role != config.RoleDevice || rig == nil || inst.Link.Kind != config.LinkManual {
		return nil
	}
	// A rig of several devices names the operator of each dial.
	if r, ok := rig.(interface{ DialReaderFor(string) drivers.Gauge }); ok {
		return r.DialReaderFor(inst.Name)
	}
	return rig.DialReader()
}

// deviceOf is the resolved description of the device under test read by
// the named instrument (the top-level device section when there is one).
func deviceOf(cfg *config.Config, instrument string) config.Device {
	for _, d := range cfg.Devices {
		if d.Instrument == instrument {
			return d.Device
		}
	}
	return cfg.Device
}
