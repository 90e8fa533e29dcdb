package line

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"regexp"
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
	defaultTimeout = time.Second
	readSlice      = 50 * time.Millisecond // longest single Read, so deadlines are kept
	maxLine        = 4096                  // a longer "line" is noise, not a reply
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

// options configure one line instrument.
type options struct {
	Device     string
	Mode       serial.Mode
	Query      string // sent before each read; empty for a streaming instrument
	Terminator string // end of a reply line
	Timeout    time.Duration
	Backoff    time.Duration // wait before reopening a vanished port
	Parser     Parser
}

// Gauge is a line instrument on a serial port. Reads are serialised: the
// port belongs to this gauge alone.
type Gauge struct {
	name string
	opts options
	conv drivers.Conversion
	clk  clock.Clock
	log  *slog.Logger

	mu      sync.Mutex
	port    port
	nextTry time.Time
	buf     []byte
}

var _ drivers.Gauge = (*Gauge)(nil)

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
	return newGauge(inst.Name, opts, conv, env), nil
}

func newGauge(name string, opts options, conv drivers.Conversion, env drivers.OpenEnv) *Gauge {
	if opts.Timeout <= 0 {
		opts.Timeout = defaultTimeout
	}
	if opts.Backoff <= 0 {
		opts.Backoff = time.Second
	}
	return &Gauge{name: name, opts: opts, conv: conv, clk: env.Time(),
		log: env.Logger("instrument", name, "link", config.LinkSerial, "device", opts.Device)}
}

func lineOptions(inst config.Instrument) (options, error) {
	l := inst.Link
	if strings.TrimSpace(l.Address) == "" {
		return options{}, errors.New("link.address is empty: give the serial device, e.g. /dev/serial/by-id/…")
	}
	parity := map[string]serial.Parity{"": serial.NoParity, "none": serial.NoParity, "even": serial.EvenParity, "odd": serial.OddParity}
	p, ok := parity[strings.ToLower(l.Parity)]
	if !ok {
		return options{}, fmt.Errorf("link.parity %q: want none, even or odd", l.Parity)
	}
	stop := map[int]serial.StopBits{0: serial.OneStopBit, 1: serial.OneStopBit, 2: serial.TwoStopBits}
	sb, ok := stop[l.StopBits]
	if !ok {
		return options{}, fmt.Errorf("link.stop_bits %d: want 1 or 2", l.StopBits)
	}
	baud, bits := l.Baud, l.DataBits
	if baud == 0 {
		baud = 9600
	}
	if bits == 0 {
		bits = 8
	}
	if bits < 5 || bits > 8 {
		return options{}, fmt.Errorf("link.data_bits %d: want 5 … 8", bits)
	}
	term := inst.Line.Terminator
	if term == "" {
		term = "\r\n"
	}
	if term != "\r\n" && term != "\n" && term != "\r" {
		return options{}, fmt.Errorf("line.terminator %q: want \"\\r\\n\", \"\\n\" or \"\\r\"", term)
	}
	var re *regexp.Regexp
	if inst.Line.Reply != "" {
		var err error
		if re, err = regexp.Compile(inst.Line.Reply); err != nil {
			return options{}, fmt.Errorf("line.reply: %w", err)
		}
	}
	query := inst.Line.Query
	if query != "" && !strings.HasSuffix(query, "\r") && !strings.HasSuffix(query, "\n") {
		query += term // instruments expect the query ended like their replies
	}
	return options{
		Device: l.Address, Mode: serial.Mode{BaudRate: baud, DataBits: bits, Parity: p, StopBits: sb},
		Query: query, Terminator: term, Timeout: l.Timeout, Backoff: l.Backoff,
		Parser: Parser{Reply: re, Overload: inst.Line.Overload, Unit: inst.Unit},
	}, nil
}

// Read returns one reading. A query instrument gets the query after the
// input is flushed and answers within the time-out. For a streaming
// instrument, stale input is flushed and the first complete line after that
// is used — the newest, never a half line.
func (g *Gauge) Read(ctx context.Context) (drivers.Reading, error) {
	g.mu.Lock()
	defer g.mu.Unlock()
	if err := g.ensureOpen(); err != nil {
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindLinkDown, err)
	}
	line, err := g.exchange(ctx)
	if err != nil {
		if errors.Is(err, errTimeout) || errors.Is(err, context.DeadlineExceeded) {
			return drivers.Reading{}, drivers.Fail(g.name, drivers.KindTimeout, err)
		}
		if !errors.Is(err, context.Canceled) {
			// An unplugged adapter reports PortClosed and stays dead: close
			// it and reopen by name next time.
			g.drop(err)
		}
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindLinkDown, err)
	}
	at := g.clk.Now()
	g.log.Debug("line reply", "line", fmt.Sprintf("%q", line))
	v, err := g.opts.Parser.Parse(line)
	switch {
	case errors.Is(err, ErrOverrange):
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindOverload, err)
	case err != nil:
		return drivers.Reading{}, drivers.Fail(g.name, drivers.KindBadReply, err)
	}
	return g.conv.Finish(g.name, drivers.Reading{Time: at, Raw: v, Wire: line})
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
	g.log.Debug("line query", "query", fmt.Sprintf("%q", g.opts.Query))
	if _, err := g.port.Write([]byte(g.opts.Query)); err != nil {
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
	term := []byte(g.opts.Terminator)
	chunk := make([]byte, 256)
	for {
		if line, ok := g.takeLine(term, partial); ok {
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
// non-empty one; a trailing partial line stays for the next read.
func (g *Gauge) takeLine(term []byte, partial bool) (string, bool) {
	i := bytes.LastIndex(g.buf, term)
	if i < 0 {
		return "", false
	}
	complete := string(g.buf[:i])
	g.buf = append(g.buf[:0], g.buf[i+len(term):]...)
	if partial {
		return "", true
	}
	lines := strings.Split(complete, string(term))
	for j := len(lines) - 1; j >= 0; j-- {
		if s := strings.TrimSpace(lines[j]); s != "" {
			return s, true
		}
	}
	return "", false
}

// Close closes the port.
func (g *Gauge) Close() error {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.port == nil {
		return nil
	}
	err := g.port.Close()
	g.port = nil
	return err
}
