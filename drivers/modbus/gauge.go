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
	table regType
	addr  uint16
	spec  regcodec.Spec
	lin   regcodec.Linear
}

type regType struct {
	name string
	t    mb.RegType
}

func parseValue(v config.ValueRead, key string) (value, error) {
	tables := map[string]regType{
		"": {"holding", mb.HOLDING_REGISTER}, "holding": {"holding", mb.HOLDING_REGISTER},
		"input": {"input", mb.INPUT_REGISTER},
	}
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
	return value{table: t, addr: uint16(v.Register), spec: spec, lin: regcodec.Linear{Scale: v.Scale, Offset: v.Offset}}, nil
}

func unitID(id int) (uint8, error) {
	if id == 0 {
		return 1, nil // the library's and most devices' default
	}
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
	conv    drivers.Conversion
	link    *link
	release func() error
	clk     clock.Clock
	log     *slog.Logger
}

var _ drivers.Gauge = (*Gauge)(nil)

// OpenGauge opens a Modbus gauge from its configuration. It does not connect:
// the first Read does, so a missing device degrades the run instead of
// stopping it.
func OpenGauge(inst config.Instrument, env drivers.OpenEnv) (drivers.Gauge, error) {
	opts, err := linkOptions(inst.Link)
	if err != nil {
		return nil, err
	}
	unit, err := unitID(inst.Link.UnitID)
	if err != nil {
		return nil, err
	}
	val, err := parseValue(inst.Value, "value")
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
		clk: env.Time(), log: env.Logger("instrument", inst.Name, "link", inst.Link.Kind)}, nil
}

// Read fetches the registers, decodes them and converts to pascal. The raw
// words are kept in Reading.Wire as hex.
func (g *Gauge) Read(ctx context.Context) (drivers.Reading, error) {
	words, err := g.readWords(ctx, g.val)
	if err != nil {
		return drivers.Reading{}, err
	}
	at := g.clk.Now()
	wire := hexWords(words)
	g.log.Debug("modbus read", "unit", g.unit, "table", g.val.table.name, "register", g.val.addr,
		"count", len(words), "words", wire)
	raw, err := regcodec.Decode(words, g.val.spec)
	if err != nil {
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindBadReply, err)
	}
	return g.conv.Finish(g.name, drivers.Reading{Time: at, Raw: g.val.lin.Apply(raw), Wire: wire})
}

func (g *Gauge) readWords(ctx context.Context, v value) ([]uint16, error) {
	var words []uint16
	n := uint16(v.spec.Words())
	err := g.link.run(ctx, request{unit: g.unit, what: fmt.Sprintf("read %s %d×%d", v.table.name, v.addr, n),
		do: func(c *mb.ModbusClient) error {
			var err error
			words, err = c.ReadRegisters(v.addr, n, v.table.t)
			return err
		}})
	if err != nil {
		return nil, drivers.Fail(g.name, kindOf(err), err)
	}
	return words, nil
}

// Close releases the shared connection; the last user closes it.
func (g *Gauge) Close() error { return g.release() }

func hexWords(w []uint16) string {
	var b strings.Builder
	for i, x := range w {
		if i > 0 {
			b.WriteByte(' ')
		}
		fmt.Fprintf(&b, "%04X", x)
	}
	return b.String()
}
