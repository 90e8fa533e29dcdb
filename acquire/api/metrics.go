package api

import (
	"context"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"plateau/acquire/store"
	"plateau/analysis/units"
)

// scrapeTimeout bounds the status call behind one scrape.
const scrapeTimeout = 5 * time.Second

// statusCollector turns the engine's status into metrics at scrape time.
// The engine counts reads and failures once, for status and metrics alike,
// and never calls into Prometheus itself.
type statusCollector struct {
	status func(context.Context) Status

	reads, readErrors, lastValue, lastRead, up, settled *prometheus.Desc
	info, ambient                                       *prometheus.Desc
	points, progress, runState, lastRunState            *prometheus.Desc
	tripped, storeFault                                 *prometheus.Desc
}

var runStates = []store.State{store.StatePending, store.StateRunning, store.StatePaused,
	store.StateFinished, store.StateFailed, store.StateStopped}

func newStatusCollector(status func(context.Context) Status) *statusCollector {
	inst := []string{"instrument"}
	return &statusCollector{
		status: status,
		info: prometheus.NewDesc("plateau_instrument_info", "Always 1: which instrument reads which device under test (its identity; empty for the reference and the source), to join the other instrument metrics with.",
			[]string{"instrument", "role", "device"}, nil),
		reads:      prometheus.NewDesc("plateau_instrument_reads_total", "Read attempts per instrument since the daemon started, good or failed.", inst, nil),
		readErrors: prometheus.NewDesc("plateau_instrument_read_errors_total", "Failed reads per instrument and reason (timeout, link_down, bad_reply, out_of_range, overload).", []string{"instrument", "kind"}, nil),
		lastValue:  prometheus.NewDesc("plateau_instrument_last_value_pascals", "The last good reading in pascal of an instrument that reads a pressure (a barometer too; a temperature or humidity is in plateau_ambient).", inst, nil),
		ambient: prometheus.NewDesc("plateau_ambient", "An ambient instrument's last good reading in its quantity's base unit, whatever unit the instrument reads in: °C for temperature, %RH for humidity, Pa for barometric.",
			[]string{"instrument", "quantity"}, nil),
		lastRead:     prometheus.NewDesc("plateau_instrument_last_read_timestamp_seconds", "When the instrument's last good reading was taken (Unix time).", inst, nil),
		up:           prometheus.NewDesc("plateau_instrument_up", "1 when the instrument's last read succeeded.", inst, nil),
		settled:      prometheus.NewDesc("plateau_instrument_settled", "1 while the instrument's readings hold steady by the settle rule.", inst, nil),
		points:       prometheus.NewDesc("plateau_points_captured_total", "Comparison points captured since the daemon started.", nil, nil),
		progress:     prometheus.NewDesc("plateau_run_progress_ratio", "Share of the current run's planned points captured (0 when idle).", nil, nil),
		runState:     prometheus.NewDesc("plateau_run_state", "1 for the current run's state, 0 for the others; all 0 when idle.", []string{"state"}, nil),
		lastRunState: prometheus.NewDesc("plateau_last_run_state", "1 for the state the last run of this daemon ended in (finished, failed, stopped), 0 for the others; absent until a run has ended.", []string{"state"}, nil),
		tripped:      prometheus.NewDesc("plateau_safety_tripped", "1 while the safety guard is latched: no setpoint is sent until a person resumes or starts a run.", nil, nil),
		storeFault:   prometheus.NewDesc("plateau_store_fault", "1 while the store cannot write.", nil, nil),
	}
}

func (c *statusCollector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{c.info, c.reads, c.readErrors, c.lastValue, c.ambient, c.lastRead, c.up, c.settled, c.points, c.progress,
		c.runState, c.lastRunState, c.tripped, c.storeFault} {
		ch <- d
	}
}

func (c *statusCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), scrapeTimeout)
	defer cancel()
	st := c.status(ctx)
	for _, in := range st.Instruments {
		ch <- prometheus.MustNewConstMetric(c.info, prometheus.GaugeValue, 1, in.Name, in.Role, in.Device)
		ch <- prometheus.MustNewConstMetric(c.reads, prometheus.CounterValue, float64(in.Reads), in.Name)
		for kind, n := range in.Errors {
			ch <- prometheus.MustNewConstMetric(c.readErrors, prometheus.CounterValue, float64(n), in.Name, kind)
		}
		if !in.LastAt.IsZero() {
			if in.Role != RoleAmbient || in.Quantity == string(units.Barometric) {
				ch <- prometheus.MustNewConstMetric(c.lastValue, prometheus.GaugeValue, in.LastPa, in.Name)
			}
			if in.Role == RoleAmbient && in.Quantity != "" {
				ch <- prometheus.MustNewConstMetric(c.ambient, prometheus.GaugeValue, in.LastPa, in.Name, in.Quantity)
			}
			ch <- prometheus.MustNewConstMetric(c.lastRead, prometheus.GaugeValue, float64(in.LastAt.UnixNano())/1e9, in.Name)
		}
		ch <- prometheus.MustNewConstMetric(c.up, prometheus.GaugeValue, boolValue(in.Up), in.Name)
		ch <- prometheus.MustNewConstMetric(c.settled, prometheus.GaugeValue, boolValue(in.Settled), in.Name)
	}
	ch <- prometheus.MustNewConstMetric(c.points, prometheus.CounterValue, float64(st.PointsCaptured))
	ch <- prometheus.MustNewConstMetric(c.progress, prometheus.GaugeValue, st.Progress)
	for _, s := range runStates {
		ch <- prometheus.MustNewConstMetric(c.runState, prometheus.GaugeValue, boolValue(st.Run != nil && st.Run.State == s), string(s))
	}
	if st.Last != nil && !st.Last.Earlier {
		for _, s := range endStates {
			ch <- prometheus.MustNewConstMetric(c.lastRunState, prometheus.GaugeValue, boolValue(st.Last.State == string(s)), string(s))
		}
	}
	ch <- prometheus.MustNewConstMetric(c.tripped, prometheus.GaugeValue, boolValue(st.Trip != ""))
	ch <- prometheus.MustNewConstMetric(c.storeFault, prometheus.GaugeValue, boolValue(st.StoreFault != ""))
}

// endStates are the states a run ends in.
var endStates = []store.State{store.StateFinished, store.StateFailed, store.StateStopped}

// commitWatcher is what the store-commit metrics need; *store.Store has it.
type commitWatcher interface {
	WriterStatus() store.WriterStatus
}

// storeCollector reports the store writer's progress, so an alert can
// tell a store that stopped committing from one that is merely quiet.
type storeCollector struct {
	w                                           commitWatcher
	lastCommit, committed, failed, due, reopens *prometheus.Desc
}

// registerStoreMetrics adds the store writer's metrics to reg when the
// records come from a store that reports its writer (*store.Store does).
func registerStoreMetrics(reg prometheus.Registerer, rec Records) {
	w, ok := rec.(commitWatcher)
	if !ok {
		return
	}
	reg.MustRegister(&storeCollector{
		w:          w,
		lastCommit: prometheus.NewDesc("plateau_store_last_commit_timestamp_seconds", "When the store last committed a batch of samples and events (Unix time, acquisition clock); absent before the first commit.", nil, nil),
		committed:  prometheus.NewDesc("plateau_store_committed_total", "Samples and queued events committed since the daemon started.", nil, nil),
		failed:     prometheus.NewDesc("plateau_store_commit_failures_total", "Failed store commits since the daemon started (each is retried).", nil, nil),
		due:        prometheus.NewDesc("plateau_store_uncommitted", "Items taken for writing and not yet committed.", nil, nil),
		reopens:    prometheus.NewDesc("plateau_store_reopens_total", "Times the store writer closed and reopened its file to let bbolt drop its per-page bookkeeping.", nil, nil),
	})
}

func (c *storeCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- c.lastCommit
	ch <- c.committed
	ch <- c.failed
	ch <- c.due
	ch <- c.reopens
}

func (c *storeCollector) Collect(ch chan<- prometheus.Metric) {
	ws := c.w.WriterStatus()
	if !ws.LastCommit.IsZero() {
		ch <- prometheus.MustNewConstMetric(c.lastCommit, prometheus.GaugeValue, float64(ws.LastCommit.UnixNano())/1e9)
	}
	ch <- prometheus.MustNewConstMetric(c.committed, prometheus.CounterValue, float64(ws.Committed))
	ch <- prometheus.MustNewConstMetric(c.failed, prometheus.CounterValue, float64(ws.Failures))
	ch <- prometheus.MustNewConstMetric(c.due, prometheus.GaugeValue, float64(ws.Pending))
	ch <- prometheus.MustNewConstMetric(c.reopens, prometheus.CounterValue, float64(ws.Reopens))
}

func boolValue(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// streamMetrics count what the event stream does.
type streamMetrics struct {
	viewers  prometheus.Gauge
	sent     prometheus.Counter
	catchUps prometheus.Counter
}

// registerMetrics fills reg with the status collector, the stream's own
// metrics, build information and the Go runtime and process collectors.
func registerMetrics(reg *prometheus.Registry, version string, status func(context.Context) Status) *streamMetrics {
	m := &streamMetrics{
		viewers:  prometheus.NewGauge(prometheus.GaugeOpts{Name: "plateau_stream_viewers", Help: "Event streams open now."}),
		sent:     prometheus.NewCounter(prometheus.CounterOpts{Name: "plateau_stream_events_sent_total", Help: "Events written to stream viewers."}),
		catchUps: prometheus.NewCounter(prometheus.CounterOpts{Name: "plateau_stream_catchups_total", Help: "Times a viewer fell behind the live feed and was filled in from the store."}),
	}
	build := prometheus.NewGauge(prometheus.GaugeOpts{Name: "plateau_build_info", Help: "Always 1; the version is a label.",
		ConstLabels: prometheus.Labels{"version": version}})
	build.Set(1)
	reg.MustRegister(newStatusCollector(status), m.viewers, m.sent, m.catchUps, build,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}
