package line

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"time"

	"go.bug.st/serial"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/clock"
)

func init() {
	drivers.Register(config.LinkSerial, drivers.Opener{Gauge: OpenGauge})
}

const (
	readSlice = 50 * time.Millisecond // longest single Read, so deadlines are kept
	maxLine   = 4096                  // a longer "line" is noise, not a reply
)

// port is what the gauge needs from a serial port; go.bug.st/serial's Port
// has it.
type port interface {
	Read(p []byte) (int, error)
	Write(p []byte) (int, error)
	ResetInputBuffer() error
	SetReadTimeout(t time.Duration) error
	Close() error
}

// options configure one line instrument. Every field comes from the
// configuration; the driver supplies no values of its own.
type options struct {
	Device     string
	Mode       serial.Mode
	Query      string // sent before each read; empty for a streaming instrument
	Terminator string // end of a reply line
	Timeout    time.Duration
	Backoff    time.Duration // wait before reopening a vanished port; 0 = at the next read
	Parser     Parser
}

// Gauge is a line instrument on a serial port. The port belongs to this
// gauge alone; a drivers.Bus makes reads take turns, and a read whose
// context has ended never touches the port.
type Gauge struct {
	name string
	opts options
	conv drivers.Conversion
	clk  clock.Clock
	log  *slog.Logger
	bus  *drivers.Bus
	rate drivers.RateMeter

	releasePort func() // frees the process-wide claim on the device
	closeOnce   sync.Once
	closeErr    error

	// Below: touched only while holding bus.
	port    port
	nextTry time.Time
	buf     []byte
	chunk   []byte
	query   []byte
	term    []byte
}

var (
	_ drivers.Gauge        = (*Gauge)(nil)
	_ drivers.RateReporter = (*Gauge)(nil)
)

// OpenGauge opens a line instrument from its configuration. The port is
// opened on the first Read, and reopened after it vanished.
func OpenGauge(inst config.Instrument, env drivers.OpenEnv) (drivers.Gauge, error) {
	opts, err := lineOptions(inst)
	if err != nil {
		return nil, err
	}
	conv, err := drivers.NewConversion(inst)
	if err != nil {
		return nil, err
	}
	release, err := drivers.ClaimPort(opts.Device, "line instrument "+strconv.Quote(inst.Name))
	if err != nil {
		return nil, err
	}
	g := newGauge(inst.Name, opts, conv, env)
	g.releasePort = release
	return g, nil
}

func newGauge(name string, opts options, conv drivers.Conversion, env drivers.OpenEnv) *Gauge {
	return &Gauge{name: name, opts: opts, conv: conv, clk: env.Time(), bus: drivers.NewBus(0),
		chunk: make([]byte, 256), query: []byte(opts.Query), term: []byte(opts.Terminator),
		log: env.Logger("instrument", name, "link", config.LinkSerial, "device", opts.Device)}
}

var (
	parities = map[string]serial.Parity{"none": serial.NoParity, "even": serial.EvenParity, "odd": serial.OddParity}
	stops    = map[int]serial.StopBits{1: serial.OneStopBit, 2: serial.TwoStopBits}
)

// lineOptions checks the configuration and names every option that is
// missing or wrong.
func lineOptions(inst config.Instrument) (options, error) {
	l := inst.Link
	if strings.TrimSpace(l.Address) == "" {
		return options{}, errors.New("link.address is empty: give the serial device, e.g. /dev/serial/by-id/…")
	}
	var errs []error
	bad := func(format string, a ...any) { errs = append(errs, fmt.Errorf(format, a...)) }
	p, ok := parities[strings.ToLower(l.Parity)]
	if !ok {
		bad("link.parity %q: want none, even or odd", l.Parity)
	}
	sb, ok := stops[l.StopBits]
	if !ok {
		bad("link.stop_bits %d: want 1 or 2", l.StopBits)
	}
	if l.Baud <= 0 {
		bad("link.baud %d: want the instrument's baud rate", l.Baud)
	}
	if l.DataBits < 5 || l.DataBits > 8 {
		bad("link.data_bits %d: want 5 … 8", l.DataBits)
	}
	if l.Timeout <= 0 {
		bad("link.timeout %s: want a positive time-out per reading", l.Timeout)
	}
	if l.Backoff < 0 {
		bad("link.backoff %s: cannot be negative", l.Backoff)
	}
	term := inst.Line.Terminator
	if term != "\r\n" && term != "\n" && term != "\r" {
		bad("line.terminator %q: want \"\\r\\n\", \"\\n\" or \"\\r\"", term)
	}
	var re *regexp.Regexp
	if inst.Line.Reply != "" {
		var err error
		if re, err = regexp.Compile(inst.Line.Reply); err != nil {
			bad("line.reply: %w", err)
		}
	}
	if len(errs) > 0 {
		return options{}, errors.Join(errs...)
	}
	query := inst.Line.Query
	if query != "" && !strings.HasSuffix(query, "\r") && !strings.HasSuffix(query, "\n") {
		query += term // instruments expect the query ended like their replies
	}
	return options{
		Device: l.Address, Mode: serial.Mode{BaudRate: l.Baud, DataBits: l.DataBits, Parity: p, StopBits: sb},
		Query: query, Terminator: term, Timeout: l.Timeout, Backoff: l.Backoff,
		Parser: Parser{Reply: re, Overload: inst.Line.Overload, Unit: inst.Unit},
	}, nil
}

// Read returns one reading. A query instrument gets the query after the
// input is flushed and answers within the time-out. For a streaming
// instrument, stale input is flushed and the first complete line after that
// is used — the newest, never a half line. A failed read keeps the line it
// got, for the audit trail.
func (g *Gauge) Read(ctx context.Context) (drivers.Reading, error) {
	if err := g.bus.Acquire(ctx); err != nil {
		return drivers.Reading{}, drivers.Fail(g.name, readKind(err), err)
	}
	defer g.bus.Release()
	if err := g.ensureOpen(); err != nil {
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindLinkDown, err)
	}
	line, err := g.exchange(ctx)
	if err != nil {
		if k := readKind(err); k != drivers.KindTimeout && !errors.Is(err, context.Canceled) {
			// An unplugged adapter reports PortClosed and stays dead: close
			// it and reopen by name next time.
			g.drop(err)
		}
		return drivers.Reading{}, drivers.Fail(g.name, readKind(err), err)
	}
	r := drivers.Reading{Time: g.clk.Now(), Wire: line}
	if g.log.Enabled(ctx, slog.LevelDebug) {
		g.log.Debug("line reply", "line", strconv.Quote(line))
	}
	v, err := g.opts.Parser.Parse(line)
	switch {
	case errors.Is(err, ErrOverrange):
		return r, drivers.Fail(g.name, drivers.KindOverload, err)
	case err != nil:
		return r, drivers.Fail(g.name, drivers.KindBadReply, err)
	}
	r.Raw = v
	r, err = g.conv.Finish(g.name, r)
	if err == nil {
		g.rate.Mark(r.Time)
	}
	return r, err
}

// ReadRate is the rate of good reads this gauge achieves.
func (g *Gauge) ReadRate() drivers.Rate { return g.rate.Rate() }

// readKind classifies a failed exchange.
func readKind(err error) drivers.Kind {
	if errors.Is(err, errTimeout) || errors.Is(err, context.DeadlineExceeded) {
		return drivers.KindTimeout
	}
	return drivers.KindLinkDown
}

func (g *Gauge) ensureOpen() error {
	if g.port != nil {
		return nil
	}
	if now := time.Now(); now.Before(g.nextTry) {
		return fmt.Errorf("port %s closed; next open attempt in %s", g.opts.Device, g.nextTry.Sub(now).Round(time.Millisecond))
	}
	p, err := serial.Open(g.opts.Device, &g.opts.Mode)
	if err != nil {
		g.nextTry = time.Now().Add(g.opts.Backoff)
		return fmt.Errorf("open %s: %w", g.opts.Device, err)
	}
	g.port = p
	g.buf = g.buf[:0]
	g.log.Info("serial port open")
	return nil
}

func (g *Gauge) drop(cause error) {
	if g.port == nil {
		return
	}
	g.log.Warn("serial port lost", "err", cause)
	_ = g.port.Close()
	g.port = nil
	g.nextTry = time.Now().Add(g.opts.Backoff)
}

func (g *Gauge) exchange(ctx context.Context) (string, error) {
	deadline := time.Now().Add(g.opts.Timeout)
	if d, ok := ctx.Deadline(); ok && d.Before(deadline) {
		deadline = d
	}
	if err := g.port.ResetInputBuffer(); err != nil {
		return "", fmt.Errorf("flush input: %w", err)
	}
	g.buf = g.buf[:0]
	if g.opts.Query == "" {
		// Whatever follows the flush may start mid-line: skip up to the
		// first terminator, then take the next complete line.
		if _, err := g.readLine(ctx, deadline, true); err != nil {
			return "", err
		}
		return g.readLine(ctx, deadline, false)
	}
	if g.log.Enabled(ctx, slog.LevelDebug) {
		g.log.Debug("line query", "query", strconv.Quote(g.opts.Query))
	}
	if _, err := g.port.Write(g.query); err != nil {
		return "", fmt.Errorf("write query: %w", err)
	}
	return g.readLine(ctx, deadline, false)
}

var errTimeout = errors.New("no complete reply line before the time-out")

// readLine returns the newest complete line that arrived (empty lines
// skipped unless partial is set, where any terminator ends the wait). It is
// the deadline-aware reader go.bug.st/serial lacks: its Read returns (0, nil)
// on a time-out, which this turns into errTimeout.
func (g *Gauge) readLine(ctx context.Context, deadline time.Time, partial bool) (string, error) {
	chunk := g.chunk
	for {
		if line, ok := g.takeLine(partial); ok {
			return line, nil
		}
		if err := ctx.Err(); err != nil {
			return "", err
		}
		left := time.Until(deadline)
		if left <= 0 {
			return "", fmt.Errorf("%w (%s, got %q)", errTimeout, g.opts.Timeout, g.buf)
		}
		if err := g.port.SetReadTimeout(min(left, readSlice)); err != nil {
			return "", err
		}
		n, err := g.port.Read(chunk)
		if err != nil {
			return "", err
		}
		g.buf = append(g.buf, chunk[:n]...)
		if len(g.buf) > maxLine {
			g.buf = g.buf[len(g.buf)-maxLine:] // keep the tail; a terminator may still come
		}
	}
}

// takeLine removes every complete line from the buffer and returns the last
// non-empty one; a trailing partial line stays for the next read. It scans
// back from the end so that only the line it returns is copied.
func (g *Gauge) takeLine(partial bool) (string, bool) {
	t := g.term
	i := bytes.LastIndex(g.buf, t)
	if i < 0 {
		return "", false
	}
	var line string
	found := false
	for rest := g.buf[:i]; !partial; {
		start := 0
		j := bytes.LastIndex(rest, t)
		if j >= 0 {
			start = j + len(t)
		}
		if s := bytes.TrimSpace(rest[start:]); len(s) > 0 {
			line, found = string(s), true
			break
		}
		if j < 0 {
			break
		}
		rest = rest[:j]
	}
	g.buf = append(g.buf[:0], g.buf[i+len(t):]...)
	if partial {
		return "", true
	}
	return line, found
}

// Close waits for a running read, refuses later ones, closes the port and
// lets go of the device. Calling it again returns the first result.
func (g *Gauge) Close() error {
	g.closeOnce.Do(func() {
		g.bus.Close() // from here on this goroutine is the port's only user
		if g.releasePort != nil {
			defer g.releasePort()
		}
		if g.port != nil {
			g.closeErr = g.port.Close()
			g.port = nil
		}
	})
	return g.closeErr
}
