// Package modbus reads gauges and drives pressure controllers over Modbus TCP,
// Modbus RTU on a serial port and RTU frames through a TCP serial gateway,
// using github.com/simonvetter/modbus. Register words are read raw and decoded
// with regcodec, and the raw words travel with each reading.
//
// Every connection (one TCP peer, one serial port) is owned by one goroutine
// (a drivers.Bus): instruments that share a port share one client, and their
// requests are serialised with the configured pause between them.
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

// Backoff limits for reconnecting.
const (
	defaultBackoff = 500 * time.Millisecond
	maxBackoff     = 30 * time.Second
)

// LinkOptions are the settings of one connection, taken from config.Link.
type LinkOptions struct {
	URL      string // tcp://host:port, rtu:///dev/ttyUSB0, rtuovertcp://host:port
	Baud     int
	DataBits int
	Parity   string // none | even | odd
	StopBits int
	Timeout  time.Duration // per request; 0 = library default (300 ms RTU, 1 s TCP)
	Retries  int           // extra attempts after a failed request
	Backoff  time.Duration // first wait before another connect attempt; doubles up to 30 s
	Pause    time.Duration // quiet time after each request
}

// linkOptions maps a config link to LinkOptions.
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
	if l.Retries < 0 {
		return LinkOptions{}, fmt.Errorf("link.retries %d is negative", l.Retries)
	}
	return LinkOptions{
		URL: scheme + "://" + l.Address, Baud: l.Baud, DataBits: l.DataBits, Parity: l.Parity,
		StopBits: l.StopBits, Timeout: l.Timeout, Retries: l.Retries, Backoff: l.Backoff, Pause: l.Pause,
	}, nil
}

// link is one Modbus client plus the goroutine that owns it. Fields below
// bus are touched only from inside bus.Do.
type link struct {
	opts LinkOptions
	bus  *drivers.Bus
	log  *slog.Logger

	client  *mb.ModbusClient
	up      bool
	backoff time.Duration
	nextTry time.Time
}

// links shares one link per URL across every instrument of the process.
var links drivers.Shared[*link]

func acquireLink(opts LinkOptions, log *slog.Logger) (*link, func() error, error) {
	return links.Acquire(opts.URL, func() (*link, error) {
		return newLink(opts, log)
	})
}

func newLink(opts LinkOptions, log *slog.Logger) (*link, error) {
	parity := map[string]uint{"": mb.PARITY_NONE, "none": mb.PARITY_NONE, "even": mb.PARITY_EVEN, "odd": mb.PARITY_ODD}
	p, ok := parity[strings.ToLower(opts.Parity)]
	if !ok {
		return nil, fmt.Errorf("link.parity %q: want none, even or odd", opts.Parity)
	}
	log = log.With("url", opts.URL)
	c, err := mb.NewClient(&mb.ClientConfiguration{
		URL: opts.URL, Speed: uint(opts.Baud), DataBits: uint(opts.DataBits), Parity: p,
		StopBits: uint(opts.StopBits), Timeout: opts.Timeout,
		// The library writes to stdout without a logger; send it to slog at debug.
		Logger: slog.NewLogLogger(log.Handler(), slog.LevelDebug),
	})
	if err != nil {
		return nil, fmt.Errorf("modbus client %s: %w", opts.URL, err)
	}
	if opts.Backoff <= 0 {
		opts.Backoff = defaultBackoff
	}
	return &link{opts: opts, bus: drivers.NewBus(opts.Pause), log: log, client: c, backoff: opts.Backoff}, nil
}

func (l *link) Close() error {
	err := l.bus.Close()
	if l.up {
		l.up = false
		err = errors.Join(err, l.client.Close())
	}
	return err
}

// request is one exchange with one unit.
type request struct {
	unit uint8
	what string // for logs: "read holding 10×2"
	do   func(c *mb.ModbusClient) error
}

// run executes r on the bus goroutine with connect, retries and reconnect.
func (l *link) run(ctx context.Context, r request) error {
	return l.bus.Do(ctx, func() error { return l.exchange(ctx, r) })
}

func (l *link) exchange(ctx context.Context, r request) error {
	var err error
	for attempt := 0; attempt <= l.opts.Retries; attempt++ {
		if attempt > 0 {
			// Back off a little more on each retry; a busy device needs time.
			wait := time.Duration(attempt) * max(l.opts.Pause, 20*time.Millisecond)
			select {
			case <-time.After(wait):
			case <-ctx.Done():
				return errors.Join(err, ctx.Err())
			}
		}
		if err = l.connect(); err != nil {
			return err // the back-off decides when to try again, not the retry count
		}
		if err = l.client.SetUnitId(r.unit); err != nil {
			return err
		}
		l.log.Debug("modbus request", "unit", r.unit, "request", r.what, "attempt", attempt+1)
		err = r.do(l.client)
		if err == nil {
			return nil
		}
		l.log.Debug("modbus request failed", "unit", r.unit, "request", r.what, "attempt", attempt+1, "err", err)
		if !isModbusError(err) {
			// A transport error (io.EOF after the peer went away, reset, broken
			// pipe): the library does not reconnect by itself.
			l.disconnect(err)
			l.nextTry = time.Time{} // one immediate reconnect; back-off after that
			continue
		}
		if !retryable(err) {
			return err
		}
	}
	return err
}

// connect opens the client when it is down, respecting the back-off.
func (l *link) connect() error {
	if l.up {
		return nil
	}
	if now := time.Now(); now.Before(l.nextTry) {
		return fmt.Errorf("%w: next connect attempt in %s", errDown, l.nextTry.Sub(now).Round(time.Millisecond))
	}
	if err := l.client.Open(); err != nil {
		l.nextTry = time.Now().Add(l.backoff)
		l.log.Warn("modbus connect failed", "err", err, "retry_in_seconds", l.backoff.Seconds())
		l.backoff = min(2*l.backoff, maxBackoff)
		return fmt.Errorf("%w: %w", errDown, err)
	}
	l.up = true
	l.backoff = l.opts.Backoff
	l.log.Info("modbus connected")
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
		errors.Is(err, context.DeadlineExceeded):
		return drivers.KindTimeout
	case errors.Is(err, errDown), errors.Is(err, mb.ErrGWPathUnavailable), errors.Is(err, drivers.ErrBusClosed),
		errors.Is(err, context.Canceled), !isModbusError(err):
		return drivers.KindLinkDown
	default: // bad CRC, short frame, exceptions, wrong unit or transaction id
		return drivers.KindBadReply
	}
}
