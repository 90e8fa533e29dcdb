// Package balance is the gauge of a pressure balance (dead-weight tester)
// used as the reference: nothing is polled over a wire; its reading is the
// pressure the pressure-balance equation gives for the pieces on the piston
// (analysis/balance), at the balance's reference level. The engine sees it
// like any other reference; the head to each device is the run's head
// correction, as for any reference.
//
// The operator tells it the loading with `plateau load`, which writes the
// loading file named by the instrument's link.address; Read reads that file
// (see loadfile.go), so the daemon and the command share nothing else. No
// file yet means no reading yet (a timeout-kind failure); a vented balance
// reads zero gauge pressure. The piston temperature comes from the loading
// file, from the configuration, or from the ambient thermometer the engine
// hands over (UseThermometer), read afresh at every read.
package balance

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"strconv"
	"sync"
	"time"

	model "plateau/analysis/balance"
	"plateau/analysis/units"
	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

func init() {
	drivers.Register(config.LinkBalance, drivers.Opener{Gauge: OpenGauge})
}

// TemperatureSource gives the latest piston temperature (°C) and when it
// was read: the engine hands the gauge one of its ambient instruments (the
// one balance.piston_thermometer names), so the driver needs nothing of
// the engine but this.
type TemperatureSource interface {
	LatestTemperature() (celsius float64, at time.Time, ok bool)
}

// freshTemperature is how old the thermometer's latest reading may be:
// a piston's temperature changes over minutes (our own choice). An older
// one fails the reading, as a silent reference does.
const freshTemperature = 2 * time.Minute

// ErrNoLoading says the operator has not yet said what is on the piston.
var ErrNoLoading = errors.New("no loading yet: put the weights on, float the piston and run plateau load")

// Gauge is a pressure balance read through its loading file.
type Gauge struct {
	name string
	path string
	unit units.Unit
	clk  clock.Clock

	setup model.Setup
	base  model.Conditions // air, residual pressure, no head (the level itself)
	// tempSet: the configuration enters the piston temperature for the run.
	tempSet bool

	mu      sync.Mutex
	seen    fs.FileInfo       // the loading file last read
	loading Loading           // what it holds
	err     error             // or why it gives no reading
	thermo  TemperatureSource // the piston thermometer; nil when none
}

var _ drivers.Gauge = (*Gauge)(nil)

// OpenGauge makes the gauge of an instrument with link kind balance.
func OpenGauge(inst config.Instrument, env drivers.OpenEnv) (drivers.Gauge, error) {
	b := inst.Balance
	if b == nil {
		return nil, fmt.Errorf("instrument %q: link kind balance without a balance: section", inst.Name)
	}
	u, err := units.Lookup(inst.Unit)
	if err != nil {
		u = units.Pascal
	}
	return New(inst.Name, inst.Link.Address, u, b.Setup(), b.LevelConditions(), b.PistonTemperature != nil, env.Time())
}

// New makes a balance gauge reading the loading file at path.
func New(name, path string, unit units.Unit, setup model.Setup, base model.Conditions, tempSet bool, clk clock.Clock) (*Gauge, error) {
	if err := setup.Validate(); err != nil {
		return nil, fmt.Errorf("pressure balance %q: %w", name, err)
	}
	if path == "" {
		return nil, fmt.Errorf("pressure balance %q: no loading file (link.address)", name)
	}
	return &Gauge{name: name, path: path, unit: unit, clk: clk, setup: setup, base: base, tempSet: tempSet, err: ErrNoLoading}, nil
}

// Read gives the pressure of the loading now on the piston.
func (g *Gauge) Read(ctx context.Context) (drivers.Reading, error) {
	if err := ctx.Err(); err != nil {
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindTimeout, err)
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	g.refresh()
	err := g.err
	var r drivers.Reading
	if err == nil {
		r, err = g.reading(g.loading)
	}
	if err != nil {
		kind := drivers.KindBadReply
		switch {
		case errors.Is(err, ErrNoLoading):
			kind = drivers.KindTimeout
		case errors.Is(err, errNoTemperature):
			kind = drivers.KindLinkDown
		}
		return drivers.Reading{}, drivers.Fail(g.name, kind, err)
	}
	r.Time = g.clk.Now()
	return r, nil
}

// UseThermometer takes the piston temperature from th whenever the
// loading file gives none (plateau load --temperature still wins: the
// operator said it).
func (g *Gauge) UseThermometer(th TemperatureSource) {
	g.mu.Lock()
	g.thermo = th
	g.mu.Unlock()
}

var errNoTemperature = errors.New("no fresh piston temperature")

// pistonTemperature is the thermometer's latest reading, if fresh.
func (g *Gauge) pistonTemperature() (float64, error) {
	t, at, ok := g.thermo.LatestTemperature()
	if !ok {
		return 0, fmt.Errorf("%w: the piston thermometer has given none yet", errNoTemperature)
	}
	if age := g.clk.Now().Sub(at); age > freshTemperature {
		return 0, fmt.Errorf("%w: the piston thermometer's last reading is %s old", errNoTemperature, age.Round(time.Second))
	}
	return t, nil
}

// refresh reads the loading file again when it has changed.
func (g *Gauge) refresh() {
	fi, err := os.Stat(g.path)
	if errors.Is(err, fs.ErrNotExist) {
		g.seen, g.err = nil, ErrNoLoading
		return
	}
	if err != nil {
		g.seen, g.err = nil, fmt.Errorf("loading file: %w", err)
		return
	}
	// plateau load renames a new file over the old one: another file, or
	// the same one changed, is read again.
	if g.seen != nil && os.SameFile(g.seen, fi) && g.seen.ModTime().Equal(fi.ModTime()) && g.seen.Size() == fi.Size() {
		return
	}
	data, err := os.ReadFile(g.path)
	if err != nil {
		g.err = fmt.Errorf("loading file: %w", err)
		return
	}
	g.seen = fi
	g.loading, g.err = ParseLoading(data)
	if g.err != nil {
		g.err = fmt.Errorf("loading file %s: %w", g.path, g.err)
	}
}

// reading works out the pressure of a loading: once per read, since the
// piston temperature may come from a thermometer (a few microseconds).
func (g *Gauge) reading(l Loading) (drivers.Reading, error) {
	if l.Vented {
		return drivers.Reading{RawUnit: g.unit.Symbol, Wire: "vented"}, nil
	}
	c := g.base
	c.Loaded = l.Pieces
	switch {
	case l.HasTemperature:
		c.PistonTempC = l.TemperatureC
	case g.thermo != nil:
		t, err := g.pistonTemperature()
		if err != nil {
			return drivers.Reading{}, err
		}
		c.PistonTempC = t
	case !g.tempSet:
		return drivers.Reading{}, fmt.Errorf("loading file %s: no piston temperature: give it with plateau load --temperature", g.path)
	}
	r, err := g.setup.Pressure(c)
	if err != nil {
		return drivers.Reading{}, fmt.Errorf("loading %s: %w", l.Text(), err)
	}
	wire := "loading " + l.Text() + ", piston " + strconv.FormatFloat(c.PistonTempC, 'f', -1, 64) + " °C"
	return drivers.Reading{Pa: r.LevelPa, Raw: g.unit.FromPa(r.LevelPa), RawUnit: g.unit.Symbol, Wire: wire}, nil
}

// Close has nothing to release: the gauge holds no file open.
func (g *Gauge) Close() error { return nil }
