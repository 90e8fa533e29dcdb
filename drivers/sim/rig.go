// Package sim is plateau's simulated comparison bench: a pressure source
// with a first-order (optionally overshooting, optionally leaking) response,
// a reference transducer and one or several devices under test (digital
// gauge, 4–20 mA transmitter or analog dial read by a simulated operator),
// each with its own errors, served over real transports so the real drivers
// are exercised end to end:
//
//   - Modbus TCP on loopback (the server of github.com/simonvetter/modbus);
//   - Modbus RTU on a pseudo-terminal pair, one line all devices share (the
//     project's own responder: t3.5 framing, CRC-16/MODBUS, function codes
//     01 02 03 04 05 06 15 16), the n-th device at unit id n, silent for
//     every other id as a real line is, optionally at the wire's pace;
//   - one ASCII line instrument per measuring part (the reference, each
//     device), each on its own pseudo-terminal pair: send "READ?" and a line
//     end, get "+12.3456 bar".
//
// Every unit id serves one register map (see RegisterMap and the Reg…
// constants): the shared reference and controller, and its own device. The
// physics reads the acquisition clock, so a scaled clock accelerates a run,
// and it is deterministic given the seed. Faults (dropped or slow replies,
// bad CRC, garbage lines, link outages, stuck values, spikes) are switched
// on by config.SimFaults; CutLink (or simulator.devices[i].cut_at) cuts one
// device's link for good.
package sim

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log"
	"log/slog"
	"net"
	"strings"
	"sync"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/analysis"
	"plateau/config"
	"plateau/drivers/clock"
)

// Endpoints tells where the running rig can be reached.
type Endpoints struct {
	TCP           string // host:port of the Modbus TCP server (any unit id with one device)
	RTU           string // serial device of the Modbus RTU line
	UnitID        int    // the first device's unit id, where the reference and source are read
	RTUBaud       int    // the baud rate its t3.5 timing assumes
	ReferenceLine string // serial device of the reference's line instrument
	DeviceLine    string // serial device of the first device's line instrument
	Devices       []DeviceEndpoint
	Registers     []Register
}

// DeviceEndpoint is where one simulated device under test answers.
type DeviceEndpoint struct {
	Instrument string // the instrument that reads it ("" for the one device of simulator.device)
	Kind       string
	UnitID     int    // on the RTU line and over Modbus TCP
	Line       string // serial device of its line instrument
}

// Rig is a running (or ready) simulated bench.
type Rig struct {
	cfg      config.Simulator
	p        params
	clk      clock.Clock
	log      *slog.Logger
	m        *model
	j        *injector // the first device's, which the reference and source share
	bank     *bank     // the first device's
	devs     []*dut
	epoch    time.Time
	muteMu   sync.Mutex
	mute     map[string]bool // parts whose line instrument does not answer
	tcpAddr  string
	unit     uint8
	baud     int
	dropHold time.Duration

	amb *ambientSim // the simulated room (ambient.go)

	mu      sync.Mutex
	started bool
	ep      Endpoints
	tcp     *modbus.ModbusServer
	ports   []*ptyPort
	cancel  context.CancelFunc
	wg      sync.WaitGroup
}

// Option adjusts a rig.
type Option func(*Rig)

// WithLogger sends the rig's log lines to l (the default discards them).
func WithLogger(l *slog.Logger) Option { return func(r *Rig) { r.log = l } }

// WithTCPAddress makes the Modbus TCP server listen on addr ("127.0.0.1:0",
// the default, picks a free port).
func WithTCPAddress(addr string) Option { return func(r *Rig) { r.tcpAddr = addr } }

// WithUnitID sets the first device's RTU slave address (default 1); the
// others follow it.
func WithUnitID(id uint8) Option { return func(r *Rig) { r.unit = id } }

// WithDropHold sets how long a TCP reply is held back when it is "dropped":
// the library's server cannot stay silent, so the reply comes after the
// client has given up (default 1.5 s, above the 1 s client default).
func WithDropHold(d time.Duration) Option { return func(r *Rig) { r.dropHold = d } }

// New builds a rig from a simulator section (empty fields take the
// defaults of WithDefaults) reading time from clk.
func New(s config.Simulator, clk clock.Clock, opts ...Option) (*Rig, error) {
	s = WithDefaults(s)
	p, err := parseParams(s)
	if err != nil {
		return nil, err
	}
	if clk == nil {
		clk = clock.Wall{}
	}
	r := &Rig{
		cfg: s, p: p, clk: clk,
		log:      slog.New(slog.DiscardHandler),
		tcpAddr:  "127.0.0.1:0",
		unit:     1,
		baud:     19200,
		dropHold: 1500 * time.Millisecond,
	}
	for _, o := range opts {
		o(r)
	}
	if last := int(r.unit) + len(p.devs) - 1; r.unit < 1 || last > 247 {
		return nil, fmt.Errorf("simulator: %d devices from unit id %d run past 247, the last Modbus address", len(p.devs), r.unit)
	}
	r.baud = p.baud
	epoch := clk.Now()
	r.epoch = epoch
	r.m = newModel(p, epoch)
	ctl := &controller{}
	for k, d := range p.devs {
		// The first device keeps the rig's seed, so a one-device bench
		// meets the faults it always met.
		seed := p.seed
		if k > 0 {
			seed = splitmix(p.seed ^ uint64(k))
		}
		j := newInjector(p.faults, seed, epoch)
		b := &bank{m: r.m, j: j, clk: clk, p: p, k: k, ctl: ctl, regs: registerMap(p.refUnit.Symbol, d.devUnit.Symbol)}
		r.devs = append(r.devs, &dut{k: k, p: d, j: j, bank: b, unit: r.unit + uint8(k)})
	}
	r.j, r.bank = r.devs[0].j, r.devs[0].bank
	return r, nil
}

// Settings returns the simulator section in force, defaults filled in.
func (r *Rig) Settings() config.Simulator { return r.cfg }

// Start opens the transports and serves until Stop or until ctx ends.
func (r *Rig) Start(ctx context.Context) (Endpoints, error) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.started {
		return r.ep, nil
	}
	ctx, cancel := context.WithCancel(ctx)
	fail := func(err error) (Endpoints, error) {
		cancel()
		r.closeLocked()
		return Endpoints{}, err
	}
	tcp, addr, err := r.listenTCP()
	if err != nil {
		return fail(err)
	}
	r.tcp = tcp
	ep := Endpoints{TCP: addr, UnitID: int(r.unit), RTUBaud: r.baud, Registers: r.bank.regs}

	// One line for the RTU bus, one for the reference, one per device.
	for range 2 + len(r.devs) {
		port, err := openPTY()
		if err != nil {
			return fail(err)
		}
		r.ports = append(r.ports, port)
	}
	rtuPort, refPort := r.ports[0], r.ports[1]
	ep.RTU, ep.ReferenceLine, ep.DeviceLine = rtuPort.Path, refPort.Path, r.ports[2].Path
	line := newRTULine(r.devs)
	r.run(ctx, func(ctx context.Context) error { return r.serveRTU(ctx, rtuPort, line) })
	r.run(ctx, func(ctx context.Context) error {
		return r.serveLines(ctx, refPort, "reference", r.devs[0], func(s Sample) (float64, string, bool) {
			return s.Reference, r.p.refUnit.Symbol, false
		}, r.p.refUnit.FromPa(r.p.refRes))
	})
	for k, d := range r.devs {
		port := r.ports[2+k]
		ep.Devices = append(ep.Devices, DeviceEndpoint{Instrument: d.p.instrument, Kind: d.p.kind, UnitID: int(d.unit), Line: port.Path})
		r.run(ctx, func(ctx context.Context) error {
			if d.p.kind == KindTransmitter {
				return r.serveLines(ctx, port, d.part(), d, func(s Sample) (float64, string, bool) {
					return s.Current, "mA", false
				}, 0.001)
			}
			return r.serveLines(ctx, port, d.part(), d, func(s Sample) (float64, string, bool) {
				return s.Device, d.p.devUnit.Symbol, s.Over
			}, d.p.devUnit.FromPa(d.p.devRes))
		})
	}
	if r.p.faults.LinkDown > 0 {
		r.run(ctx, r.superviseLink)
	}
	r.wg.Add(1)
	go func() { // Stop when the caller's context ends
		defer r.wg.Done()
		<-ctx.Done()
		r.mu.Lock()
		defer r.mu.Unlock()
		r.closeLocked()
	}()
	if err := r.startAmbient(ctx); err != nil {
		return fail(err)
	}
	r.cancel, r.started, r.ep = cancel, true, ep
	r.log.Info("simulated rig started", "tcp", ep.TCP, "rtu", ep.RTU,
		"reference_line", ep.ReferenceLine, "device_line", ep.DeviceLine)
	return ep, nil
}

// run starts a transport loop; its error, if any, is logged.
func (r *Rig) run(ctx context.Context, f func(context.Context) error) {
	r.wg.Add(1)
	go func() {
		defer r.wg.Done()
		if err := f(ctx); err != nil && ctx.Err() == nil {
			r.log.Error("simulated transport stopped", "err", err)
		}
	}()
}

// Stop closes every transport and waits for the loops to end.
func (r *Rig) Stop() {
	r.mu.Lock()
	cancel := r.cancel
	r.mu.Unlock()
	if cancel != nil {
		cancel()
	}
	r.wg.Wait()
}

func (r *Rig) closeLocked() {
	if r.tcp != nil {
		r.tcp.Stop()
	}
	for _, p := range r.ports {
		p.Close()
	}
	r.ports, r.tcp = nil, nil
	r.started, r.ep = false, Endpoints{}
}

// Endpoints returns where the started rig listens (zero before Start).
func (r *Rig) Endpoints() Endpoints {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.ep
}

// RegisterMap lists the registers every Modbus transport serves, with this
// rig's units.
func (r *Rig) RegisterMap() []Register { return r.bank.regs }

// Sample is what the instruments show now (faults not applied), with the
// first device.
func (r *Rig) Sample() Sample { return r.m.sample(r.clk.Now(), 0) }

// DeviceSample is Sample with device k (0 for the first).
func (r *Rig) DeviceSample(k int) Sample { return r.m.sample(r.clk.Now(), k) }

// Devices is how many devices under test the rig holds.
func (r *Rig) Devices() int { return len(r.devs) }

// Mute silences the line instrument of one part ("reference", "device"
// for the first device, "device 2" and on for the others): it stops
// answering, as an instrument whose cable was pulled does, until Mute is
// called again with false.
func (r *Rig) Mute(part string, on bool) {
	r.muteMu.Lock()
	defer r.muteMu.Unlock()
	if r.mute == nil {
		r.mute = map[string]bool{}
	}
	r.mute[part] = on
}

func (r *Rig) muted(part string) bool {
	r.muteMu.Lock()
	defer r.muteMu.Unlock()
	return r.mute[part]
}

// Writes is the log of the setpoints and vents the simulated controller
// accepted over the wire, in order: every one of a run, the latest few
// thousand of a bench that has served for days.
func (r *Rig) Writes() []Write { return r.bank.ctl.accepted() }

// SetPoint moves the simulated source directly, as its front panel would.
func (r *Rig) SetPoint(pa float64) error {
	if pa > r.p.maxPa || pa < r.p.minPa {
		return fmt.Errorf("setpoint %g Pa outside the simulated controller's %g … %g Pa", pa, r.p.minPa, r.p.maxPa)
	}
	r.m.setPoint(r.clk.Now(), pa)
	return nil
}

// Vent opens the simulated system to atmosphere.
func (r *Rig) Vent() { r.m.vent(r.clk.Now()) }

// DeviceError is the device's known systematic error of indication at true
// pressure p (Pa) approached from direction d, in pascal: zero offset + span
// error + bow ∓ half the dead band. It excludes resolution and noise, and
// assumes the approach moved the pointer through the whole dead band (an
// overshoot larger than the dead band puts an upward point on the
// downward branch, as on a real bench).
func (r *Rig) DeviceError(p float64, d analysis.Direction) float64 { return r.m.deviceError(0, p, d) }

// DeviceErrorOf is DeviceError for device k (0 for the first), in the
// order of simulator.devices.
func (r *Rig) DeviceErrorOf(k int, p float64, d analysis.Direction) float64 {
	return r.m.deviceError(k, p, d)
}

// DeviceIndex is the index of the simulated device the named instrument
// reads, false when none does.
func (r *Rig) DeviceIndex(instrument string) (int, bool) {
	d, err := r.deviceFor(instrument)
	if err != nil {
		return 0, false
	}
	return d.k, true
}

// ReferenceError is the reference transducer's own error at true pressure
// p, in pascal (its % of reading error).
func (r *Rig) ReferenceError(p float64) float64 { return p * r.p.refErr }

// listenTCP starts the library's server on the configured address. The
// library does not report the port it bound, so a free port is reserved
// first and the bind retried if another process takes it in between.
func (r *Rig) listenTCP() (*modbus.ModbusServer, string, error) {
	var last error
	for range 5 {
		addr := r.tcpAddr
		if strings.HasSuffix(addr, ":0") {
			l, err := net.Listen("tcp", addr)
			if err != nil {
				return nil, "", fmt.Errorf("reserve a port on %s: %w", addr, err)
			}
			addr = l.Addr().String()
			l.Close()
		}
		srv, err := r.serveTCP(addr)
		if err == nil {
			return srv, addr, nil
		}
		last = err
		if !strings.HasSuffix(r.tcpAddr, ":0") {
			break
		}
	}
	return nil, "", last
}

// serveTCP starts a Modbus TCP server on addr. A server is never restarted
// after Stop (the library's accept loop reads its listener unguarded), so
// the link schedule builds a new one each time the link comes back.
func (r *Rig) serveTCP(addr string) (*modbus.ModbusServer, error) {
	srv, err := modbus.NewServer(&modbus.ServerConfiguration{
		URL:        "tcp://" + addr,
		Timeout:    5 * time.Minute,
		MaxClients: 32,
		Logger:     log.New(io.Discard, "", 0),
	}, &tcpHandler{r: r})
	if err != nil {
		return nil, fmt.Errorf("modbus server on %s: %w", addr, err)
	}
	if err := srv.Start(); err != nil {
		return nil, fmt.Errorf("start modbus server on %s: %w", addr, err)
	}
	return srv, nil
}

// superviseLink takes the TCP server away and back on the link schedule;
// the serial transports check the schedule per request.
func (r *Rig) superviseLink(ctx context.Context) error {
	for {
		now := r.clk.Now()
		select {
		case <-ctx.Done():
			return nil
		case <-r.clk.After(r.j.nextLinkChange(now).Sub(now)):
		}
		down := r.j.linkDown(r.clk.Now())
		r.mu.Lock()
		var err error
		if ctx.Err() == nil {
			switch {
			case down && r.tcp != nil:
				err = r.tcp.Stop()
				r.tcp = nil
			case !down && r.tcp == nil:
				r.tcp, err = r.serveTCP(r.ep.TCP)
			}
		}
		r.mu.Unlock()
		r.log.Info("simulated link", "down", down, "err", err)
	}
}

// tcpHandler applies the transport faults to the answers of the bank of
// the device a request's unit id names. Over TCP the rig is a gateway: the
// reference and the controller answer at any unit id; a device's registers
// answer at its own unit id only (at any id when there is one device).
type tcpHandler struct{ r *Rig }

// pick finds the device for a request and applies its transport faults.
func (h *tcpHandler) pick(unit uint8, table string, addr, qty uint16) (*bank, error) {
	r := h.r
	d := r.deviceAt(unit)
	if d == nil {
		if len(r.devs) > 1 && touchesDevice(r.bank.regs, table, addr, qty) {
			return nil, modbus.ErrGWPathUnavailable // no such device behind the gateway
		}
		d = r.devs[0]
	}
	if r.cut(d) && touchesDevice(r.bank.regs, table, addr, qty) {
		time.Sleep(r.dropHold) // the gateway waits for the device in vain
		return nil, modbus.ErrGWTargetFailedToRespond
	}
	f := d.j.request(0)
	switch {
	case f.drop:
		time.Sleep(r.dropHold)
		return nil, modbus.ErrServerDeviceBusy
	case f.delay > 0:
		time.Sleep(f.delay)
	}
	return d.bank, nil
}

func (h *tcpHandler) HandleCoils(req *modbus.CoilsRequest) ([]bool, error) {
	b, err := h.pick(req.UnitId, "coil", req.Addr, req.Quantity)
	if err != nil {
		return nil, err
	}
	return b.HandleCoils(req)
}

func (h *tcpHandler) HandleDiscreteInputs(req *modbus.DiscreteInputsRequest) ([]bool, error) {
	b, err := h.pick(req.UnitId, "discrete", req.Addr, req.Quantity)
	if err != nil {
		return nil, err
	}
	return b.HandleDiscreteInputs(req)
}

func (h *tcpHandler) HandleHoldingRegisters(req *modbus.HoldingRegistersRequest) ([]uint16, error) {
	b, err := h.pick(req.UnitId, "holding", req.Addr, req.Quantity)
	if err != nil {
		return nil, err
	}
	return b.HandleHoldingRegisters(req)
}

func (h *tcpHandler) HandleInputRegisters(req *modbus.InputRegistersRequest) ([]uint16, error) {
	b, err := h.pick(req.UnitId, "input", req.Addr, req.Quantity)
	if err != nil {
		return nil, err
	}
	return b.HandleInputRegisters(req)
}

// serveRTU answers RTU frames on a pseudo-terminal: each device at its
// unit id, silence for any other id and for a device whose link is cut.
//
// A pseudo-terminal carries bytes at memory speed. With rtu.wire_time on,
// a reply leaves only when the request and the reply would have crossed a
// real line at the configured baud: counted from the request's first byte,
// its characters, the 3.5-character silence that ends it, and the reply's
// characters, at 11 bits a character (Modbus over Serial Line V1.02
// §2.5.1). The client's own t3.5 wait before its next request then makes up
// the rest of the wire time, so the pty carries what the line would.
func (r *Rig) serveRTU(ctx context.Context, port *ptyPort, line *rtuLine) error {
	gap := silence3_5(r.baud)
	char := 11 * time.Second / time.Duration(r.baud)
	for ctx.Err() == nil {
		frame, arrived, err := port.readFrame(gap, 200*time.Millisecond, wholeRequest)
		if errors.Is(err, errIdle) {
			continue
		}
		if err != nil {
			return fmt.Errorf("rtu %s: %w", port.Path, err)
		}
		if r.j.linkDown(r.clk.Now()) {
			continue
		}
		d, rtu := line.route(frame)
		if d == nil || r.cut(d) {
			continue
		}
		f := d.j.request(r.p.faults.BadCRC)
		reply := rtu.respond(frame)
		if reply == nil || f.drop {
			continue
		}
		if r.p.wireTime {
			chars := float64(len(frame)) + 3.5 + float64(len(reply))
			sleepCtx(ctx, time.Until(arrived.Add(time.Duration(chars*float64(char)))))
		}
		sleepCtx(ctx, f.delay)
		if f.corrupt {
			reply[len(reply)-1] ^= 0xA5
		}
		if err := port.write(reply); err != nil {
			return fmt.Errorf("rtu %s: %w", port.Path, err)
		}
	}
	return nil
}
