package api

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"time"

	"plateau/acquire/store"
)

// FollowOptions say where a followed stream starts and how it reconnects.
type FollowOptions struct {
	// Resume starts after event After (events with larger ids follow).
	Resume bool
	After  uint64
	// Tail, when Resume is false and Tail > 0, starts with the last Tail
	// events; otherwise the stream starts with the next new event.
	Tail int
	// Retry keeps trying when the very first connection fails; without it
	// Follow returns that error (the daemon is not there). Once connected,
	// Follow always reconnects.
	Retry bool
	// MinBackoff and MaxBackoff bound the wait between reconnects
	// (default 250 ms and 10 s; doubling).
	MinBackoff, MaxBackoff time.Duration
	// Idle is how long a stream may stay silent before it is taken for
	// dead and reopened (default 45 s: three server keepalives).
	Idle time.Duration
	// OnGap is told when ids jump: events first…last never arrived.
	OnGap func(first, last uint64)
	// OnDisconnect is told when the stream breaks, before the wait.
	OnDisconnect func(err error, retryIn time.Duration)
	// OnRestart is told when the daemon's event ids start below the last
	// one seen: its store was replaced, and ids count from `now` again.
	OnRestart func(lastSeen, now uint64)
}

// Follow streams events to fn until ctx ends or fn fails, reconnecting
// from the last id it saw, so fn gets every event once and in order. It
// returns ctx's error when ctx ends, fn's error, or a refusal (4xx) from
// the daemon.
func (c *Client) Follow(ctx context.Context, o FollowOptions, fn func(store.Event) error) error {
	if o.MinBackoff <= 0 {
		o.MinBackoff = 250 * time.Millisecond
	}
	if o.MaxBackoff < o.MinBackoff {
		o.MaxBackoff = max(10*time.Second, o.MinBackoff)
	}
	if o.Idle <= 0 {
		o.Idle = 3 * DefaultKeepalive
	}
	f := &follower{c: c, o: o, fn: fn, last: o.After, known: o.Resume}
	wait := o.MinBackoff
	connected := false
	for {
		got, err := f.once(ctx)
		if ctx.Err() != nil {
			return ctx.Err()
		}
		var fnErr fnError
		if errors.As(err, &fnErr) {
			return fnErr.err
		}
		var refusal *Error
		if errors.As(err, &refusal) && refusal.Status/100 == 4 {
			return err
		}
		connected = connected || got
		if !connected && !o.Retry {
			return err
		}
		if got {
			wait = o.MinBackoff
		}
		if o.OnDisconnect != nil {
			o.OnDisconnect(err, wait)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(wait):
		}
		wait = min(wait*2, o.MaxBackoff)
	}
}

type follower struct {
	c     *Client
	o     FollowOptions
	fn    func(store.Event) error
	last  uint64
	known bool // last is a real position in the stream
}

type fnError struct{ err error }

func (e fnError) Error() string { return e.err.Error() }

// once runs one connection to its end; got says whether it connected.
func (f *follower) once(ctx context.Context) (got bool, err error) {
	ctx, cancel := context.WithCancelCause(ctx)
	defer cancel(nil)
	path := "/api/v1/events"
	if !f.known && f.o.Tail > 0 {
		path += "?tail=" + strconv.Itoa(f.o.Tail)
	}
	req, err := f.c.newRequest(ctx, http.MethodGet, path, nil)
	if err != nil {
		return false, err
	}
	req.Header.Set("Accept", "text/event-stream")
	if f.known {
		req.Header.Set("Last-Event-ID", strconv.FormatUint(f.last, 10))
	}
	resp, err := f.c.send(req)
	if err != nil {
		return false, err
	}
	defer resp.Body.Close()

	// A silent stream (a dead tunnel) is cut after Idle.
	errIdle := fmt.Errorf("no data from %s for %v", f.c.where, f.o.Idle)
	idle := time.AfterFunc(f.o.Idle, func() { cancel(errIdle) })
	defer idle.Stop()
	rd := newSSEReader(&resetReader{r: resp.Body, reset: func() { idle.Reset(f.o.Idle) }})
	for {
		fr, err := rd.Next()
		if err != nil {
			if cause := context.Cause(ctx); cause != nil && ctx.Err() != nil {
				err = cause
			}
			if errors.Is(err, io.EOF) {
				err = fmt.Errorf("stream from %s ended", f.c.where)
			}
			return true, err
		}
		if err := f.frame(fr); err != nil {
			return true, err
		}
	}
}

func (f *follower) frame(fr sseFrame) error {
	if !fr.HasID {
		return nil // data without an id is not ours to order; ignore it
	}
	id, err := strconv.ParseUint(fr.ID, 10, 64)
	if err != nil {
		return fmt.Errorf("stream from %s: bad event id %q", f.c.where, fr.ID)
	}
	if len(fr.Data) == 0 { // the stream's starting position
		if f.known && id < f.last && f.o.OnRestart != nil {
			f.o.OnRestart(f.last, id)
		}
		if !f.known || id < f.last {
			f.last, f.known = id, true
		}
		return nil
	}
	var ev store.Event
	if err := json.Unmarshal(fr.Data, &ev); err != nil {
		return fmt.Errorf("stream from %s: event %d: %w", f.c.where, id, err)
	}
	if ev.ID != id {
		return fmt.Errorf("stream from %s: event id %d does not match its frame id %d", f.c.where, ev.ID, id)
	}
	if f.known && ev.ID <= f.last {
		return nil // already delivered
	}
	if f.known && ev.ID > f.last+1 && f.o.OnGap != nil {
		f.o.OnGap(f.last+1, ev.ID-1)
	}
	if err := f.fn(ev); err != nil {
		return fnError{err}
	}
	f.last, f.known = ev.ID, true
	return nil
}

// resetReader calls reset after every read that returned data.
type resetReader struct {
	r     io.Reader
	reset func()
}

func (r *resetReader) Read(p []byte) (int, error) {
	n, err := r.r.Read(p)
	if n > 0 {
		r.reset()
	}
	return n, err
}
