package api

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/units"
)

const testToken = "0123456789abcdef-test-token"

// feed is a minimal live feed for tests: non-blocking fan-out that closes
// a full subscriber, as the engine's bus does.
type feed struct {
	mu   sync.Mutex
	subs map[chan store.Event]struct{}
}

func (f *feed) Subscribe(buffer int) (<-chan store.Event, func()) {
	ch := make(chan store.Event, buffer)
	f.mu.Lock()
	if f.subs == nil {
		f.subs = map[chan store.Event]struct{}{}
	}
	f.subs[ch] = struct{}{}
	f.mu.Unlock()
	return ch, func() { f.drop(ch) }
}

func (f *feed) drop(ch chan store.Event) {
	f.mu.Lock()
	defer f.mu.Unlock()
	if _, ok := f.subs[ch]; ok {
		delete(f.subs, ch)
		close(ch)
	}
}

func (f *feed) publish(ev store.Event) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for ch := range f.subs {
		select {
		case ch <- ev:
		default:
			delete(f.subs, ch)
			close(ch)
		}
	}
}

// bench is a small engine over the real store: it keeps run state in the
// store and commits every event before it publishes it.
type bench struct {
	st   *store.Store
	feed *feed

	mu      sync.Mutex
	current store.RunID
	entries []Entry
}

func (b *bench) emit(t testing.TB, run store.RunID, typ, msg string) uint64 {
	ev := store.Event{Run: run, Level: slog.LevelInfo, Instrument: "ref", Type: typ, Message: msg}
	id, err := b.st.AddEvent(ev)
	if err != nil {
		t.Fatalf("add event: %v", err)
	}
	ev.ID = id
	b.feed.publish(ev)
	return id
}

func (b *bench) Status(context.Context) Status {
	b.mu.Lock()
	defer b.mu.Unlock()
	st := Status{Version: "test", Instruments: []InstrumentInfo{{
		Name: "ref", Role: "reference", Up: true, Reads: 42, Errors: map[string]uint64{"timeout": 3},
		LastPa: 101325, LastAt: time.Unix(1700000000, 0), Settled: true,
	}, {
		Name: "room", Role: RoleAmbient, Up: true, Reads: 3, LastPa: 21.5, LastAt: time.Unix(1700000000, 0), Raw: 21.5, RawUnit: "°C",
	}}, PointsCaptured: 7, Progress: 0.25}
	if b.current != 0 {
		if r, err := b.st.Run(b.current); err == nil {
			info := Info(r)
			st.Run = &info
		}
	}
	return st
}

func (b *bench) Start(_ context.Context, req StartRequest) (store.RunID, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.current != 0 {
		return 0, fmt.Errorf("start: run %s is in progress: %w", b.current, ErrConflict)
	}
	r, err := b.st.CreateRun(req.Label, []byte("procedure: {}\n"))
	if err != nil {
		return 0, err
	}
	if _, err := b.st.SetState(r.ID, store.StateRunning, "started"); err != nil {
		return 0, err
	}
	b.current = r.ID
	return r.ID, nil
}

func (b *bench) change(to store.State, reason string, end bool) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.current == 0 {
		return fmt.Errorf("no run in progress: %w", ErrConflict)
	}
	if _, err := b.st.SetState(b.current, to, reason); err != nil {
		return err
	}
	if end {
		b.current = 0
	}
	return nil
}

func (b *bench) Stop(_ context.Context, reason string) error {
	return b.change(store.StateStopped, reason, true)
}
func (b *bench) Pause(context.Context) error  { return b.change(store.StatePaused, "paused", false) }
func (b *bench) Resume(context.Context) error { return b.change(store.StateRunning, "resumed", false) }

func (b *bench) Enter(_ context.Context, e Entry) error {
	u, _ := units.Lookup(e.Unit) // an ambient unit: no pressure, 0 Pa
	if u.ToPa(e.Value) > 10e6 {
		return fmt.Errorf("reading %g %s is beyond the dial's scale: %w", e.Value, e.Unit, ErrInvalid)
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.current == 0 {
		return fmt.Errorf("no step waits for a reading: %w", ErrConflict)
	}
	b.entries = append(b.entries, e)
	return nil
}

// render stands in for the report package: it writes the run's points in
// the asked format, so the endpoint's plumbing is what the test checks.
func (b *bench) render(format string, w io.Writer, runID, _ string) error {
	id, err := store.ParseRunID(runID)
	if err != nil {
		return err
	}
	pts, err := b.st.Points(id)
	if err != nil {
		return err
	}
	switch format {
	case "csv":
		fmt.Fprintf(w, "run,points\n%s,%d\n", runID, len(pts))
	case "json":
		fmt.Fprintf(w, `{"run":%q,"points":%d}`, runID, len(pts))
	case "html":
		fmt.Fprintf(w, "<!doctype html><title>%s</title><p>%d points</p>", runID, len(pts))
	default:
		return errors.New("unknown format")
	}
	return nil
}

type harness struct {
	t      testing.TB
	st     *store.Store
	bench  *bench
	srv    *Server
	socket string
	tcp    string // host:port of the loopback listener
	unix   *Client
	http   *Client // loopback TCP with the token
}

type harnessOptions struct {
	keepalive    time.Duration
	streamBuffer int
	maxBody      int64
	maxViewers   int
}

func newHarness(t testing.TB, ho harnessOptions) *harness {
	t.Helper()
	dir := t.TempDir()
	st, err := store.Open(filepath.Join(dir, "plateau.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	b := &bench{st: st, feed: &feed{}}
	srv, err := New(Options{Control: b, Records: st, Feed: b.feed, Render: b.render, Token: testToken,
		Version: "test", Keepalive: ho.keepalive, StreamBuffer: ho.streamBuffer, MaxBody: ho.maxBody, MaxViewers: ho.maxViewers})
	if err != nil {
		t.Fatal(err)
	}
	h := &harness{t: t, st: st, bench: b, srv: srv, socket: filepath.Join(dir, "api.sock")}
	ul, err := ListenUnix(h.socket)
	if err != nil {
		t.Fatal(err)
	}
	tl, access, err := ListenTCP("127.0.0.1:0", false, testToken)
	if err != nil {
		t.Fatal(err)
	}
	if access != Loopback {
		t.Fatalf("127.0.0.1 listener has trust %v, want loopback", access)
	}
	h.tcp = tl.Addr().String()
	var wg sync.WaitGroup
	for _, l := range []struct {
		l net.Listener
		a Access
	}{{ul, Local}, {tl, Loopback}} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if err := srv.Serve(l.l, l.a); err != nil {
				t.Errorf("serve: %v", err)
			}
		}()
	}
	h.unix = NewUnixClient(h.socket, "")
	h.http, err = NewTCPClient("http://"+h.tcp, testToken)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		if err := srv.Shutdown(ctx); err != nil {
			t.Errorf("shutdown: %v", err)
		}
		wg.Wait()
		if err := st.Check(); err != nil {
			t.Errorf("store check: %v", err)
		}
		if err := st.Close(); err != nil {
			t.Errorf("store close: %v", err)
		}
	})
	return h
}

// addPoint stores a captured point in run id.
func (h *harness) addPoint(id store.RunID, index int, refPa, dutPa float64) {
	h.t.Helper()
	p := analysis.Point{Cycle: 1, Direction: analysis.Ascending, Kind: analysis.Measurement, Index: index,
		Nominal: refPa, Reference: analysis.Window{Mean: refPa, Count: 10}, DUT: analysis.Window{Mean: dutPa, Count: 10}}
	if _, _, err := h.st.AddPoint(id, p); err != nil {
		h.t.Fatal(err)
	}
}
