package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire"
	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/acquire/systemd"
	"plateau/config"
)

func init() { register(newServeCmd) }

// newReportRenderer, when set by the report command's file, renders a run's
// report for the API; while it is nil the report call answers 501.
var newReportRenderer func(*store.Store, *config.Config) api.RenderFunc

// Shutdown budget; the unit's TimeoutStopSec (20 s) must exceed their sum.
const (
	engineStopTimeout = 10 * time.Second
	apiStopTimeout    = 3 * time.Second
	statusEvery       = 10 * time.Second
)

func newServeCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "serve",
		Short: "Run the daemon: poll the instruments, run calibrations, serve the API",
		Long: `serve loads the configuration, opens the store, resumes an unfinished run and
serves the HTTP API on the unix socket (listen.socket, mode 0660) and, when
set, on listen.tcp. Under systemd it reports READY, STATUS and feeds the
watchdog while polling and storing make progress. SIGTERM or Ctrl-C stops
polling, flushes the store and leaves a run in progress resumable: the next
serve carries it on.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			cfg, err := config.Load(configPath)
			if err != nil {
				return err
			}
			log, err := newLogger(os.Stderr, stderrSetup(cfg.Log.Level, cfg.Log.Format))
			if err != nil {
				return err
			}
			libraryLogger = log
			if hasSource(cfg) {
				log.Warn(strings.ReplaceAll(safetyNotice, "\n", " "))
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
			defer stop()
			return serve(ctx, cfg, log)
		},
	}
}

// serve runs the daemon until ctx ends, then shuts down in order: the
// engine first (polling stops, the run is left resumable and the last
// events reach live viewers), then the API, then the store is flushed and
// closed.
func serve(ctx context.Context, cfg *config.Config, log *slog.Logger) (err error) {
	token := ""
	if cfg.Listen.TokenFile != "" {
		if token, err = api.LoadToken(cfg.Listen.TokenFile); err != nil {
			return err
		}
	}
	// The simulated rig, when configured, lives as long as the daemon.
	rigCtx, stopRig := context.WithCancel(context.WithoutCancel(ctx))
	defer stopRig()
	b, err := openBench(rigCtx, cfg, log)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := b.close(); cerr != nil {
			err = errors.Join(err, fmt.Errorf("close: %w", cerr))
		} else {
			log.Info("store flushed and closed", "path", cfg.Store.Path)
		}
	}()

	var render api.RenderFunc
	if newReportRenderer != nil {
		render = newReportRenderer(b.store, cfg)
	}
	ctl := &engineControl{eng: b.engine, st: b.store, cfg: cfg, since: time.Now(), render: render}
	srv, err := api.New(api.Options{
		Control: ctl, Records: b.store, Feed: busFeed{b.engine.Bus()}, Render: render,
		Token: token, Version: version, Logger: log.With("component", "api"), Hosts: listenHosts(cfg.Listen.TCP),
		Ready: b.engine.Healthy,
	})
	if err != nil {
		return err
	}
	listeners, err := listen(cfg.Listen, token)
	if err != nil {
		return err
	}

	engCtx, stopEngine := context.WithCancel(context.WithoutCancel(ctx))
	defer stopEngine()
	var wg sync.WaitGroup
	engineDone := make(chan struct{})
	go func() {
		defer close(engineDone)
		if err := b.engine.Serve(engCtx); err != nil {
			log.Error("engine stopped", "err", err)
		}
	}()

	failed := make(chan error, len(listeners))
	for _, l := range listeners {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if err := srv.Serve(l.l, l.access); err != nil {
				failed <- err
			}
		}()
		log.Info("serving the API", "address", l.l.Addr().String(), "access", l.access.String())
	}

	where := listeners[0].l.Addr().String()
	systemd.Ready("serving on " + where)
	wg.Add(2)
	go func() { defer wg.Done(); ctl.reportStatus(engCtx, log) }()
	go func() {
		defer wg.Done()
		wd := systemd.Watchdog{Probes: ctl.probes(), Log: log.With("component", "watchdog")}
		if err := wd.Run(engCtx); err != nil {
			log.Warn("watchdog not running", "err", err)
		}
	}()

	var serveErr error
	select {
	case <-ctx.Done():
		log.Info("stopping", "reason", context.Cause(ctx))
	case serveErr = <-failed:
		log.Error("API listener failed; stopping", "err", serveErr)
	}
	run := ctl.currentRun()
	msg := "stopping"
	if run != "" {
		msg = "stopping; run " + run + " stays resumable"
	}
	systemd.Stopping(msg)
	stopEngine()
	select {
	case <-engineDone:
	case <-time.After(engineStopTimeout):
		log.Error("engine did not stop in time; closing the store anyway", "timeout_seconds", engineStopTimeout.Seconds())
	}
	shutCtx, cancel := context.WithTimeout(context.Background(), apiStopTimeout)
	defer cancel()
	if err := srv.Shutdown(shutCtx); err != nil {
		log.Warn("API shutdown", "err", err)
	}
	wg.Wait()
	if run != "" {
		log.Info("run left resumable; the next start carries it on", "run", run)
	}
	return serveErr
}

type listener struct {
	l      net.Listener
	access api.Access
}

// listen opens the unix socket and, when configured, the TCP address.
func listen(cfg config.Listen, token string) ([]listener, error) {
	var out []listener
	closeAll := func() {
		for _, l := range out {
			l.l.Close()
		}
	}
	if cfg.Socket != "" {
		// Outside systemd the runtime directory may not exist yet.
		if err := os.MkdirAll(filepath.Dir(cfg.Socket), 0o750); err != nil {
			return nil, fmt.Errorf("listen.socket: %w", err)
		}
		l, err := api.ListenUnix(cfg.Socket)
		if err != nil {
			return nil, fmt.Errorf("listen.socket: %w", err)
		}
		out = append(out, listener{l, api.Local})
	}
	if cfg.TCP != "" {
		l, access, err := api.ListenTCP(cfg.TCP, cfg.AllowRemote, token)
		if err != nil {
			closeAll()
			return nil, fmt.Errorf("listen.tcp: %w", err)
		}
		out = append(out, listener{l, access})
	}
	if len(out) == 0 {
		return nil, errors.New("listen: give listen.socket or listen.tcp")
	}
	return out, nil
}

// busFeed adapts the engine's event bus to the API's Feed.
type busFeed struct{ bus *acquire.Bus }

func (f busFeed) Subscribe(buffer int) (<-chan store.Event, func()) {
	s := f.bus.Subscribe(buffer)
	return s.C, s.Close
}

// engineControl adapts the engine to the API's Control.
type engineControl struct {
	eng    *acquire.Engine
	st     *store.Store
	cfg    *config.Config
	since  time.Time
	render api.RenderFunc // nil: no reports here

	mu         sync.Mutex
	verdicts   map[string]string // by run id: an ended run's points never change
	stored     *api.LastRun      // the newest ended run of the store at start-up
	storedRead bool

	lengthOnce sync.Once
	length     planLength
}

// planLength is the least and the most time the configured plan takes.
type planLength struct {
	least, most time.Duration
	timed       bool
}

// planned works out the plan's length once: the configuration, and so the
// plan, is fixed for the daemon's life, and status is asked every few
// seconds (service status, metrics, the live page), each time planning all
// the steps again otherwise (megabytes for a plan of 1000 cycles).
func (c *engineControl) planned() planLength {
	c.lengthOnce.Do(func() { c.length.least, c.length.most, c.length.timed = runLength(c.cfg) })
	return c.length
}

func (c *engineControl) currentRun() string { return c.eng.Status().Run }

func (c *engineControl) Status(context.Context) api.Status { return c.status(true) }

// status is what the daemon reports; withPlan adds every step of the plan,
// which the service status line, built every 10 s, does without.
func (c *engineControl) status(withPlan bool) api.Status {
	es := c.eng.Status()
	out := api.Status{Version: version, Since: c.since, PointsCaptured: es.PointsCommitted, Unit: c.cfg.Device.Unit,
		Trip: es.Trip, StoreFault: es.StoreFault}
	if es.Run != "" {
		out.State, out.Reason = es.State, es.Reason
	}
	if es.Last != nil {
		out.Last = &api.LastRun{ID: es.Last.Run, State: es.Last.State, Reason: es.Last.Reason, Verdict: c.verdict(es.Last.Run)}
	} else if es.Run == "" {
		out.Last = c.lastStored()
	}
	if es.TotalPoints > 0 {
		out.Progress = float64(es.Points) / float64(es.TotalPoints)
	}
	if es.Run != "" {
		if id, err := store.ParseRunID(es.Run); err == nil {
			if r, err := c.st.Run(id); err == nil {
				info := api.Info(r)
				out.Run = &info
			}
		}
		out.Step = fmt.Sprintf("step %d of %d, %d of %d points", es.Step+1, es.Steps, es.Points, es.TotalPoints)
		if es.Steps == 0 { // free mode: no plan
			out.Step = fmt.Sprintf("%d points captured", es.Points)
		}
		if es.Phase != "" {
			out.Step += ": " + es.Phase
		}
	}
	c.describePlan(&out, es, withPlan)
	roles, ids, quantities := map[string]string{}, map[string]string{}, map[string]string{}
	for _, in := range c.cfg.Instruments {
		roles[in.Name] = in.Role
		if a, ok := config.AmbientOf(in); ok {
			quantities[in.Name] = string(a.Kind)
		}
		if in.Role == config.RoleSource {
			out.Source = true
		}
	}
	for _, d := range c.cfg.Devices {
		ids[d.Instrument] = d.Device.ID
	}
	for _, p := range es.Instruments {
		// An instrument read by a person is not down while it waits for
		// an entry.
		up := (p.Reads > 0 && p.LastErr == "") || (!es.Polled[p.Name] && p.LastErr == "")
		out.Instruments = append(out.Instruments, api.InstrumentInfo{
			Name: p.Name, Role: roles[p.Name], Up: up,
			Reads: p.Reads, Errors: p.Failures, LastPa: p.Last.Pa, LastAt: p.Last.Time,
			Settled: p.Settled, LastError: p.LastErr, ReadsPerSecond: p.ReadsPerSecond, AskedPerSecond: p.Asked,
			Device: ids[p.Name], Raw: p.Last.Raw, RawUnit: p.Last.RawUnit, Why: p.Why, Waiting: p.Waiting,
			Quantity: quantities[p.Name],
		})
	}
	return out
}

// describePlan adds the plan (withPlan), its expected duration, the settle rule and
// where the run is; times are wall time, so a simulated bench that runs its
// clock faster shows how long a person waits.
func (c *engineControl) describePlan(out *api.Status, es acquire.Status, withPlan bool) {
	wall := func(d time.Duration) float64 { return d.Seconds() / c.speed() }
	if withPlan {
		steps := c.eng.Plan()
		out.Plan = make([]api.PlanStep, 0, len(steps))
		for _, st := range steps {
			out.Plan = append(out.Plan, api.PlanStep{Kind: string(st.Kind), Cycle: st.Cycle, Direction: string(st.Direction),
				TargetPa: st.TargetPa, What: st.String()})
		}
	}
	if p := c.planned(); p.timed {
		out.ExpectedSeconds, out.ExpectedMostSeconds = wall(p.least), wall(p.most)
	}
	rule := c.cfg.Procedure.Settle
	out.Settle = &api.SettleRule{WindowSeconds: rule.Window.Seconds(), MaxDriftPaPerS: rule.MaxDriftPaPerS,
		MaxSpreadPa: rule.MaxSpreadPa, BandPa: rule.BandPa}
	if es.Run == "" {
		return
	}
	out.StateSince, out.Held = es.Since, es.Held
	out.Current = &api.StepNow{Index: es.Step, Of: es.Steps, Phase: es.Phase, TargetPa: es.TargetPa, Estimated: es.Estimated}
	if es.Estimated {
		out.Current.StepLeftSeconds, out.Current.RunLeftSeconds = wall(es.StepLeft), wall(es.RunLeft)
	}
}

// lastStored is the newest run of the store that has ended, for a daemon
// that has run none itself (status after a restart still shows it).
// It is read once: until this daemon ends a run, no other one can.
func (c *engineControl) lastStored() *api.LastRun {
	c.mu.Lock()
	done, last := c.storedRead, c.stored
	c.mu.Unlock()
	if done {
		return last
	}
	if runs, err := c.st.Runs(); err == nil {
		for i := len(runs) - 1; i >= 0; i-- {
			if r := runs[i]; r.State.Terminal() {
				id := r.ID.String()
				last = &api.LastRun{ID: id, State: string(r.State), Reason: r.Reason, Verdict: c.verdict(id), Earlier: true}
				break
			}
		}
	}
	c.mu.Lock()
	c.stored, c.storedRead = last, true
	c.mu.Unlock()
	return last
}

// verdict is the decision of an ended run, read from its report once;
// empty when it has none (no points, no report renderer).
func (c *engineControl) verdict(id string) string {
	c.mu.Lock()
	defer c.mu.Unlock()
	if v, ok := c.verdicts[id]; ok {
		return v
	}
	v := ""
	var b bytes.Buffer
	if c.render != nil && c.render("json", &b, id, "") == nil {
		v = verdictOf(b.Bytes())
	}
	if c.verdicts == nil {
		c.verdicts = map[string]string{}
	}
	c.verdicts[id] = v
	return v
}

// verdictOf reads the decision from a report in JSON: one object, or an
// array of them when the run calibrated several devices.
func verdictOf(report []byte) string {
	type one struct {
		Info struct {
			Device struct {
				ID string `json:"id"`
			} `json:"device"`
		} `json:"info"`
		Result struct {
			Decision string `json:"decision"`
		} `json:"result"`
	}
	var single one
	if json.Unmarshal(report, &single) == nil {
		return single.Result.Decision
	}
	var several []one
	if json.Unmarshal(report, &several) != nil {
		return ""
	}
	parts := make([]string, 0, len(several))
	for _, d := range several {
		parts = append(parts, strings.TrimSpace(d.Info.Device.ID+" "+d.Result.Decision))
	}
	return strings.Join(parts, ", ")
}

// speed is how much faster than the wall the acquisition clock runs: the
// simulated bench's speed, else 1.
func (c *engineControl) speed() float64 {
	if usesSimulator(c.cfg) && c.cfg.Simulator.Speed > 1 {
		return c.cfg.Simulator.Speed
	}
	return 1
}

func (c *engineControl) Start(_ context.Context, req api.StartRequest) (store.RunID, error) {
	id, err := c.eng.StartWith(req.Label, acquire.CertificateFields{Number: req.Certificate, Customer: req.Customer, Operator: req.Operator})
	if err != nil {
		// Start refuses for reasons of state (a run is active, the
		// reference's calibration has expired); its messages say which.
		return 0, api.AsConflict(err)
	}
	return id, nil
}

func (c *engineControl) Stop(_ context.Context, reason string) error {
	return refusal(c.eng.Stop(reason))
}

// Pause and resume are refused for reasons of state (no run, a store that
// cannot write); their messages say which.
func (c *engineControl) Pause(context.Context) error  { return conflict(c.eng.Pause()) }
func (c *engineControl) Resume(context.Context) error { return conflict(c.eng.Resume()) }

func conflict(err error) error {
	if err == nil {
		return nil
	}
	return api.AsConflict(err)
}

func (c *engineControl) Enter(_ context.Context, e api.Entry) error {
	if err := c.eng.Enter(acquire.Entry{Device: e.Device, Value: e.Value, Unit: e.Unit, Confirmed: e.Confirm}); err != nil {
		// The API has checked the value and unit; what is left is the
		// bench's state: no step waits, an entry needs confirming, or this
		// bench takes no operator readings.
		return api.AsConflict(err)
	}
	return nil
}

// refusal marks "no run is active" as a conflict, not a failure.
func refusal(err error) error {
	if errors.Is(err, acquire.ErrNoRun) {
		return api.AsConflict(err)
	}
	return err
}

// reportStatus keeps the line `systemctl status plateau` shows current.
func (c *engineControl) reportStatus(ctx context.Context, log *slog.Logger) {
	last := ""
	for {
		st := c.status(false)
		line := "idle"
		if st.Run != nil {
			line = fmt.Sprintf("run %s %s, %s", st.Run.ID, st.Run.State, st.Step)
		}
		for _, in := range st.Instruments {
			if !in.Up {
				line += "; " + in.Name + " not answering"
			}
		}
		if line != last {
			if err := systemd.Status(line); err != nil {
				log.Debug("status not sent", "err", err)
			}
			last = line
		}
		select {
		case <-ctx.Done():
			return
		case <-time.After(statusEvery):
		}
	}
}

// probes are what the watchdog checks: each polled instrument's loop (an
// unplugged instrument still iterates; a wedged loop does not) and the
// store writer (idle, or committing its queue).
func (c *engineControl) probes() []systemd.Probe {
	var out []systemd.Probe
	st := c.eng.Status()
	for _, in := range st.Instruments {
		if !st.Polled[in.Name] {
			continue
		}
		name := in.Name
		out = append(out, systemd.Probe{Name: "poll loop of " + name, Last: func() time.Time {
			for _, p := range c.eng.Status().Instruments {
				if p.Name == name {
					if p.Beat.IsZero() {
						return c.since // not polled yet: judge from the start
					}
					return p.Beat
				}
			}
			return time.Time{}
		}})
	}
	// While a run is active samples flow and the writer commits every
	// flush interval; when idle it has nothing to do unless it failed. A
	// store fault the engine has taken in hand (the source vented, the run
	// paused, status saying why) is not a wedged daemon: a restart would
	// not free the disk.
	out = append(out, systemd.Probe{Name: "store writer", Last: func() time.Time {
		ws := c.st.WriterStatus()
		if (ws.Err == nil && c.currentRun() == "") || c.eng.Healthy() != nil {
			return time.Now()
		}
		if ws.LastCommit.Before(c.since) {
			return c.since // no commit yet since start
		}
		return ws.LastCommit
	}})
	return out
}

// listenHosts are the Host names a TCP caller may use besides loopback: the
// configured listen address's host, when it names one.
func listenHosts(addr string) []string {
	host, _, err := net.SplitHostPort(addr)
	if err != nil || host == "" {
		return nil
	}
	return []string{host}
}
