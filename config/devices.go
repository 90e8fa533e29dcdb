package config

import (
	"fmt"
	"reflect"
	"strings"
)

// MaxDevices is the most devices under test one run may hold.
const MaxDevices = 64

// DeviceEntry is the optional device: section of an instrument with role
// device. What it leaves out comes from the file's top-level device:
// section, so devices of one type share that section and give only their
// identity here.
type DeviceEntry struct {
	Device `mapstructure:",squash"`
	// Height is the height of this device's pressure reference level, m,
	// for the head correction; head.device_height when left out.
	Height *float64 `mapstructure:"height"`
}

// DeviceUnderTest is one device of the run, fully resolved.
type DeviceUnderTest struct {
	Instrument string  // the name of its instruments entry ("" when the file has none)
	Index      int     // its index in Instruments, -1 when the file has none
	Key        string  // where it is described: "device" or "instruments[3].device"
	Device     Device  // identity, kind, range, unit, resolution and accuracy (…Pa resolved)
	HeightM    float64 // height of its pressure reference level, m

	given map[string]bool // fields its own section gave; the rest came from device:
}

// resolveDevices builds c.Devices in instrument order. A file with one
// device and no device: section in its entry has the top-level device:
// section as its device, as it always had; several devices need a section
// each. c.Device is the first device, for code that knows only one.
func (c *Config) resolveDevices(p *Problems) {
	c.Devices = c.Devices[:0]
	var idx []int
	entries := 0
	for i, in := range c.Instruments {
		if in.Role == RoleDevice {
			idx = append(idx, i)
			if in.Device != nil {
				entries++
			}
		}
	}
	if entries == 0 && len(idx) <= 1 {
		c.Device.resolve(p, func(f string) string { return "device." + f })
		dut := DeviceUnderTest{Index: -1, Key: "device", Device: c.Device, HeightM: c.Head.DeviceHeight}
		if len(idx) > 0 {
			dut.Index, dut.Instrument = idx[0], c.Instruments[idx[0]].Name
		}
		c.Devices = append(c.Devices, dut)
		return
	}
	if len(idx) > MaxDevices {
		p.bad("instruments", "", "%d instruments have role: device; one run calibrates at most %d", len(idx), MaxDevices)
		idx = idx[:MaxDevices]
	}
	for _, i := range idx {
		in := &c.Instruments[i]
		key := fmt.Sprintf("instruments[%d].device", i)
		if in.Device == nil {
			p.bad(fmt.Sprintf("instruments[%d]", i), in.Name, "is one of several devices under test: give it a device: section with at least its id")
			continue
		}
		d, given := merge(c.Device, in.Device.Device, func(k string) bool {
			_, ok := p.lines[strings.ToLower(key+"."+k)]
			return ok
		})
		dut := DeviceUnderTest{Instrument: in.Name, Index: i, Key: key, HeightM: c.Head.DeviceHeight, given: given}
		if in.Device.Height != nil {
			dut.HeightM, given["height"] = *in.Device.Height, true
		}
		d.resolve(p, dut.keyOf)
		in.Device.Device, dut.Device = d, d
		c.Devices = append(c.Devices, dut)
	}
	if len(c.Devices) > 0 {
		c.Device = c.Devices[0].Device
	}
}

// merge fills what own leaves out from shared (the top-level section);
// isGiven says whether own's section gave a key. The accuracy is taken
// whole: a device that gives a class, a grade or a limit inherits none of
// the three. Oxygen service declared for all stays on for each: a device
// cannot opt out of what the shared line demands.
func merge(shared, own Device, isGiven func(key string) bool) (Device, map[string]bool) {
	given := map[string]bool{}
	out := own
	ov, sv := reflect.ValueOf(&out).Elem(), reflect.ValueOf(shared)
	accuracy := isGiven("class") || isGiven("grade") || isGiven("limit")
	for i := 0; i < ov.NumField(); i++ {
		tag := ov.Type().Field(i).Tag.Get("mapstructure")
		if tag == "" || tag == "-" || !ov.Field(i).CanSet() {
			continue
		}
		switch {
		case tag == "class" || tag == "grade" || tag == "limit":
			given[tag] = accuracy
			if accuracy {
				continue
			}
		case isGiven(tag):
			given[tag] = true
			continue
		}
		ov.Field(i).Set(sv.Field(i))
	}
	out.Oxygen = out.Oxygen || shared.Oxygen
	return out, given
}

// validateDevices judges every device, and what several devices need:
// their own identity and a range that holds every planned point.
func (c *Config) validateDevices(p *Problems) {
	ids := map[string]string{}
	for _, dut := range c.Devices {
		keyOf := dut.keyOf
		d := dut.Device
		d.validate(p, keyOf)
		if len(c.Devices) > 1 {
			switch prev, dup := ids[d.ID]; {
			case strings.TrimSpace(d.ID) == "":
				p.bad(dut.Key+".id", "", "each of several devices needs its own id, as on its label or certificate")
			case dup:
				p.bad(keyOf("id"), d.ID, "is also the id of %s: each device needs its own", prev)
			default:
				ids[d.ID] = dut.Key
			}
		}
	}
}

// keyOf names the key a field of this device came from: its own section,
// or the shared device: section.
func (dut DeviceUnderTest) keyOf(f string) string {
	if dut.Key != "device" && dut.given[strings.SplitN(f, ".", 2)[0]] {
		return dut.Key + "." + f
	}
	return "device." + f
}

// name says which device a message is about, for a file with several.
func (dut DeviceUnderTest) name() string {
	if dut.Instrument == "" {
		return "the device"
	}
	return fmt.Sprintf("device %q (%s)", dut.Instrument, dut.Key)
}
