package sim

import (
	"fmt"
	"sync/atomic"
)

// dut is one simulated device under test as the rig serves it.
type dut struct {
	k    int
	p    devParams
	j    *injector // its own value and transport faults
	bank *bank
	unit uint8       // its Modbus unit id
	gone atomic.Bool // its link was cut by CutLink
}

// part is the name Mute knows the device's line instrument by.
func (d *dut) part() string {
	if d.k == 0 {
		return PartDevice
	}
	return fmt.Sprintf("%s %d", PartDevice, d.k+1)
}

// CutLink cuts the link of device k (0 for the first) for good, as when
// its cable is pulled: its unit id on the RTU line stops answering, its line
// instrument falls silent, and over Modbus TCP its registers time out at
// the gateway. Nothing restores it. The other devices, the reference and
// the controller go on.
func (r *Rig) CutLink(k int) error {
	if k < 0 || k >= len(r.devs) {
		return fmt.Errorf("simulated device %d: the rig holds %d", k+1, len(r.devs))
	}
	r.devs[k].gone.Store(true)
	r.log.Info("simulated link cut", "device", k+1, "instrument", r.devs[k].p.instrument)
	return nil
}

// cut says whether d's link is cut: by CutLink, or by its cut_at time.
func (r *Rig) cut(d *dut) bool {
	if d.gone.Load() {
		return true
	}
	return d.p.cutAt > 0 && r.clk.Now().Sub(r.epoch) >= d.p.cutAt
}

// LinkCut says whether device k's link is cut.
func (r *Rig) LinkCut(k int) bool { return k >= 0 && k < len(r.devs) && r.cut(r.devs[k]) }

// deviceAt is the device at a unit id, nil for none. With one device it
// answers at every unit id, as the bench always did over TCP.
func (r *Rig) deviceAt(unit uint8) *dut {
	if len(r.devs) == 1 {
		return r.devs[0]
	}
	if i := int(unit) - int(r.unit); i >= 0 && i < len(r.devs) {
		return r.devs[i]
	}
	return nil
}

// deviceFor is the device the named instrument reads: the one whose
// simulator.devices entry names it, or the only one.
func (r *Rig) deviceFor(instrument string) (*dut, error) {
	if len(r.devs) == 1 && r.devs[0].p.instrument == "" {
		return r.devs[0], nil
	}
	for _, d := range r.devs {
		if d.p.instrument == instrument {
			return d, nil
		}
	}
	return nil, fmt.Errorf("no entry of simulator.devices names it (instrument: %s)", instrument)
}

// rtuLine is the RTU bus: one responder per device, by unit id.
type rtuLine struct {
	devs  []*dut
	units map[uint8]int
	resp  []*rtuResponder
}

func newRTULine(devs []*dut) *rtuLine {
	l := &rtuLine{devs: devs, units: map[uint8]int{}}
	for i, d := range devs {
		l.units[d.unit] = i
		l.resp = append(l.resp, &rtuResponder{unit: d.unit, h: d.bank})
	}
	return l
}

// route picks the device a frame is addressed to (nil for another id, as
// a real line has units plateau does not know). A broadcast is executed
// once, by the first device's responder, which stays silent as the rules
// say.
func (l *rtuLine) route(frame []byte) (*dut, *rtuResponder) {
	if len(frame) < minRTUFrame {
		return nil, nil
	}
	if frame[0] == broadcastUnit {
		return l.devs[0], l.resp[0]
	}
	i, ok := l.units[frame[0]]
	if !ok {
		return nil, nil
	}
	return l.devs[i], l.resp[i]
}

// touchesDevice says whether a request reaches any register that belongs
// to the device rather than to the shared reference or controller.
func touchesDevice(regs []Register, table string, addr, qty uint16) bool {
	lo, hi := int(addr), int(addr)+int(qty)
	for _, g := range regs {
		if g.perDevice && inTable(g, table) && g.Addr < hi && g.Addr+words(g) > lo {
			return true
		}
	}
	return false
}
