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
// reference over Modbus TCP, each device under test over Modbus RTU at its
// own unit id on the one simulated line (or operator entry for a dial), the
// source over Modbus TCP, and device/reference sections that match the
// simulated instruments. With several devices every device instrument gets
// its own device: section. Keys come from the config package's mapstructure
// tags, so the text follows the config structs as they change.
func (r *Rig) ConfigYAML() (string, error) {
	ep := r.Endpoints()
	if ep.TCP == "" {
		return "", ErrNotStarted
	}
	wanted := []config.Instrument{
		{Name: "sim-reference", Role: config.RoleReference, SimPart: PartReference, SimVia: config.LinkModbusTCP},
	}
	several := len(r.devs) > 1
	for _, d := range r.devs {
		in := config.Instrument{Name: "sim-device", Role: config.RoleDevice, SimPart: PartDevice, SimVia: config.LinkModbusRTU}
		if d.p.instrument != "" {
			in.Name = d.p.instrument
		}
		if several {
			in.Device = &config.DeviceEntry{Device: r.deviceSection(d)}
		}
		wanted = append(wanted, in)
	}
	wanted = append(wanted, config.Instrument{Name: "sim-source", Role: config.RoleSource, SimPart: PartSource, SimVia: config.LinkModbusTCP})
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
	top := r.p.maxPa
	for _, d := range r.devs {
		top = max(top, d.p.upper)
	}
	refUpper := r.p.refUnit.FromPa(top)
	lines := "the device at " + ep.DeviceLine
	if several {
		lines = "the devices at"
		for i, d := range ep.Devices {
			if i > 0 {
				lines += ","
			}
			lines += " " + d.Line
		}
	}
	devSection := section{"device", r.deviceSection(r.devs[0]), "The simulated device under test (its built-in errors are set in the simulator section)."}
	if several {
		devSection = section{"device", config.Device{Manufacturer: "plateau", Limit: config.Limit{Span: "0.5 %"}},
			"What the simulated devices share; each device instrument has its own device: section\n" +
				"(their built-in errors are set in the simulator section)."}
	}
	sections := []section{
		{"instruments", insts, "The simulated rig's instruments. Also served: every part over Modbus TCP at " + ep.TCP + ";\n" +
			"line instruments (link: {kind: serial, address: …}, line: {query: \"" + CmdRead + "\"}) for the\n" +
			"reference at " + ep.ReferenceLine + " and " + lines + "."},
		devSection,
		{"reference", config.Reference{
			ID: "SIM-REF", Model: "simulated reference",
			Lower: fmt.Sprintf("%g %s", r.p.refUnit.FromPa(r.p.minPa), r.p.refUnit.Symbol),
			Upper: fmt.Sprintf("%g %s", refUpper, r.p.refUnit.Symbol), Uncertainty: "0.01 %", Coverage: 2,
		}, "The simulated reference standard (an invented certificate, for the simulator only)."},
	}
	return renderYAML(sections)
}

// deviceSection describes one simulated device as a device: section.
func (r *Rig) deviceSection(d *dut) config.Device {
	dev := config.Device{
		ID: "SIM-DUT", Manufacturer: "plateau", Model: "simulated " + d.p.kind, Kind: d.p.kind,
		Lower: d.p.lowerText, Upper: d.p.upperText, Unit: d.p.devUnit.Symbol,
		Resolution: r.cfg.Device.Resolution, Limit: config.Limit{Span: "0.5 %"},
	}
	if len(r.devs) > 1 {
		dev.ID, dev.Manufacturer, dev.Limit = fmt.Sprintf("SIM-DUT-%d", d.k+1), "", config.Limit{}
		dev.Resolution = r.cfg.Devices[d.k].Resolution
	}
	if d.p.devRes <= 0 { // a perfect simulated display: a step the config accepts
		dev.Resolution = fmt.Sprintf("%g %s", d.p.devUnit.FromPa((d.p.upper-d.p.lower)/1e5), d.p.devUnit.Symbol)
	}
	return dev
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
			if key == ",squash" { // the embedded struct's keys sit at this level
				if n := toNode(f); n != nil {
					m.Content = append(m.Content, n.Content...)
				}
				continue
			}
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
