package drivers

import (
	"fmt"
	"log/slog"
	"sort"
	"sync"

	"plateau/config"
	"plateau/drivers/clock"
)

// OpenEnv is what every driver gets besides its configuration.
type OpenEnv struct {
	Log   *slog.Logger // scoped by the caller or not; drivers add "instrument"
	Clock clock.Clock  // stamps readings
}

// Logger returns the environment's logger with attrs added; never nil.
func (e OpenEnv) Logger(attrs ...any) *slog.Logger {
	l := e.Log
	if l == nil {
		l = slog.New(slog.DiscardHandler)
	}
	return l.With(attrs...)
}

// Time returns the environment clock, the wall clock when unset.
func (e OpenEnv) Time() clock.Clock {
	if e.Clock == nil {
		return clock.Wall{}
	}
	return e.Clock
}

// Opener opens instruments of one link kind. Source may be nil when the link
// cannot drive a pressure controller.
type Opener struct {
	Gauge  func(inst config.Instrument, env OpenEnv) (Gauge, error)
	Source func(inst config.Instrument, env OpenEnv) (Source, error)
}

var (
	regMu    sync.RWMutex
	registry = map[string]Opener{}
)

// Register makes a link kind available. Driver packages call it from init;
// a second registration of the same kind is a programming error and panics at
// start-up, before any instrument is touched.
func Register(kind string, o Opener) {
	regMu.Lock()
	defer regMu.Unlock()
	if _, dup := registry[kind]; dup {
		panic(fmt.Sprintf("drivers: link kind %q registered twice", kind))
	}
	if o.Gauge == nil {
		panic(fmt.Sprintf("drivers: link kind %q registered without a gauge opener", kind))
	}
	registry[kind] = o
}

// Kinds lists the registered link kinds, sorted.
func Kinds() []string {
	regMu.RLock()
	defer regMu.RUnlock()
	out := make([]string, 0, len(registry))
	for k := range registry {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

func lookup(inst config.Instrument) (Opener, error) {
	regMu.RLock()
	o, ok := registry[inst.Link.Kind]
	regMu.RUnlock()
	if !ok {
		return Opener{}, fmt.Errorf("instrument %q: link.kind %q is not available (known: %v)", inst.Name, inst.Link.Kind, Kinds())
	}
	return o, nil
}

// OpenGauge opens an instrument to read pressure from it.
func OpenGauge(inst config.Instrument, env OpenEnv) (Gauge, error) {
	o, err := lookup(inst)
	if err != nil {
		return nil, err
	}
	g, err := o.Gauge(inst, env)
	if err != nil {
		return nil, fmt.Errorf("open instrument %q: %w", inst.Name, err)
	}
	return g, nil
}

// OpenSource opens a pressure controller to drive its setpoint.
func OpenSource(inst config.Instrument, env OpenEnv) (Source, error) {
	o, err := lookup(inst)
	if err != nil {
		return nil, err
	}
	if o.Source == nil {
		return nil, fmt.Errorf("instrument %q: link.kind %q cannot drive a pressure source", inst.Name, inst.Link.Kind)
	}
	s, err := o.Source(inst, env)
	if err != nil {
		return nil, fmt.Errorf("open source %q: %w", inst.Name, err)
	}
	return s, nil
}
