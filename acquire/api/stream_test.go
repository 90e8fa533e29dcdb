package api

import (
	"bufio"
	"context"
	"errors"
	"io"
	"net"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"plateau/acquire/store"
)

// collector gathers followed events and checks their order as they come.
type collector struct {
	mu   sync.Mutex
	ids  []uint64
	gaps [][2]uint64
}

func (c *collector) add(ev store.Event) error {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.ids = append(c.ids, ev.ID)
	return nil
}

func (c *collector) count() int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return len(c.ids)
}

func (c *collector) last() uint64 {
	c.mu.Lock()
	defer c.mu.Unlock()
	if len(c.ids) == 0 {
		return 0
	}
	return c.ids[len(c.ids)-1]
}

// exactlyOnce fails unless ids are first, first+1, …, last with nothing
// missing and nothing twice.
func exactlyOnce(t *testing.T, ids []uint64, first, last uint64) {
	t.Helper()
	if uint64(len(ids)) != last-first+1 {
		t.Fatalf("got %d events, want %d (ids %d…%d)", len(ids), last-first+1, first, last)
	}
	for i, id := range ids {
		if id != first+uint64(i) {
			t.Fatalf("event %d has id %d, want %d (missing or repeated)", i, id, first+uint64(i))
		}
	}
}

// producer commits and publishes n events, one every pace, in the
// background, as the engine does during a run.
func producer(t *testing.T, h *harness, n int, pace time.Duration) (wait func()) {
	return producerPadded(t, h, n, pace, "")
}

func producerPadded(t *testing.T, h *harness, n int, pace time.Duration, pad string) (wait func()) {
	done := make(chan struct{})
	go func() {
		defer close(done)
		for i := range n {
			h.bench.emit(t, 1, "sample", "event "+strconv.Itoa(i+1)+pad)
			if pace > 0 {
				time.Sleep(pace)
			}
		}
	}()
	return func() { <-done }
}

// TestResumeAfterDisconnect: a viewer that goes away in the middle of a run
// and comes back with the last id it saw receives every event exactly once.
func TestResumeAfterDisconnect(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	const n = 400
	wait := producer(t, h, n, 500*time.Microsecond)
	defer wait()

	var got collector
	ctx, cancel := context.WithCancel(context.Background())
	errc := make(chan error, 1)
	go func() {
		errc <- h.unix.Follow(ctx, FollowOptions{Resume: true, After: 0}, func(ev store.Event) error {
			got.add(ev)
			if ev.ID == 120 {
				cancel() // the viewer goes away mid-run
			}
			return nil
		})
	}()
	if err := <-errc; !errors.Is(err, context.Canceled) {
		t.Fatalf("first follow: %v", err)
	}
	resumeFrom := got.last()
	if resumeFrom < 120 {
		t.Fatalf("first connection saw only up to %d", resumeFrom)
	}

	ctx2, cancel2 := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel2()
	err := h.http.Follow(ctx2, FollowOptions{Resume: true, After: resumeFrom}, func(ev store.Event) error {
		got.add(ev)
		if ev.ID == n {
			cancel2()
		}
		return nil
	})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("second follow: %v", err)
	}
	exactlyOnce(t, got.ids, 1, n)
}

// cutter is a TCP proxy to the daemon whose connections can be cut, like
// an SSH tunnel that drops.
type cutter struct {
	l     net.Listener
	mu    sync.Mutex
	conns []net.Conn
}

func newCutter(t *testing.T, target string) *cutter {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	c := &cutter{l: l}
	go func() {
		for {
			in, err := l.Accept()
			if err != nil {
				return
			}
			out, err := net.Dial("tcp", target)
			if err != nil {
				in.Close()
				continue
			}
			c.mu.Lock()
			c.conns = append(c.conns, in, out)
			c.mu.Unlock()
			go func() { io.Copy(out, in); out.Close() }()
			go func() { io.Copy(in, out); in.Close() }()
		}
	}()
	t.Cleanup(func() { l.Close(); c.cut() })
	return c
}

func (c *cutter) cut() {
	c.mu.Lock()
	defer c.mu.Unlock()
	for _, conn := range c.conns {
		conn.Close()
	}
	c.conns = nil
}

// TestReconnectsByItself: when the connection drops twice during a run the
// client reconnects on its own from the last id and still gets every event
// exactly once.
func TestReconnectsByItself(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	proxy := newCutter(t, h.tcp)
	c, err := NewTCPClient("http://"+proxy.l.Addr().String(), testToken)
	if err != nil {
		t.Fatal(err)
	}
	const n = 300
	var got collector
	var mu sync.Mutex
	drops := 0
	ctx, cancel := context.WithTimeout(context.Background(), 15*time.Second)
	defer cancel()
	errc := make(chan error, 1)
	go func() {
		errc <- c.Follow(ctx, FollowOptions{Resume: true, MinBackoff: 5 * time.Millisecond, MaxBackoff: 20 * time.Millisecond,
			OnDisconnect: func(error, time.Duration) { mu.Lock(); drops++; mu.Unlock() },
			OnGap:        func(a, b uint64) { t.Errorf("gap %d…%d reported", a, b) },
		}, func(ev store.Event) error {
			got.add(ev)
			if ev.ID == n {
				cancel()
			}
			return nil
		})
	}()
	wait := producer(t, h, n, 300*time.Microsecond)
	waitFor(t, func() bool { return got.count() >= 80 })
	proxy.cut()
	waitFor(t, func() bool { return got.count() >= 200 })
	proxy.cut()
	wait()
	if err := <-errc; !errors.Is(err, context.Canceled) {
		t.Fatalf("follow: %v (got %d events)", err, got.count())
	}
	exactlyOnce(t, got.ids, 1, n)
	if drops < 2 {
		t.Fatalf("%d disconnects seen, want 2", drops)
	}
}

// TestSlowViewer: a viewer too slow for its live buffer is dropped by the
// feed — publishing never waits — and the stream fills in from the store,
// so the viewer still gets every event once.
func TestSlowViewer(t *testing.T) {
	h := newHarness(t, harnessOptions{streamBuffer: 2})
	const n = 200
	var got collector
	ctx, cancel := context.WithTimeout(context.Background(), 15*time.Second)
	defer cancel()
	errc := make(chan error, 1)
	produced := make(chan struct{})
	go func() {
		errc <- h.unix.Follow(ctx, FollowOptions{}, func(ev store.Event) error {
			got.add(ev)
			if ev.ID == 1 {
				<-produced // the viewer stalls until the run has moved on
			}
			if ev.ID == n {
				cancel()
			}
			return nil
		})
	}()
	waitFor(t, func() bool { return metric(t, h.http, "plateau_stream_viewers") == "1" })
	// Large events fill the socket buffers, so the stream's writer blocks
	// and its live buffer overflows.
	start := time.Now()
	producerPadded(t, h, n, 0, strings.Repeat(" pad", 2000))()
	publishing := time.Since(start)
	close(produced)
	if err := <-errc; !errors.Is(err, context.Canceled) {
		t.Fatalf("follow: %v", err)
	}
	exactlyOnce(t, got.ids, 1, n)
	if v := metric(t, h.http, "plateau_stream_catchups_total"); v == "0" || v == "" {
		t.Fatalf("catch-ups = %q; the slow viewer was never dropped from the live feed", v)
	}
	t.Logf("%d events committed and published in %v while the viewer lagged", n, publishing)
}

// sseRead opens the stream with raw HTTP and returns the first frames.
func sseRead(t *testing.T, h *harness, path, lastID string, frames int) []sseFrame {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", h.unix.base+path, nil)
	if lastID != "" {
		req.Header.Set("Last-Event-ID", lastID)
	}
	resp, err := h.unix.hc.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if ct := resp.Header.Get("Content-Type"); ct != "text/event-stream" {
		t.Fatalf("content type %q", ct)
	}
	rd := newSSEReader(resp.Body)
	var out []sseFrame
	for len(out) < frames {
		f, err := rd.Next()
		if err != nil {
			t.Fatalf("after %d frames: %v", len(out), err)
		}
		out = append(out, f)
	}
	return out
}

func frameIDs(fs []sseFrame) string {
	var s []string
	for _, f := range fs {
		if len(f.Data) == 0 {
			s = append(s, "@"+f.ID)
		} else {
			s = append(s, f.ID)
		}
	}
	return strings.Join(s, " ")
}

// TestStreamStart checks where a stream begins for each way of asking.
func TestStreamStart(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	producer(t, h, 10, 0)()
	cases := []struct {
		name, path, lastID string
		frames             int
		want               string // "@N" is the position block, then event ids
	}{
		{"since", "/api/v1/events?since=7", "", 4, "@7 8 9 10"},
		{"last event id wins over since", "/api/v1/events?since=2", "8", 3, "@8 9 10"},
		{"tail", "/api/v1/events?tail=2", "", 3, "@8 9 10"},
		{"tail longer than history", "/api/v1/events?tail=50", "", 3, "@0 1 2"},
		{"from the start", "/api/v1/events?since=0", "", 2, "@0 1"},
		{"id from a replaced store", "/api/v1/events", "99", 1, "@10"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := frameIDs(sseRead(t, h, c.path, c.lastID, c.frames)); got != c.want {
				t.Fatalf("frames %q, want %q", got, c.want)
			}
		})
	}
	t.Run("new events only", func(t *testing.T) {
		go func() {
			waitFor(t, func() bool { return metric(t, h.http, "plateau_stream_viewers") == "1" })
			h.bench.emit(t, 1, "point", "captured")
		}()
		if got := frameIDs(sseRead(t, h, "/api/v1/events", "", 2)); got != "@10 11" {
			t.Fatalf("frames %q, want @10 11", got)
		}
	})
}

func TestKeepalive(t *testing.T) {
	h := newHarness(t, harnessOptions{keepalive: 20 * time.Millisecond})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", h.unix.base+"/api/v1/events", nil)
	resp, err := h.unix.hc.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	br := bufio.NewReader(resp.Body)
	for {
		line, err := br.ReadString('\n')
		if err != nil {
			t.Fatalf("no keepalive: %v", err)
		}
		if line == ": keepalive\n" {
			return
		}
	}
}

// TestFollowIdle: a stream that goes silent (a dead tunnel sends nothing,
// not even keepalives) is reopened after the idle limit.
func TestFollowIdle(t *testing.T) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	var mu sync.Mutex
	opened := 0
	srv := &http.Server{Handler: http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		mu.Lock()
		opened++
		mu.Unlock()
		w.Header().Set("Content-Type", "text/event-stream")
		w.WriteHeader(200)
		w.(http.Flusher).Flush()
		<-r.Context().Done()
	})}
	go srv.Serve(l)
	defer srv.Close()
	c, _ := NewTCPClient("http://"+l.Addr().String(), "")
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	var reasons []string
	c.Follow(ctx, FollowOptions{Idle: 30 * time.Millisecond, MinBackoff: time.Millisecond,
		OnDisconnect: func(err error, _ time.Duration) {
			reasons = append(reasons, err.Error())
			if len(reasons) == 2 {
				cancel()
			}
		}}, func(store.Event) error { return nil })
	if len(reasons) != 2 || !strings.Contains(reasons[0], "no data from") {
		t.Fatalf("disconnect reasons %q", reasons)
	}
}

// TestFollowGivesUp: without Retry an absent daemon is an error at once,
// and a refusal is never retried.
func TestFollowGivesUp(t *testing.T) {
	c := NewUnixClient(t.TempDir()+"/none.sock", "")
	err := c.Follow(context.Background(), FollowOptions{}, func(store.Event) error { return nil })
	if err == nil || !strings.Contains(err.Error(), "cannot reach the plateau daemon") {
		t.Fatalf("absent daemon: %v", err)
	}
	h := newHarness(t, harnessOptions{})
	remote := serveExtra(t, h.srv, Remote, "wrong-token-wrong-token")
	err = remote.Follow(context.Background(), FollowOptions{Retry: true}, func(store.Event) error { return nil })
	if !IsStatus(err, http.StatusForbidden) {
		t.Fatalf("refused stream: %v", err)
	}
}

// TestFollowAfterStoreReplaced: when the daemon's ids restart below the
// last one seen (its store file was replaced), the client says so and
// takes the new events instead of skipping them as already seen.
func TestFollowAfterStoreReplaced(t *testing.T) {
	var restarted [2]uint64
	var got []uint64
	f := &follower{c: &Client{where: "test"}, known: true, last: 500, o: FollowOptions{
		OnRestart: func(a, b uint64) { restarted = [2]uint64{a, b} },
		OnGap:     func(a, b uint64) { t.Errorf("gap %d…%d", a, b) },
	}, fn: func(ev store.Event) error { got = append(got, ev.ID); return nil }}
	for _, fr := range []sseFrame{
		{ID: "3", HasID: true},
		{ID: "4", HasID: true, Data: []byte(`{"id":4,"type":"state","message":"m","level":"INFO","time":"2026-03-01T08:00:00Z"}`)},
	} {
		if err := f.frame(fr); err != nil {
			t.Fatal(err)
		}
	}
	if restarted != [2]uint64{500, 3} || len(got) != 1 || got[0] != 4 {
		t.Fatalf("restart %v, events %v", restarted, got)
	}
}
