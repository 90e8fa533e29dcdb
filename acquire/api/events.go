package api

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"strings"
	"time"

	"plateau/acquire/store"
)

// catchUpBatch is how many stored events one catch-up read fetches.
const catchUpBatch = 500

// eventWriteTimeout bounds one write to a viewer; a viewer that stops
// reading is dropped instead of holding a goroutine forever.
const eventWriteTimeout = 30 * time.Second

// handleEvents streams committed events as Server-Sent Events. The start
// is, in order of precedence: the Last-Event-ID header (a reconnecting
// client), ?since=ID (events after ID), ?tail=N (the last N events), or
// else only events from now on. Every event carries its id, so a client
// that reconnects from the last id it saw gets every later event exactly
// once. The stream subscribes to the live feed before it reads the store,
// and skips what it has already sent; when the live feed drops it for being
// slow, or ids jump, it fills in from the store.
func (s *Server) handleEvents(w http.ResponseWriter, r *http.Request) {
	start, err := streamStart(r)
	if err != nil {
		writeProblem(w, http.StatusBadRequest, err.Error())
		return
	}
	if n := s.viewers.Add(1); n > int64(s.o.MaxViewers) {
		s.viewers.Add(-1)
		writeProblem(w, http.StatusServiceUnavailable, fmt.Sprintf("too many event viewers: %d are open, the limit is %d; close one and try again", n-1, s.o.MaxViewers))
		return
	}
	defer s.viewers.Add(-1)
	live, cancel := s.o.Feed.Subscribe(s.o.StreamBuffer)
	defer func() { cancel() }()
	after, err := s.resolveStart(start)
	if err != nil {
		s.fail(w, err)
		return
	}

	rc := http.NewResponseController(w)
	// The stream outlives the server's read and write timeouts; a read
	// deadline left in place would cancel it.
	rc.SetReadDeadline(time.Time{})
	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)
	s.stream.viewers.Inc()
	defer s.stream.viewers.Dec()

	sw := &sseWriter{w: w, rc: rc}
	// An id-only block tells the client where the stream starts, so a
	// reconnect before the first event does not replay the tail again.
	if err := sw.position(after); err != nil {
		s.endStream(err)
		return
	}
	if after, err = s.catchUp(sw, after); err != nil {
		s.endStream(err)
		return
	}
	keepalive := time.NewTicker(s.o.Keepalive)
	defer keepalive.Stop()
	for {
		select {
		case <-r.Context().Done():
			return
		case <-s.stopped:
			return
		case <-keepalive.C:
			if err := sw.comment("keepalive"); err != nil {
				s.endStream(err)
				return
			}
		case ev, ok := <-live:
			if !ok {
				// Dropped by the feed for being slow: subscribe again,
				// then fetch what was missed from the store.
				s.stream.catchUps.Inc()
				cancel()
				live, cancel = s.o.Feed.Subscribe(s.o.StreamBuffer)
				if after, err = s.catchUp(sw, after); err != nil {
					s.endStream(err)
					return
				}
				continue
			}
			if ev.ID <= after {
				continue // already sent from the store
			}
			if ev.ID > after+1 {
				// Some ids never came live: the store has them (ev too).
				s.stream.catchUps.Inc()
				if after, err = s.catchUp(sw, after); err != nil {
					s.endStream(err)
					return
				}
				if ev.ID <= after {
					continue
				}
			}
			if err := sw.event(ev); err != nil {
				s.endStream(err)
				return
			}
			after = ev.ID
			s.stream.sent.Inc()
		}
	}
}

// catchUp sends every stored event after `after` and returns the last id sent.
func (s *Server) catchUp(sw *sseWriter, after uint64) (uint64, error) {
	for {
		evs, err := s.o.Records.Events(after, catchUpBatch)
		if err != nil {
			return after, fmt.Errorf("read events after %d: %w", after, err)
		}
		for _, ev := range evs {
			if err := sw.event(ev); err != nil {
				return after, err
			}
			after = ev.ID
			s.stream.sent.Inc()
		}
		if len(evs) < catchUpBatch {
			return after, nil
		}
	}
}

func (s *Server) endStream(err error) {
	s.log.Debug("event stream ended", "err", err)
}

// startPoint is where a stream begins, before it is resolved against the store.
type startPoint struct {
	after   uint64
	tail    uint64
	hasTail bool
	now     bool // only new events
}

func streamStart(r *http.Request) (startPoint, error) {
	if v := r.Header.Get("Last-Event-ID"); v != "" {
		id, err := strconv.ParseUint(strings.TrimSpace(v), 10, 64)
		if err != nil {
			return startPoint{}, fmt.Errorf("header Last-Event-ID %q: want an event id (a whole number)", v)
		}
		return startPoint{after: id}, nil
	}
	q := r.URL.Query()
	if v := q.Get("since"); v != "" {
		id, err := strconv.ParseUint(v, 10, 64)
		if err != nil {
			return startPoint{}, fmt.Errorf("query parameter since=%q: want an event id (a whole number)", v)
		}
		return startPoint{after: id}, nil
	}
	if v := q.Get("tail"); v != "" {
		n, err := strconv.ParseUint(v, 10, 64)
		if err != nil {
			return startPoint{}, fmt.Errorf("query parameter tail=%q: want a count of events (a whole number)", v)
		}
		return startPoint{tail: n, hasTail: true}, nil
	}
	return startPoint{now: true}, nil
}

func (s *Server) resolveStart(p startPoint) (uint64, error) {
	last, err := s.o.Records.LastEventID()
	if err != nil {
		return 0, fmt.Errorf("last event id: %w", err)
	}
	switch {
	case !p.now && !p.hasTail:
		// An id beyond the end comes from an earlier store (the file was
		// replaced): go on from this store's end, not from a future id.
		return min(p.after, last), nil
	case p.now:
		return last, nil
	case p.tail >= last:
		return 0, nil
	}
	return last - p.tail, nil
}

// sseWriter writes the text/event-stream framing and flushes each block.
type sseWriter struct {
	w  io.Writer
	rc *http.ResponseController
}

func (sw *sseWriter) event(ev store.Event) error {
	data, err := json.Marshal(ev)
	if err != nil {
		return fmt.Errorf("encode event %d: %w", ev.ID, err)
	}
	// json.Marshal never emits a raw newline, so one data line suffices.
	return sw.block(fmt.Appendf(nil, "id: %d\ndata: %s\n\n", ev.ID, data))
}

func (sw *sseWriter) position(id uint64) error {
	return sw.block(fmt.Appendf(nil, "retry: 2000\nid: %d\n\n", id))
}

func (sw *sseWriter) comment(text string) error {
	return sw.block([]byte(": " + text + "\n\n"))
}

func (sw *sseWriter) block(b []byte) error {
	sw.rc.SetWriteDeadline(time.Now().Add(eventWriteTimeout))
	if _, err := sw.w.Write(b); err != nil {
		return err
	}
	return sw.rc.Flush()
}
