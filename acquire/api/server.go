package api

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"plateau/acquire/store"
	"plateau/analysis"
)

// Defaults for Options fields left zero.
const (
	DefaultMaxBody      = 64 << 10
	DefaultKeepalive    = 15 * time.Second
	DefaultStreamBuffer = 256
	DefaultMaxViewers   = 64
)

// Options wire a Server. Control, Records and Feed are required.
type Options struct {
	Control Control
	Records Records
	Feed    Feed
	// Render writes reports; when nil the report call answers 501.
	Render RenderFunc
	// Token is the bearer token TCP callers present. When empty, TCP
	// callers can only read and only on loopback.
	Token   string
	Version string
	Logger  *slog.Logger
	// Ready reports whether the daemon can do its job (e.g. the store is
	// writable); nil means always ready. A missing instrument is not
	// unreadiness: that shows in status and metrics.
	Ready func() error
	// MaxBody caps request bodies in bytes (default 64 KiB).
	MaxBody int64
	// Keepalive is the pause after which an idle event stream gets a
	// comment line, so proxies and SSH tunnels keep it open (default 15 s).
	Keepalive time.Duration
	// StreamBuffer is each viewer's live buffer in events (default 256).
	StreamBuffer int
	// MaxViewers caps the event streams open at once (default 64); one
	// more is refused with 503 and the reason.
	MaxViewers int
	// Hosts are further names a TCP caller may put in its Host header
	// besides the loopback names and the listener's own address (the
	// configured address, a host name of the bench PC). Any other Host is
	// refused, so that a web page elsewhere cannot reach the API through
	// DNS rebinding.
	Hosts []string
}

// Access says how far callers on a listener are trusted.
type Access int

const (
	// Local: the unix socket; its file mode (0660) is the guard.
	Local Access = iota + 1
	// Loopback: TCP on 127.0.0.1/::1; reads are open, changes need the token.
	Loopback
	// Remote: TCP on any other address; every call but /healthz needs the token.
	Remote
)

func (a Access) String() string {
	switch a {
	case Local:
		return "unix socket"
	case Loopback:
		return "loopback TCP"
	case Remote:
		return "remote TCP"
	}
	return fmt.Sprintf("access(%d)", int(a))
}

// Server serves the API on any number of listeners.
type Server struct {
	o       Options
	log     *slog.Logger
	reg     *prometheus.Registry
	stream  *streamMetrics
	status  func(context.Context) Status // the control's, ambient quantities named
	stopped chan struct{}                // closed by Shutdown: ends event streams
	viewers atomic.Int64                 // event streams open now

	mu      sync.Mutex
	servers []*http.Server
	stop    sync.Once
}

// New checks the options and builds a server with its metrics registry.
func New(o Options) (*Server, error) {
	var missing []string
	if o.Control == nil {
		missing = append(missing, "Control")
	}
	if o.Records == nil {
		missing = append(missing, "Records")
	}
	if o.Feed == nil {
		missing = append(missing, "Feed")
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("api: options lack %s", strings.Join(missing, ", "))
	}
	if o.MaxBody <= 0 {
		o.MaxBody = DefaultMaxBody
	}
	if o.Keepalive <= 0 {
		o.Keepalive = DefaultKeepalive
	}
	if o.MaxViewers <= 0 {
		o.MaxViewers = DefaultMaxViewers
	}
	if o.StreamBuffer <= 0 {
		o.StreamBuffer = DefaultStreamBuffer
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	s := &Server{o: o, log: o.Logger, reg: prometheus.NewRegistry(), stopped: make(chan struct{})}
	s.status = statusOf(o.Control)
	s.stream = registerMetrics(s.reg, o.Version, s.status)
	registerStoreMetrics(s.reg, o.Records)
	return s, nil
}

// Serve answers calls arriving on l with the given trust until Shutdown.
// It returns nil after Shutdown.
func (s *Server) Serve(l net.Listener, access Access) error {
	h := s.Handler(access)
	if access != Local {
		h = s.hostGuard(l.Addr(), h)
	}
	hs := &http.Server{
		Handler:           h,
		ReadHeaderTimeout: 5 * time.Second,
		ReadTimeout:       30 * time.Second,
		WriteTimeout:      60 * time.Second, // event streams lift it for themselves
		IdleTimeout:       2 * time.Minute,
		MaxHeaderBytes:    16 << 10,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelDebug),
	}
	s.mu.Lock()
	select {
	case <-s.stopped:
		s.mu.Unlock()
		l.Close()
		return nil
	default:
	}
	s.servers = append(s.servers, hs)
	s.mu.Unlock()
	if err := hs.Serve(l); !errors.Is(err, http.ErrServerClosed) {
		return fmt.Errorf("serve %s on %s: %w", access, l.Addr(), err)
	}
	return nil
}

// Shutdown ends event streams, stops accepting calls and waits for calls in
// flight until ctx ends.
func (s *Server) Shutdown(ctx context.Context) error {
	s.stop.Do(func() { close(s.stopped) })
	s.mu.Lock()
	servers := s.servers
	s.mu.Unlock()
	var errs []error
	for _, hs := range servers {
		if err := hs.Shutdown(ctx); err != nil {
			errs = append(errs, err)
		}
	}
	return errors.Join(errs...)
}

// hostGuard answers only calls whose Host header names this listener: a
// loopback name, the listener's address or one of Options.Hosts.
func (s *Server) hostGuard(addr net.Addr, next http.Handler) http.Handler {
	allowed := map[string]bool{"localhost": true, "127.0.0.1": true, "::1": true}
	if host, _, err := net.SplitHostPort(addr.String()); err == nil {
		allowed[strings.ToLower(host)] = true
	}
	for _, h := range s.o.Hosts {
		allowed[strings.ToLower(strings.Trim(h, "[]"))] = true
	}
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		host := r.Host
		if h, _, err := net.SplitHostPort(host); err == nil {
			host = h
		}
		host = strings.ToLower(strings.Trim(host, "[]"))
		if !allowed[host] {
			s.log.Warn("call refused: Host header names another server", "host", r.Host, "remote", r.RemoteAddr)
			writeProblem(w, http.StatusMisdirectedRequest, fmt.Sprintf("Host %q is not this daemon's address: use localhost or the configured address", r.Host))
			return
		}
		next.ServeHTTP(w, r)
	})
}

// Handler returns the routes guarded for callers with the given trust.
func (s *Server) Handler(access Access) http.Handler {
	mux := http.NewServeMux()
	read := func(pattern string, h http.HandlerFunc) { mux.Handle(pattern, s.guard(access, false, h)) }
	change := func(pattern string, h http.HandlerFunc) { mux.Handle(pattern, s.guard(access, true, h)) }

	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) {
		writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
	})
	read("GET /readyz", s.handleReady)
	read("GET /metrics", promhttp.HandlerFor(s.reg, promhttp.HandlerOpts{
		ErrorLog: slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
	}).ServeHTTP)
	read("GET /api/v1/status", s.handleStatus)
	read("GET /api/v1/runs", s.handleRuns)
	read("GET /api/v1/runs/{id}", s.handleRun)
	read("GET /api/v1/runs/{id}/points", s.handlePoints)
	read("GET /api/v1/runs/{id}/report", s.handleReport)
	read("GET /api/v1/events", s.handleEvents)
	read("GET /api/v1/backup", s.handleBackup)
	read("GET /api/v1/runs/{id}/samples", s.handleSamples)
	read("GET /api/v1/units", s.handleUnits)
	read("GET /{$}", s.handlePage)
	read("GET /page/{file...}", s.handlePage)
	change("POST /api/v1/start", s.handleStart)
	change("POST /api/v1/stop", s.handleStop)
	change("POST /api/v1/pause", s.simple(s.o.Control.Pause))
	change("POST /api/v1/resume", s.simple(s.o.Control.Resume))
	change("POST /api/v1/entry", s.handleEntry)
	return s.logged(jsonMisses(mux))
}

// jsonMisses answers calls that match no route (404) or use the wrong
// method (405, with the mux's Allow header) in JSON like every other reply.
func jsonMisses(mux *http.ServeMux) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if _, pattern := mux.Handler(r); pattern != "" {
			mux.ServeHTTP(w, r)
			return
		}
		mux.ServeHTTP(&missWriter{ResponseWriter: w, r: r}, r)
	})
}

// missWriter replaces the mux's plain-text refusal with a JSON one.
type missWriter struct {
	http.ResponseWriter
	r       *http.Request
	written bool
}

func (m *missWriter) WriteHeader(code int) {
	m.written = true
	m.Header().Del("X-Content-Type-Options")
	msg := "no such call: " + m.r.Method + " " + m.r.URL.Path + " (see the README's HTTP API section)"
	if code == http.StatusMethodNotAllowed {
		msg = fmt.Sprintf("%s %s: method not allowed; use %s", m.r.Method, m.r.URL.Path, m.Header().Get("Allow"))
	}
	writeProblem(m.ResponseWriter, code, msg)
}

func (m *missWriter) Write(b []byte) (int, error) {
	if !m.written {
		m.WriteHeader(http.StatusOK)
	}
	return len(b), nil // the mux's own text is dropped
}

// logged writes one debug line per call.
func (s *Server) logged(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		start := time.Now()
		rec := &statusRecorder{ResponseWriter: w, status: http.StatusOK}
		next.ServeHTTP(rec, r)
		s.log.Debug("api call", "method", r.Method, "path", r.URL.Path, "status", rec.status,
			"duration_seconds", time.Since(start).Seconds())
	})
}

type statusRecorder struct {
	http.ResponseWriter
	status int
}

func (r *statusRecorder) WriteHeader(code int) {
	r.status = code
	r.ResponseWriter.WriteHeader(code)
}

// Unwrap lets http.ResponseController reach Flush and deadlines.
func (r *statusRecorder) Unwrap() http.ResponseWriter { return r.ResponseWriter }

func (s *Server) handleReady(w http.ResponseWriter, _ *http.Request) {
	if s.o.Ready != nil {
		if err := s.o.Ready(); err != nil {
			s.log.Warn("not ready", "err", err)
			writeProblem(w, http.StatusServiceUnavailable, "not ready: "+err.Error())
			return
		}
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "ready"})
}

func (s *Server) handleStatus(w http.ResponseWriter, r *http.Request) {
	st := s.status(r.Context())
	last, err := s.o.Records.LastEventID()
	if err != nil {
		s.fail(w, fmt.Errorf("status: last event id: %w", err))
		return
	}
	st.LastEventID = last
	if st.Instruments == nil {
		st.Instruments = []InstrumentInfo{}
	}
	writeJSON(w, http.StatusOK, st)
}

func (s *Server) handleRuns(w http.ResponseWriter, _ *http.Request) {
	runs, err := s.o.Records.Runs()
	if err != nil {
		s.fail(w, err)
		return
	}
	out := make([]RunInfo, len(runs))
	for i, r := range runs {
		out[i] = Info(r)
	}
	writeJSON(w, http.StatusOK, map[string]any{"runs": out})
}

// runID reads the {id} path segment; "last" names the newest run.
func (s *Server) runID(r *http.Request) (store.RunID, error) {
	raw := r.PathValue("id")
	if raw == "last" {
		runs, err := s.o.Records.Runs()
		if err != nil {
			return 0, err
		}
		if len(runs) == 0 {
			return 0, fmt.Errorf("run last: there are no runs yet: %w", ErrNotFound)
		}
		return runs[len(runs)-1].ID, nil
	}
	return store.ParseRunID(raw) // its error is a store.ErrBadInput: 400
}

func (s *Server) handleRun(w http.ResponseWriter, r *http.Request) {
	id, err := s.runID(r)
	if err != nil {
		s.fail(w, err)
		return
	}
	run, err := s.o.Records.Run(id)
	if err != nil {
		s.fail(w, err)
		return
	}
	pts, err := s.o.Records.Points(id)
	if err != nil {
		s.fail(w, err)
		return
	}
	writeJSON(w, http.StatusOK, RunDetail{RunInfo: Info(run), Points: len(pts), Config: string(run.Config)})
}

func (s *Server) handlePoints(w http.ResponseWriter, r *http.Request) {
	id, err := s.runID(r)
	if err != nil {
		s.fail(w, err)
		return
	}
	pts, err := s.o.Records.Points(id)
	if err != nil {
		s.fail(w, err)
		return
	}
	if pts == nil {
		pts = []analysis.Point{}
	}
	writeJSON(w, http.StatusOK, map[string]any{"run": id.String(), "points": pts})
}

// reportTypes maps report formats to their media types.
var reportTypes = map[string]string{
	"json": "application/json",
	"csv":  "text/csv; charset=utf-8",
	"html": "text/html; charset=utf-8",
}

func (s *Server) handleReport(w http.ResponseWriter, r *http.Request) {
	format := r.URL.Query().Get("format")
	ctype, ok := reportTypes[format]
	if !ok {
		writeProblem(w, http.StatusBadRequest, fmt.Sprintf("query parameter format=%q: use json, csv or html", format))
		return
	}
	id, err := s.runID(r)
	if err != nil {
		s.fail(w, err)
		return
	}
	if _, err := s.o.Records.Run(id); err != nil {
		s.fail(w, err)
		return
	}
	if s.o.Render == nil {
		writeProblem(w, http.StatusNotImplemented, "reports are not available from this daemon")
		return
	}
	// Render to memory first, so a failure still gets a proper status.
	var buf bytes.Buffer
	device := r.URL.Query().Get("device")
	if err := s.o.Render(format, &buf, id.String(), device); err != nil {
		s.fail(w, fmt.Errorf("report %s as %s: %w", id, format, err))
		return
	}
	w.Header().Set("Content-Type", ctype)
	w.Header().Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", id.String()+"."+format))
	w.Header().Set("Content-Length", strconv.Itoa(buf.Len()))
	w.WriteHeader(http.StatusOK)
	w.Write(buf.Bytes())
}

func (s *Server) handleStart(w http.ResponseWriter, r *http.Request) {
	var req StartRequest
	if !s.decode(w, r, &req, false) {
		return
	}
	if err := req.validate(); err != nil {
		s.fail(w, err)
		return
	}
	for _, f := range []struct{ name, v string }{{"certificate", req.Certificate}, {"customer", req.Customer}, {"operator", req.Operator}} {
		if err := checkText(f.name, f.v); err != nil {
			s.fail(w, err)
			return
		}
	}
	id, err := s.o.Control.Start(r.Context(), req)
	if err != nil {
		s.fail(w, err)
		return
	}
	w.Header().Set("Location", "/api/v1/runs/"+id.String())
	writeJSON(w, http.StatusCreated, Started{Run: id.String()})
}

func (s *Server) handleStop(w http.ResponseWriter, r *http.Request) {
	var req StopRequest
	if !s.decode(w, r, &req, false) {
		return
	}
	if err := checkText("reason", req.Reason); err != nil {
		s.fail(w, err)
		return
	}
	if err := s.o.Control.Stop(r.Context(), req.Reason); err != nil {
		s.fail(w, err)
		return
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "stopped"})
}

// simple serves a change that takes no body (pause, resume).
func (s *Server) simple(do func(context.Context) error) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		var none struct{}
		if !s.decode(w, r, &none, false) {
			return
		}
		if err := do(r.Context()); err != nil {
			s.fail(w, err)
			return
		}
		writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
	}
}

func (s *Server) handleEntry(w http.ResponseWriter, r *http.Request) {
	var body entryBody
	if !s.decode(w, r, &body, true) {
		return
	}
	e, err := body.entry()
	if err != nil {
		s.fail(w, err)
		return
	}
	if err := s.o.Control.Enter(r.Context(), e); err != nil {
		s.fail(w, err)
		return
	}
	writeJSON(w, http.StatusAccepted, map[string]string{"status": "accepted"})
}

// fail answers with the status err calls for. Client mistakes get their
// message; anything else is logged and answered without detail.
func (s *Server) fail(w http.ResponseWriter, err error) {
	switch {
	case errors.Is(err, ErrNotFound), errors.Is(err, store.ErrNoRun):
		writeProblem(w, http.StatusNotFound, err.Error())
	case errors.Is(err, ErrConflict), errors.Is(err, store.ErrRunEnded):
		writeProblem(w, http.StatusConflict, err.Error())
	case errors.Is(err, ErrInvalid), errors.Is(err, store.ErrBadInput):
		writeProblem(w, http.StatusBadRequest, err.Error())
	case errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		writeProblem(w, http.StatusServiceUnavailable, "the daemon did not finish the call in time")
	default:
		s.log.Error("api call failed", "err", err)
		writeProblem(w, http.StatusInternalServerError, "internal error (see the daemon's log)")
	}
}
