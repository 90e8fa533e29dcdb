package api

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
)

// raw makes one HTTP call without the client's help, to see exactly what
// the daemon answers.
func raw(t testing.TB, c *Client, method, path, token, ctype, body string) (int, http.Header, string) {
	t.Helper()
	req, err := http.NewRequest(method, c.base+path, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", token)
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := c.hc.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, resp.Header, string(b)
}

// TestEveryCall runs each call of the API through the Go client, once over
// the unix socket (no token: the socket's mode guards it) and once over
// loopback TCP with the token, against the real store.
func TestEveryCall(t *testing.T) {
	for _, transport := range []string{"unix", "tcp"} {
		t.Run(transport, func(t *testing.T) {
			h := newHarness(t, harnessOptions{})
			c := h.unix
			if transport == "tcp" {
				c = h.http
			}
			ctx := context.Background()
			expectStatus := func(err error, code int, what string) {
				t.Helper()
				if !IsStatus(err, code) {
					t.Fatalf("%s: got %v, want a %d refusal", what, err, code)
				}
			}

			st, err := c.Status(ctx)
			if err != nil || st.Version != "test" || st.Run != nil || len(st.Instruments) != 2 {
				t.Fatalf("status when idle = %+v, %v", st, err)
			}
			if in := st.Instruments[1]; in.Quantity != "temperature" || in.Raw != 21.5 || in.RawUnit != "°C" || st.Instruments[0].Quantity != "" {
				t.Fatalf("status names the quantity of an ambient instrument only: %+v", st.Instruments)
			}
			id, err := c.Start(ctx, StartRequest{Label: "as-found PG-0421"})
			if err != nil || id != "r000001" {
				t.Fatalf("start = %q, %v", id, err)
			}
			_, err = c.Start(ctx, StartRequest{})
			expectStatus(err, http.StatusConflict, "second start")

			last := h.bench.emit(t, 1, "state", "running")
			st, err = c.Status(ctx)
			if err != nil || st.Run == nil || st.Run.ID != id || st.Run.State != store.StateRunning || st.LastEventID != last {
				t.Fatalf("status while running = %+v, %v (want run %s, last event %d)", st, err, id, last)
			}

			h.addPoint(1, 0, 0, 12)
			h.addPoint(1, 1, 400000, 400250)
			runs, err := c.Runs(ctx)
			if err != nil || len(runs) != 1 || runs[0].ID != id || runs[0].Label != "as-found PG-0421" {
				t.Fatalf("runs = %+v, %v", runs, err)
			}
			for _, name := range []string{id, "last", "1", "r1"} {
				d, err := c.Run(ctx, name)
				if err != nil || d.ID != id || d.Points != 2 || !strings.Contains(d.Config, "procedure") {
					t.Fatalf("run %s = %+v, %v", name, d, err)
				}
			}
			_, err = c.Run(ctx, "r999")
			expectStatus(err, http.StatusNotFound, "unknown run")
			_, err = c.Run(ctx, "yesterday")
			expectStatus(err, http.StatusBadRequest, "malformed run id")

			pts, err := c.Points(ctx, id)
			if err != nil || len(pts) != 2 || pts[1].DUT.Mean != 400250 {
				t.Fatalf("points = %+v, %v", pts, err)
			}
			for format, want := range map[string]string{"csv": "r000001,2", "json": `"points":2`, "html": "<p>2 points</p>"} {
				var buf bytes.Buffer
				if err := c.Report(ctx, id, format, &buf); err != nil || !strings.Contains(buf.String(), want) {
					t.Fatalf("report %s = %q, %v", format, buf.String(), err)
				}
			}
			expectStatus(c.Report(ctx, id, "pdf", io.Discard), http.StatusBadRequest, "report as pdf")
			expectStatus(c.Report(ctx, "r7", "csv", io.Discard), http.StatusNotFound, "report of unknown run")

			for _, step := range []struct {
				do   func(context.Context) error
				want store.State
			}{{c.Pause, store.StatePaused}, {c.Resume, store.StateRunning}} {
				if err := step.do(ctx); err != nil {
					t.Fatal(err)
				}
				if r, _ := h.st.Run(1); r.State != step.want {
					t.Fatalf("state = %s, want %s", r.State, step.want)
				}
			}

			if err := c.Enter(ctx, Entry{Value: 4.02, Unit: "bar"}); err != nil {
				t.Fatal(err)
			}
			expectStatus(c.Enter(ctx, Entry{Value: 500, Unit: "bar"}), http.StatusBadRequest, "reading beyond scale")
			// An ambient instrument's reading keeps the unit as typed.
			for _, u := range []string{"°C", "%RH", "hPa", "degF"} {
				if err := c.Enter(ctx, Entry{Device: "room", Value: 23.4, Unit: u}); err != nil {
					t.Fatalf("entry in %s: %v", u, err)
				}
			}
			got := h.bench.entries
			if len(got) != 5 || got[0] != (Entry{Value: 4.02, Unit: "bar"}) || got[1] != (Entry{Device: "room", Value: 23.4, Unit: "°C"}) ||
				got[2].Unit != "%RH" || got[4].Unit != "degF" {
				t.Fatalf("entries = %+v", got)
			}

			if err := c.Stop(ctx, "leak at the manifold"); err != nil {
				t.Fatal(err)
			}
			if r, _ := h.st.Run(1); r.State != store.StateStopped || r.Reason != "leak at the manifold" {
				t.Fatalf("after stop: %+v", r)
			}
			expectStatus(c.Stop(ctx, ""), http.StatusConflict, "stop with no run")
			expectStatus(c.Pause(ctx), http.StatusConflict, "pause with no run")
			expectStatus(c.Enter(ctx, Entry{Value: 1, Unit: "bar"}), http.StatusConflict, "entry with no run")
		})
	}
}

// TestAuth checks who may call what: over loopback TCP reads are open and
// changes need the token; on a remote listener everything but /healthz
// needs it; the unix socket needs none. Refusals say nothing more than
// "unauthorized" or "forbidden".
func TestAuth(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	remote := serveExtra(t, h.srv, Remote, testToken)
	noToken := newServerWithoutToken(t, h)

	const (
		unauthorized = "{\n  \"error\": \"unauthorized\"\n}\n"
		forbidden    = "{\n  \"error\": \"forbidden\"\n}\n"
		good         = "Bearer " + testToken
	)
	changes := []string{"/api/v1/start", "/api/v1/stop", "/api/v1/pause", "/api/v1/resume", "/api/v1/entry"}
	type call struct {
		name     string
		c        *Client
		method   string
		path     string
		auth     string
		wantCode int
		wantBody string
	}
	var calls []call
	for _, p := range changes {
		calls = append(calls,
			call{"loopback no token " + p, h.http, "POST", p, "", 401, unauthorized},
			call{"loopback wrong token " + p, h.http, "POST", p, "Bearer " + strings.Repeat("x", len(testToken)), 403, forbidden},
			call{"loopback token prefix " + p, h.http, "POST", p, "Bearer " + testToken[:8], 403, forbidden},
			call{"loopback basic auth " + p, h.http, "POST", p, "Basic dXNlcjpwYXNz", 401, unauthorized},
			call{"remote no token " + p, remote, "POST", p, "", 401, unauthorized},
			call{"no token configured " + p, noToken, "POST", p, good, 403, forbidden},
		)
	}
	for _, p := range []string{"/api/v1/status", "/api/v1/runs", "/metrics", "/readyz", "/api/v1/events?since=x"} {
		calls = append(calls,
			call{"remote read no token " + p, remote, "GET", p, "", 401, unauthorized},
			call{"remote read wrong token " + p, remote, "GET", p, "Bearer nope-nope-nope-nope", 403, forbidden})
	}
	calls = append(calls,
		call{"loopback read open", h.http, "GET", "/api/v1/runs", "", 200, ""},
		call{"no token configured, read open", noToken, "GET", "/api/v1/runs", "", 200, ""},
		call{"remote read with token", remote, "GET", "/api/v1/runs", good, 200, ""},
		call{"remote health open", remote, "GET", "/healthz", "", 200, ""},
		call{"loopback change with token", h.http, "POST", "/api/v1/start", good, 201, ""},
		call{"unix change without token", h.unix, "POST", "/api/v1/stop", "", 200, ""},
		call{"remote change with token", remote, "POST", "/api/v1/start", "bearer " + testToken, 201, ""},
	)
	for _, c := range calls {
		t.Run(c.name, func(t *testing.T) {
			code, hdr, body := raw(t, c.c, c.method, c.path, c.auth, "", "")
			if code != c.wantCode {
				t.Fatalf("%s %s: status %d, want %d (%s)", c.method, c.path, code, c.wantCode, body)
			}
			if c.wantBody != "" && body != c.wantBody {
				t.Fatalf("refusal body %q, want exactly %q", body, c.wantBody)
			}
			if code == 401 && hdr.Get("WWW-Authenticate") != `Bearer realm="plateau"` {
				t.Fatalf("401 without a Bearer challenge: %q", hdr.Get("WWW-Authenticate"))
			}
		})
	}
}

// serveExtra serves srv with the given trust on another loopback listener.
func serveExtra(t *testing.T, srv *Server, access Access, token string) *Client {
	t.Helper()
	l, _, err := ListenTCP("127.0.0.1:0", false, "")
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan struct{})
	go func() { defer close(done); srv.Serve(l, access) }()
	t.Cleanup(func() { l.Close(); <-done })
	c, err := NewTCPClient("http://"+l.Addr().String(), token)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// newServerWithoutToken serves the harness's store with no token set.
func newServerWithoutToken(t *testing.T, h *harness) *Client {
	t.Helper()
	srv, err := New(Options{Control: h.bench, Records: h.st, Feed: h.bench.feed})
	if err != nil {
		t.Fatal(err)
	}
	c := serveExtra(t, srv, Loopback, "")
	t.Cleanup(func() { srv.Shutdown(context.Background()) })
	return c
}

// TestBadRequests checks that malformed, oversized or wrongly typed bodies
// and parameters get a 4xx whose message says what is wrong and where.
func TestBadRequests(t *testing.T) {
	h := newHarness(t, harnessOptions{maxBody: 1024})
	if _, err := h.unix.Start(context.Background(), StartRequest{}); err != nil {
		t.Fatal(err)
	}
	big := `{"value": 1, "unit": "bar", "pad": "` + strings.Repeat("x", 2000) + `"}`
	cases := []struct {
		name, method, path, ctype, body string
		code                            int
		want                            string
	}{
		{"too large", "POST", "/api/v1/entry", "application/json", big, 413, "larger than 1024 bytes"},
		{"cut off", "POST", "/api/v1/entry", "application/json", `{"value": 1`, 400, "JSON ends too early"},
		{"not JSON", "POST", "/api/v1/entry", "application/json", `value=1`, 400, "invalid JSON at byte 1"},
		{"wrong type", "POST", "/api/v1/entry", "application/json", `{"value": "4 bar", "unit": "bar"}`, 400, `field "value": expected a number, got string`},
		{"unknown field", "POST", "/api/v1/entry", "application/json", `{"value": 1, "unit": "bar", "gauge": 2}`, 400, `unknown field "gauge"`},
		{"two values", "POST", "/api/v1/entry", "application/json", `{"value": 1, "unit": "bar"} {"value": 2}`, 400, "more than one JSON value"},
		{"array", "POST", "/api/v1/entry", "application/json", `[1, 2]`, 400, "expected a JSON object, got array"},
		{"empty", "POST", "/api/v1/entry", "application/json", ``, 400, "request body is empty"},
		{"missing value", "POST", "/api/v1/entry", "application/json", `{"unit": "bar"}`, 400, `field "value": missing`},
		{"missing unit", "POST", "/api/v1/entry", "application/json", `{"value": 3}`, 400, `field "unit": missing`},
		{"unknown unit", "POST", "/api/v1/entry", "application/json", `{"value": 3, "unit": "furlong"}`, 400, `unknown pressure unit "furlong"`},
		{"unknown ambient unit", "POST", "/api/v1/entry", "application/json", `{"device": "room", "value": 3, "unit": "°R"}`, 400, `nor a temperature (°C, K, °F) or humidity (%RH) of an ambient instrument`},
		{"number too big", "POST", "/api/v1/entry", "application/json", `{"value": 1e400, "unit": "bar"}`, 400, `field "value": 1e400 is out of range`},
		{"plain text", "POST", "/api/v1/entry", "text/plain", `{"value": 1, "unit": "bar"}`, 415, "send application/json"},
		{"label too long", "POST", "/api/v1/start", "application/json", `{"label": "` + strings.Repeat("é", 201) + `"}`, 400, `field "label": 201 characters, at most 200`},
		{"control character", "POST", "/api/v1/start", "application/json", `{"label": "a\u001b[31mb"}`, 400, `field "label": control character at byte 1`},
		{"stop reason wrong type", "POST", "/api/v1/stop", "application/json", `{"reason": 5}`, 400, `field "reason": expected a string, got number`},
		{"pause with a body", "POST", "/api/v1/pause", "application/json", `{"now": true}`, 400, `unknown field "now"`},
		{"wrong method", "GET", "/api/v1/start", "", ``, 405, "GET /api/v1/start: method not allowed; use POST"},
		{"no such call", "GET", "/api/v2/status", "", ``, 404, "no such call: GET /api/v2/status"},
		{"report format", "GET", "/api/v1/runs/r1/report?format=pdf", "", ``, 400, `format="pdf": use json, csv or html`},
		{"bad since", "GET", "/api/v1/events?since=yesterday", "", ``, 400, `since="yesterday": want an event id`},
		{"bad tail", "GET", "/api/v1/events?tail=-3", "", ``, 400, `tail="-3": want a count`},
		{"bad run id", "GET", "/api/v1/runs/r-1/points", "", ``, 400, `run id "r-1"`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			code, _, body := raw(t, h.unix, c.method, c.path, "", c.ctype, c.body)
			var p Problem
			if err := json.Unmarshal([]byte(body), &p); err != nil {
				t.Fatalf("reply is not a JSON problem: %q", body)
			}
			if code != c.code || !strings.Contains(p.Error, c.want) {
				t.Fatalf("status %d body %q; want %d containing %q", code, body, c.code, c.want)
			}
		})
	}
	if len(h.bench.entries) != 0 {
		t.Fatalf("a bad request reached the engine: %+v", h.bench.entries)
	}
}

func TestReadiness(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	var fail error
	srv, err := New(Options{Control: h.bench, Records: h.st, Feed: h.bench.feed, Ready: func() error { return fail }})
	if err != nil {
		t.Fatal(err)
	}
	c := serveExtra(t, srv, Loopback, "")
	t.Cleanup(func() { srv.Shutdown(context.Background()) })
	if code, _, _ := raw(t, c, "GET", "/readyz", "", "", ""); code != 200 {
		t.Fatalf("ready: %d", code)
	}
	// The reason is the bench's own (the store cannot write, say): people
	// need it, and /readyz is behind the same guard as status.
	fail = errors.New("the store cannot write: no space left on device")
	if code, _, body := raw(t, c, "GET", "/readyz", "", "", ""); code != 503 || !strings.Contains(body, "no space left") {
		t.Fatalf("not ready: %d %q, want 503 with the reason", code, body)
	}
}

func TestListenUnix(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "a.sock")
	l, err := ListenUnix(path)
	if err != nil {
		t.Fatal(err)
	}
	fi, err := os.Stat(path)
	if err != nil || fi.Mode().Perm() != 0o660 {
		t.Fatalf("socket mode %v, %v; want 0660", fi.Mode().Perm(), err)
	}
	if _, err := ListenUnix(path); err == nil || !strings.Contains(err.Error(), "already serving") {
		t.Fatalf("second listener on a live socket: %v", err)
	}
	// A socket file left behind by a process that died is replaced.
	l.(interface{ SetUnlinkOnClose(bool) }).SetUnlinkOnClose(false)
	l.Close()
	l2, err := ListenUnix(path)
	if err != nil {
		t.Fatalf("stale socket not replaced: %v", err)
	}
	l2.Close()

	plain := filepath.Join(dir, "plain")
	os.WriteFile(plain, []byte("x"), 0o600)
	if _, err := ListenUnix(plain); err == nil || !strings.Contains(err.Error(), "not a socket") {
		t.Fatalf("regular file in the way: %v", err)
	}
}

func TestListenTCP(t *testing.T) {
	cases := []struct {
		addr   string
		remote bool
		token  string
		want   string // error text; "" means it listens
		access Access
	}{
		{"127.0.0.1:0", false, "", "", Loopback},
		{"[::1]:0", false, "", "", Loopback},
		{"localhost:0", false, "", "", Loopback},
		{"0.0.0.0:0", false, testToken, "not a loopback address", 0},
		{":0", false, testToken, "not a loopback address", 0},
		{"0.0.0.0:0", true, "", "a token (listen.token_file) is required", 0},
		{"0.0.0.0:0", true, testToken, "", Remote},
		{"8417", false, "", "want host:port", 0},
	}
	for _, c := range cases {
		l, access, err := ListenTCP(c.addr, c.remote, c.token)
		if c.want == "" {
			if err != nil {
				if strings.Contains(err.Error(), "cannot assign") || strings.Contains(err.Error(), "address family") {
					t.Logf("%s: %v (no such interface here)", c.addr, err)
					continue
				}
				t.Fatalf("%s: %v", c.addr, err)
			}
			l.Close()
			if access != c.access {
				t.Fatalf("%s: trust %v, want %v", c.addr, access, c.access)
			}
			continue
		}
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Fatalf("%s remote=%v token=%q: %v, want %q", c.addr, c.remote, c.token, err, c.want)
		}
	}
}

func TestLoadToken(t *testing.T) {
	dir := t.TempDir()
	write := func(name, content string, mode os.FileMode) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(content), mode); err != nil {
			t.Fatal(err)
		}
		os.Chmod(p, mode)
		return p
	}
	cases := []struct {
		name, content string
		mode          os.FileMode
		want, err     string
	}{
		{"good", testToken + "\n", 0o640, testToken, ""},
		{"crlf", testToken + "\r\nsecond line\n", 0o600, testToken, ""},
		{"short", "abc\n", 0o600, "", "at least 16"},
		{"spaces", "abcdefgh ijklmnopq\n", 0o600, "", "spaces"},
		{"world readable", testToken, 0o644, "", "readable by every user"},
	}
	for _, c := range cases {
		got, err := LoadToken(write(c.name, c.content, c.mode))
		if c.err == "" && (err != nil || got != c.want) {
			t.Fatalf("%s: %q, %v", c.name, got, err)
		}
		if c.err != "" && (err == nil || !strings.Contains(err.Error(), c.err)) {
			t.Fatalf("%s: %v, want %q", c.name, err, c.err)
		}
	}
	if _, err := LoadToken(filepath.Join(dir, "missing")); err == nil {
		t.Fatal("missing token file accepted")
	}
}

func TestMetrics(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	if _, err := h.unix.Start(context.Background(), StartRequest{}); err != nil {
		t.Fatal(err)
	}
	code, hdr, body := raw(t, h.http, "GET", "/metrics", "", "", "")
	if code != 200 || !strings.HasPrefix(hdr.Get("Content-Type"), "text/plain") {
		t.Fatalf("metrics: %d %s", code, hdr.Get("Content-Type"))
	}
	for _, want := range []string{
		`plateau_instrument_reads_total{instrument="ref"} 42`,
		`plateau_instrument_read_errors_total{instrument="ref",kind="timeout"} 3`,
		`plateau_instrument_last_value_pascals{instrument="ref"} 101325`,
		`plateau_instrument_last_read_timestamp_seconds{instrument="ref"} 1.7e+09`,
		`plateau_instrument_up{instrument="ref"} 1`,
		`plateau_instrument_settled{instrument="ref"} 1`,
		`plateau_points_captured_total 7`,
		`plateau_run_progress_ratio 0.25`,
		`plateau_run_state{state="running"} 1`,
		`plateau_run_state{state="paused"} 0`,
		`plateau_stream_viewers 0`,
		`plateau_build_info{version="test"} 1`,
		`go_goroutines`,
	} {
		if !strings.Contains(body, want+"\n") && !strings.Contains(body, want+" ") {
			t.Errorf("metrics lack %q", want)
		}
	}
	if t.Failed() {
		t.Log(body)
	}
}

func TestShutdownEndsStreams(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	errc := make(chan error, 1)
	connected := make(chan struct{})
	go func() {
		errc <- h.unix.Follow(ctx, FollowOptions{OnDisconnect: func(error, time.Duration) {
			select {
			case <-connected:
			default:
				close(connected)
			}
		}, MinBackoff: time.Hour}, func(store.Event) error { return nil })
	}()
	waitFor(t, func() bool { return metric(t, h.http, "plateau_stream_viewers") == "1" })
	start := time.Now()
	if err := h.srv.Shutdown(ctx); err != nil {
		t.Fatalf("shutdown with a stream open: %v", err)
	}
	select {
	case <-connected:
	case <-ctx.Done():
		t.Fatal("stream not ended by shutdown")
	}
	if d := time.Since(start); d > 2*time.Second {
		t.Fatalf("shutdown took %v with a stream open", d)
	}
	cancel()
	<-errc
}

func waitFor(t testing.TB, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(5 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatal("condition not met within 5 s")
		}
		time.Sleep(2 * time.Millisecond)
	}
}

// metric scrapes /metrics and returns the value of the series named.
func metric(t testing.TB, c *Client, series string) string {
	t.Helper()
	_, _, body := raw(t, c, "GET", "/metrics", "", "", "")
	for _, line := range strings.Split(body, "\n") {
		if v, ok := strings.CutPrefix(line, series+" "); ok {
			return v
		}
	}
	return ""
}

func TestAsConflict(t *testing.T) {
	base := fmt.Errorf("start: %w", os.ErrExist)
	err := AsConflict(base)
	if !errors.Is(err, ErrConflict) || !errors.Is(err, os.ErrExist) || err.Error() != base.Error() {
		t.Fatalf("AsConflict(%v) = %v", base, err)
	}
	if AsConflict(nil) != nil {
		t.Fatal("AsConflict(nil) is not nil")
	}
}
