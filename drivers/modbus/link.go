// Package modbus reads gauges and drives pressure controllers over Modbus TCP,
// Modbus RTU on a serial port and RTU frames through a TCP serial gateway,
// using github.com/simonvetter/modbus. Register words are read raw and decoded
// with regcodec, and the raw words travel with each reading.
//
// Every connection (one TCP peer, one serial port) has one owner, a
// drivers.Bus: instruments that share a port share one client and must give
// the same link settings; their requests take turns in the order they ask
// (a vent first), with the configured pause between them, and a unit that
// stops answering on a shared line is benched for its back-off. An RTU line
// that a late reply may have put out of step is brought back in step before
// its next request (resync.go).
package modbus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"time"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
)

// maxBackoff caps the doubling wait between connect attempts (a fixed rule,
// not an option: the configured backoff is where the doubling starts).
const maxBackoff = 30 * time.Second

// Parity of a serial line.
type Parity uint

func (p Parity) String() string {
	for name, q := range parities {
		if q == p {
			return name
		}
	}
	return fmt.Sprintf("parity(%d)", uint(p))
}

// The parities a UART offers, as the Modbus library numbers them.
const (
	ParityNone Parity = Parity(mb.PARITY_NONE)
	ParityEven Parity = Parity(mb.PARITY_EVEN)
	ParityOdd  Parity = Parity(mb.PARITY_ODD)
)

var parities = map[string]Parity{"none": ParityNone, "even": ParityEven, "odd": ParityOdd}

// LinkOptions are the settings of one connection. The driver supplies no
// values of its own: every option comes from the configuration, and one the
// link cannot work without is an error at open that names it.
type LinkOptions struct {
	URL      string // tcp://host:port, rtu:///dev/ttyUSB0, rtuovertcp://host:port
	Address  string // host:port or the serial device
	Serial   bool   // the serial settings below apply (RTU on a local port)
	Baud     int
	DataBits int
	Parity   Parity
	StopBits int
	Timeout  time.Duration // per request; required
	Retries  int           // extra attempts after a failed request
	Backoff  time.Duration // first wait before another connect attempt; doubles up to 30 s; 0 = try at every request
	Pause    time.Duration // quiet time after each request, and the step of the wait before a retry
}

// linkOptions maps a config link to LinkOptions and says which option is
// missing or wrong.
func linkOptions(l config.Link) (LinkOptions, error) {
	scheme := map[string]string{
		config.LinkModbusTCP:    "tcp",
		config.LinkModbusRTU:    "rtu",
		config.LinkModbusRTUTCP: "rtuovertcp",
	}[l.Kind]
	if scheme == "" {
		return LinkOptions{}, fmt.Errorf("link.kind %q is not a Modbus link", l.Kind)
	}
	if strings.TrimSpace(l.Address) == "" {
		return LinkOptions{}, fmt.Errorf("link.address is empty: give host:port or a serial device path")
	}
	o := LinkOptions{URL: scheme + "://" + l.Address, Address: l.Address, Serial: l.Kind == config.LinkModbusRTU,
		Timeout: l.Timeout, Retries: l.Retries, Backoff: l.Backoff, Pause: l.Pause}
	var errs []error
	if l.Timeout <= 0 {
		errs = append(errs, fmt.Errorf("link.timeout %s: want a positive time-out per request", l.Timeout))
	}
	if l.Retries < 0 {
		errs = append(errs, fmt.Errorf("link.retries %d is negative", l.Retries))
	}
	if l.Backoff < 0 || l.Pause < 0 {
		errs = append(errs, fmt.Errorf("link.backoff %s, link.pause %s: cannot be negative", l.Backoff, l.Pause))
	}
	if o.Serial {
		p, ok := parities[strings.ToLower(l.Parity)]
		if !ok {
			errs = append(errs, fmt.Errorf("link.parity %q: want none, even or odd", l.Parity))
		}
		if l.Baud <= 0 {
			errs = append(errs, fmt.Errorf("link.baud %d: want the line's baud rate", l.Baud))
		}
		if l.DataBits < 5 || l.DataBits > 8 {
			errs = append(errs, fmt.Errorf("link.data_bits %d: want 5 … 8", l.DataBits))
		}
		if l.StopBits != 1 && l.StopBits != 2 {
			errs = append(errs, fmt.Errorf("link.stop_bits %d: want 1 or 2", l.StopBits))
		}
		o.Baud, o.DataBits, o.Parity, o.StopBits = l.Baud, l.DataBits, p, l.StopBits
	}
	return o, errors.Join(errs...)
}

// link is one Modbus client plus the bus that gives it one owner. Fields
// below bus are touched only while holding it.
type link struct {
	opts LinkOptions
	bus  *drivers.Bus
	log  *slog.Logger

	client      *mb.ModbusClient
	releasePort func() // frees the process-wide claim on a serial device
	up          bool
	unit        uint8 // the client's unit id, to skip setting it again
	units       map[uint8]*unitState
	backoff     time.Duration
	nextTry     time.Time

	step resync // RTU framing only: whether a late reply may be waiting
}

// links shares one link per URL across every instrument of the process.
var links drivers.Shared[*link]

// acquireLink returns the link for opts.URL, made on first use. The link's
// settings are the line's, so every instrument on it must give the same
// ones; a difference is an error rather than a silent choice of one of them.
func acquireLink(opts LinkOptions, log *slog.Logger) (*link, func() error, error) {
	l, release, err := links.Acquire(opts.URL, func() (*link, error) {
		return newLink(opts, log)
	})
	if err != nil {
		return nil, nil, err
	}
	if l.opts != opts {
		release()
		return nil, nil, fmt.Errorf("link %s is already open with other settings (%s): instruments on one connection or port must agree",
			opts.URL, l.opts.differences(opts))
	}
	return l, release, nil
}

// differences names the settings in which o and p differ.
func (o LinkOptions) differences(p LinkOptions) string {
	var d []string
	add := func(key string, a, b any) {
		if a != b {
			d = append(d, fmt.Sprintf("link.%s %v, not %v", key, a, b))
		}
	}
	add("baud", o.Baud, p.Baud)
	add("data_bits", o.DataBits, p.DataBits)
	add("parity", o.Parity, p.Parity)
	add("stop_bits", o.StopBits, p.StopBits)
	add("timeout", o.Timeout, p.Timeout)
	add("retries", o.Retries, p.Retries)
	add("backoff", o.Backoff, p.Backoff)
	add("pause", o.Pause, p.Pause)
	return strings.Join(d, "; ")
}

func newLink(opts LinkOptions, log *slog.Logger) (*link, error) {
	log = log.With("url", opts.URL)
	cc := &mb.ClientConfiguration{URL: opts.URL, Timeout: opts.Timeout,
		// The library writes to stdout without a logger; send it to slog at debug.
		Logger: slog.NewLogLogger(log.Handler(), slog.LevelDebug),
	}
	if opts.Serial {
		cc.Speed, cc.DataBits, cc.Parity, cc.StopBits = uint(opts.Baud), uint(opts.DataBits), uint(opts.Parity), uint(opts.StopBits)
	}
	c, err := mb.NewClient(cc)
	if err != nil {
		return nil, fmt.Errorf("modbus client %s: %w", opts.URL, err)
	}
	l := &link{opts: opts, bus: drivers.NewBus(opts.Pause), log: log, client: c, backoff: opts.Backoff, units: map[uint8]*unitState{}}
	l.step.init(opts)
	if opts.Serial {
		if l.releasePort, err = drivers.ClaimPort(opts.Address, "Modbus RTU link "+opts.URL); err != nil {
			return nil, err
		}
	}
	return l, nil
}

func (l *link) Close() error {
	err := l.bus.Close()
	if l.up {
		l.up = false
		err = errors.Join(err, l.client.Close())
	}
	if l.releasePort != nil {
		l.releasePort()
	}
	return err
}

// opCode names the exchanges plateau makes.
type opCode uint8

const (
	opReadRegisters opCode = iota + 1
	opWriteRegisters
	opWriteRegister
	opWriteCoil
	opReadDiscrete
)

// op is one exchange with one unit, described by value rather than by a
// closure so that a read allocates nothing of plateau's own.
type op struct {
	code   opCode
	urgent bool // served before every ordinary request waiting for the line
	unit   uint8
	table  mb.RegType
	addr   uint16
	n      uint16   // registers to read
	words  []uint16 // registers to write
	value  uint16   // the one register to write
}

// result is what an exchange returns.
type result struct {
	words []uint16
	on    bool
}

func (o *op) String() string {
	switch o.code {
	case opReadRegisters:
		return fmt.Sprintf("read %s %d×%d", tableName(o.table), o.addr, o.n)
	case opWriteRegisters:
		return fmt.Sprintf("write holding %d×%d", o.addr, len(o.words))
	case opWriteRegister:
		return fmt.Sprintf("write holding %d", o.addr)
	case opWriteCoil:
		return fmt.Sprintf("write coil %d", o.addr)
	default:
		return fmt.Sprintf("read discrete input %d", o.addr)
	}
}

func tableName(t mb.RegType) string {
	if t == mb.INPUT_REGISTER {
		return "input"
	}
	return "holding"
}

func (o *op) send(c *mb.ModbusClient) (r result, err error) {
	switch o.code {
	case opReadRegisters:
		r.words, err = c.ReadRegisters(o.addr, o.n, o.table)
	case opWriteRegisters:
		err = c.WriteRegisters(o.addr, o.words)
	case opWriteRegister:
		err = c.WriteRegister(o.addr, o.value)
	case opWriteCoil:
		err = c.WriteCoil(o.addr, true)
	case opReadDiscrete:
		r.on, err = c.ReadDiscreteInput(o.addr)
	default:
		err = fmt.Errorf("modbus: unknown exchange %d", o.code)
	}
	return r, err
}

// run holds the line (never starting when ctx has ended) and executes o
// with connect, retries and reconnect.
func (l *link) run(ctx context.Context, o *op) (result, error) {
	if err := l.take(ctx, o); err != nil {
		return result{}, err
	}
	u := l.unitState(o.unit)
	if err := u.benched(o, len(l.units)); err != nil {
		l.bus.Release()
		return result{}, err
	}
	r, held, err := l.exchange(ctx, o, u)
	if held {
		u.after(err, l.opts.Backoff)
		l.bus.Release()
	}
	return r, err
}

// take holds the line for o. An ordinary request first waits out the grace
// of an RTU line that fell out of step, without holding the line, so that a
// vent asked meanwhile does not wait behind it; holding the line, it checks
// that no new grace began while it queued (the request ahead of it failed).
// A vent takes the line at once.
func (l *link) take(ctx context.Context, o *op) error {
	if o.urgent {
		return l.bus.AcquireUrgent(ctx)
	}
	wait := l.step.left()
	for {
		if err := sleep(ctx, wait); err != nil {
			return err
		}
		if err := l.bus.Acquire(ctx); err != nil {
			return err
		}
		if wait = l.waitFor(o.unit); wait <= 0 {
			return nil
		}
		l.bus.Release()
	}
}

// silentAfter is how many requests in a row a unit may leave unanswered
// before it is benched on a line it shares with others: one lost frame is
// noise, two are a unit that is off or unplugged.
const silentAfter = 2

// unitState is what a link knows of one unit; touched only while holding
// the bus.
type unitState struct {
	unit    uint8
	silent  int           // requests in a row without an answer
	backoff time.Duration // the next benching, doubling up to maxBackoff
	until   time.Time     // benched until then
	late    time.Time     // a late reply of this unit may come until then (see resync.go)
}

var errSilent = errors.New("unit not answering")

func (l *link) unitState(unit uint8) *unitState {
	u, ok := l.units[unit]
	if !ok {
		u = &unitState{unit: unit}
		l.units[unit] = u
	}
	return u
}

// benched refuses an ordinary request to a unit that has stopped answering,
// so that a device that stays down does not hold the line for its
// time-out on every turn while the others wait. It is asked again when its
// back-off ends. A vent is never refused.
func (u *unitState) benched(o *op, units int) error {
	if o.urgent || units < 2 || u.until.IsZero() {
		return nil
	}
	if left := time.Until(u.until); left > 0 {
		return fmt.Errorf("%w: unit %d left its last %d requests unanswered; asked again in %s",
			errSilent, u.unit, u.silent, left.Round(time.Millisecond))
	}
	return nil
}

// after updates the unit's state with the outcome of an exchange.
func (u *unitState) after(err error, backoff time.Duration) {
	switch {
	case err == nil, isModbusError(err) && !errors.Is(err, mb.ErrRequestTimedOut):
		*u = unitState{unit: u.unit} // it answered, even if with an exception or a damaged frame
	case errors.Is(err, mb.ErrRequestTimedOut):
		u.silent++
		if u.silent >= silentAfter && backoff > 0 {
			if u.backoff == 0 {
				u.backoff = backoff
			}
			u.until = time.Now().Add(u.backoff)
			u.backoff = min(2*u.backoff, maxBackoff)
		}
	}
}

// exchange makes the attempts of o, holding the line; it reports whether it
// still holds it (a retry that waited out a resync may find ctx ended
// before it had the line again).
func (l *link) exchange(ctx context.Context, o *op, u *unitState) (result, bool, error) {
	debug := l.log.Enabled(ctx, slog.LevelDebug)
	var err error
	for attempt := 0; attempt <= l.opts.Retries; attempt++ {
		if attempt > 0 {
			if !o.urgent && (l.step.left() > 0 || time.Now().Before(u.late)) {
				// The failed attempt left the line out of step: give it up for
				// the grace, as any ordinary request would.
				l.bus.Release()
				if e := l.take(ctx, o); e != nil {
					return result{}, false, errors.Join(err, e)
				}
			}
			// Back off a little more on each retry; a busy device needs time.
			if err := sleep(ctx, time.Duration(attempt)*l.opts.Pause); err != nil {
				return result{}, true, errors.Join(err, ctx.Err())
			}
		}
		if ctx.Err() != nil { // a retry is a new request: not after a cancel
			return result{}, true, errors.Join(err, ctx.Err())
		}
		if err = l.connect(); err != nil {
			return result{}, true, err // the back-off decides when to try again, not the retry count
		}
		if err = l.resync(o.urgent); err != nil {
			return result{}, true, err
		}
		if o.unit != l.unit {
			if err = l.client.SetUnitId(o.unit); err != nil {
				return result{}, true, err
			}
			l.unit = o.unit
		}
		if debug {
			l.log.Debug("modbus request", "unit", o.unit, "request", o.String(), "attempt", attempt+1)
		}
		var r result
		r, err = o.send(l.client)
		if err == nil {
			return r, true, nil
		}
		if debug {
			l.log.Debug("modbus request failed", "unit", o.unit, "request", o.String(), "attempt", attempt+1, "err", err)
		}
		if !isModbusError(err) {
			// A transport error (io.EOF after the peer went away, reset, broken
			// pipe): the library does not reconnect by itself.
			l.disconnect(err)
			l.nextTry = time.Time{} // one immediate reconnect; back-off after that
			continue
		}
		l.failed(err, u)
		if !retryable(err) {
			return result{}, true, err
		}
	}
	return result{}, true, err
}

// sleep waits d or until ctx ends.
func sleep(ctx context.Context, d time.Duration) error {
	if d <= 0 {
		return nil
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// connect opens the client when it is down, respecting the back-off.
func (l *link) connect() error {
	if l.up {
		return nil
	}
	if now := time.Now(); now.Before(l.nextTry) {
		return fmt.Errorf("%w: next connect attempt in %s", errDown, l.nextTry.Sub(now).Round(time.Millisecond))
	}
	if err := l.open(); err != nil {
		return err
	}
	l.log.Info("modbus connected")
	return nil
}

// open opens the client; a failure starts the back-off.
func (l *link) open() error {
	if err := l.client.Open(); err != nil {
		l.up = false
		l.nextTry = time.Now().Add(l.backoff)
		l.log.Warn("modbus connect failed", "err", err, "retry_in_seconds", l.backoff.Seconds())
		l.backoff = min(2*l.backoff, maxBackoff)
		return fmt.Errorf("%w: %w", errDown, err)
	}
	l.up = true
	l.backoff = l.opts.Backoff
	return nil
}

func (l *link) disconnect(cause error) {
	if !l.up {
		return
	}
	l.up = false
	if err := l.client.Close(); err != nil {
		l.log.Debug("modbus close", "err", err)
	}
	l.log.Warn("modbus connection lost", "err", cause)
}

var errDown = errors.New("link down")

// isModbusError tells library errors (protocol and exceptions) from
// transport errors. Time-outs count as Modbus errors: the connection may
// still be fine and TCP matches replies by transaction id.
func isModbusError(err error) bool {
	var e mb.Error
	return errors.As(err, &e)
}

// retryable lists the Modbus errors worth another attempt: no answer,
// damaged frames and a device that asks to be asked again.
func retryable(err error) bool {
	for _, e := range []error{mb.ErrRequestTimedOut, mb.ErrBadCRC, mb.ErrShortFrame, mb.ErrProtocolError,
		mb.ErrBadTransactionId, mb.ErrBadUnitId, mb.ErrServerDeviceBusy, mb.ErrAcknowledge, mb.ErrGWTargetFailedToRespond} {
		if errors.Is(err, e) {
			return true
		}
	}
	return false
}

// kindOf maps a failed exchange to a read failure kind.
func kindOf(err error) drivers.Kind {
	switch {
	case errors.Is(err, mb.ErrRequestTimedOut), errors.Is(err, mb.ErrGWTargetFailedToRespond),
		errors.Is(err, context.DeadlineExceeded), errors.Is(err, errSilent):
		return drivers.KindTimeout
	case errors.Is(err, errDown), errors.Is(err, mb.ErrGWPathUnavailable), errors.Is(err, drivers.ErrBusClosed),
		errors.Is(err, context.Canceled), !isModbusError(err):
		return drivers.KindLinkDown
	default: // bad CRC, short frame, exceptions, wrong unit or transaction id
		return drivers.KindBadReply
	}
}
