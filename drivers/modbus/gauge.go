package modbus

import (
	"context"
	"fmt"
	"log/slog"
	"strings"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
	"plateau/drivers/regcodec"
)

func init() {
	opener := drivers.Opener{Gauge: OpenGauge, Source: OpenSource}
	for _, k := range []string{config.LinkModbusTCP, config.LinkModbusRTU, config.LinkModbusRTUTCP} {
		drivers.Register(k, opener)
	}
}

// value is where one number lives and how it is decoded.
type value struct {
	table mb.RegType
	addr  uint16
	spec  regcodec.Spec
	lin   regcodec.Linear
}

var tables = map[string]mb.RegType{"holding": mb.HOLDING_REGISTER, "input": mb.INPUT_REGISTER}

// parseValue checks a value spec; key names it in errors ("value",
// "source.setpoint"). Every field must be set: the driver adds no defaults.
func parseValue(v config.ValueRead, key string) (value, error) {
	t, ok := tables[strings.ToLower(v.Table)]
	if !ok {
		return value{}, fmt.Errorf("%s.table %q: want holding or input", key, v.Table)
	}
	spec, err := regcodec.ParseSpec(v.Type, v.WordOrder)
	if err != nil {
		return value{}, fmt.Errorf("%s: %w", key, err)
	}
	if v.Register < 0 || v.Register+spec.Words()-1 > 0xFFFF {
		return value{}, fmt.Errorf("%s.register %d: want a 0-based wire address 0 … %d", key, v.Register, 0x10000-spec.Words())
	}
	lin, err := regcodec.NewLinear(v.Scale, v.Offset)
	if err != nil {
		return value{}, fmt.Errorf("%s: %w", key, err)
	}
	return value{table: t, addr: uint16(v.Register), spec: spec, lin: lin}, nil
}

func unitID(id int) (uint8, error) {
	if id < 1 || id > 247 {
		return 0, fmt.Errorf("link.unit_id %d: want 1 … 247", id)
	}
	return uint8(id), nil
}

// Gauge reads one value from one unit.
type Gauge struct {
	name    string
	unit    uint8
	val     value
	read    op // the read request, prepared once
	conv    drivers.Conversion
	link    *link
	release func() error
	clk     clock.Clock
	log     *slog.Logger
	rate    drivers.RateMeter
}

var (
	_ drivers.Gauge        = (*Gauge)(nil)
	_ drivers.RateReporter = (*Gauge)(nil)
)

// OpenGauge opens a Modbus gauge from its configuration. It does not connect:
// the first Read does, so a missing device degrades the run instead of
// stopping it.
func OpenGauge(inst config.Instrument, env drivers.OpenEnv) (drivers.Gauge, error) {
	return openGauge(inst, inst.Value, "value", env)
}

func openGauge(inst config.Instrument, v config.ValueRead, key string, env drivers.OpenEnv) (*Gauge, error) {
	opts, err := linkOptions(inst.Link)
	if err != nil {
		return nil, err
	}
	unit, err := unitID(inst.Link.UnitID)
	if err != nil {
		return nil, err
	}
	val, err := parseValue(v, key)
	if err != nil {
		return nil, err
	}
	conv, err := drivers.NewConversion(inst)
	if err != nil {
		return nil, err
	}
	l, release, err := acquireLink(opts, env.Logger("link", inst.Link.Kind))
	if err != nil {
		return nil, err
	}
	return &Gauge{name: inst.Name, unit: unit, val: val, conv: conv, link: l, release: release,
		read: op{code: opReadRegisters, unit: unit, table: val.table, addr: val.addr, n: uint16(val.spec.Words())},
		clk:  env.Time(), log: env.Logger("instrument", inst.Name, "link", inst.Link.Kind)}, nil
}

// Read fetches the registers, decodes them and converts to pascal. The raw
// words are kept in Reading.Wire as hex.
func (g *Gauge) Read(ctx context.Context) (drivers.Reading, error) {
	res, err := g.link.run(ctx, &g.read)
	if err != nil {
		return drivers.Reading{}, drivers.Fail(g.name, kindOf(err), err)
	}
	at := g.clk.Now()
	wire := regcodec.Hex(res.words)
	if g.log.Enabled(ctx, slog.LevelDebug) {
		g.log.Debug("modbus read", "unit", g.unit, "table", tableName(g.val.table), "register", g.val.addr,
			"count", len(res.words), "words", wire)
	}
	raw, err := regcodec.Decode(res.words, g.val.spec)
	if err != nil {
		return drivers.Reading{Time: at, Wire: wire}, drivers.Fail(g.name, drivers.KindBadReply, err)
	}
	r, err := g.conv.Finish(g.name, drivers.Reading{Time: at, Raw: g.val.lin.Apply(raw), Wire: wire})
	if err == nil {
		g.rate.Mark(at)
	}
	return r, err
}

// ReadRate is the rate of good reads this gauge achieves; on a line shared
// with other units it can be below what its poll interval asks for.
func (g *Gauge) ReadRate() drivers.Rate { return g.rate.Rate() }

// Close releases the shared connection; the last user closes it.
func (g *Gauge) Close() error { return g.release() }
