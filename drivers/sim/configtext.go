package sim

import (
	"fmt"
	"reflect"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"plateau/config"
)

// ConfigYAML is a ready-to-use configuration for the running rig: the
// reference over Modbus TCP, the device under test over Modbus RTU on the
// pseudo-terminal (or operator entry for a dial), the source over Modbus
// TCP, and device/reference sections that match the simulated instruments.
// Keys come from the config package's mapstructure tags, so the text follows
// the config structs as they change.
func (r *Rig) ConfigYAML() (string, error) {
	ep := r.Endpoints()
	if ep.TCP == "" {
		return "", ErrNotStarted
	}
	wanted := []config.Instrument{
		{Name: "sim-reference", Role: config.RoleReference, SimPart: PartReference, SimVia: config.LinkModbusTCP},
		{Name: "sim-device", Role: config.RoleDevice, SimPart: PartDevice, SimVia: config.LinkModbusRTU},
		{Name: "sim-source", Role: config.RoleSource, SimPart: PartSource, SimVia: config.LinkModbusTCP},
	}
	var insts []config.Instrument
	for _, w := range wanted {
		w.Link.Kind = config.LinkSim
		w.Poll = 250 * time.Millisecond
		in, err := r.Resolve(w)
		if err != nil {
			return "", err
		}
		insts = append(insts, in)
	}
	dev := r.cfg.Device
	refUpper := r.p.refUnit.FromPa(max(r.p.maxPa, r.p.upper))
	sections := []section{
		{"instruments", insts, "The simulated rig's instruments. Also served: every part over Modbus TCP at " + ep.TCP + ";\n" +
			"line instruments (link: {kind: serial, address: …}, line: {query: \"" + CmdRead + "\"}) for the\n" +
			"reference at " + ep.ReferenceLine + " and the device at " + ep.DeviceLine + "."},
		{"device", config.Device{
			ID: "SIM-DUT", Manufacturer: "plateau", Model: "simulated " + dev.Kind, Kind: dev.Kind,
			Lower: dev.Lower, Upper: dev.Upper, Unit: r.p.devUnit.Symbol, Resolution: dev.Resolution,
			Limit: config.Limit{Span: "0.5 %"},
		}, "The simulated device under test (its built-in errors are set in the simulator section)."},
		{"reference", config.Reference{
			ID: "SIM-REF", Model: "simulated reference",
			Lower: fmt.Sprintf("%g %s", r.p.refUnit.FromPa(r.p.minPa), r.p.refUnit.Symbol),
			Upper: fmt.Sprintf("%g %s", refUpper, r.p.refUnit.Symbol), Uncertainty: "0.01 %", Coverage: 2,
		}, "The simulated reference standard (an invented certificate, for the simulator only)."},
	}
	return renderYAML(sections)
}

// section is one top-level key of the generated file.
type section struct {
	key     string
	value   any
	comment string
}

func renderYAML(sections []section) (string, error) {
	doc := &yaml.Node{Kind: yaml.MappingNode}
	for _, s := range sections {
		v := toNode(reflect.ValueOf(s.value))
		if v == nil {
			continue
		}
		doc.Content = append(doc.Content, &yaml.Node{Kind: yaml.ScalarNode, Value: s.key, HeadComment: s.comment}, v)
	}
	var b strings.Builder
	enc := yaml.NewEncoder(&b)
	enc.SetIndent(2)
	if err := enc.Encode(&yaml.Node{Kind: yaml.DocumentNode, Content: []*yaml.Node{doc}}); err != nil {
		return "", fmt.Errorf("render config: %w", err)
	}
	if err := enc.Close(); err != nil {
		return "", fmt.Errorf("render config: %w", err)
	}
	return b.String(), nil
}

// alwaysKeep are keys written even when zero, because zero is a real value
// there (register 0, coil 0).
var alwaysKeep = map[string]bool{"register": true}

// toNode converts a value to YAML using mapstructure tags as keys, leaving
// out zero values (the config's defaults fill them) except where zero means
// something. It returns nil for a value to leave out.
func toNode(v reflect.Value) *yaml.Node {
	scalar := func(s, tag string) *yaml.Node { return &yaml.Node{Kind: yaml.ScalarNode, Value: s, Tag: tag} }
	switch v.Kind() {
	case reflect.Pointer, reflect.Interface:
		if v.IsNil() {
			return nil
		}
		return toNode(v.Elem())
	case reflect.Struct:
		m := &yaml.Node{Kind: yaml.MappingNode}
		t := v.Type()
		for i := 0; i < t.NumField(); i++ {
			key := t.Field(i).Tag.Get("mapstructure")
			if key == "" || key == "-" || !t.Field(i).IsExported() {
				continue
			}
			f := v.Field(i)
			if f.IsZero() && !alwaysKeep[key] {
				continue
			}
			if n := toNode(f); n != nil {
				m.Content = append(m.Content, scalar(key, "!!str"), n)
			}
		}
		if len(m.Content) == 0 {
			return nil
		}
		return m
	case reflect.Slice:
		s := &yaml.Node{Kind: yaml.SequenceNode}
		for i := 0; i < v.Len(); i++ {
			if n := toNode(v.Index(i)); n != nil {
				s.Content = append(s.Content, n)
			}
		}
		if v.Type().Elem().Kind() != reflect.Struct {
			s.Style = yaml.FlowStyle
		}
		return s
	case reflect.String:
		return scalar(v.String(), "!!str")
	case reflect.Bool:
		return scalar(strconv.FormatBool(v.Bool()), "")
	case reflect.Int, reflect.Int64:
		if d, ok := v.Interface().(time.Duration); ok {
			return scalar(d.String(), "!!str")
		}
		return scalar(strconv.FormatInt(v.Int(), 10), "")
	case reflect.Float64:
		return scalar(strconv.FormatFloat(v.Float(), 'g', -1, 64), "")
	}
	return scalar(fmt.Sprint(v.Interface()), "!!str")
}
