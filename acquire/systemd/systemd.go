// Package systemd tells systemd how the daemon is doing: READY once it
// serves, STATUS lines for `systemctl status`, STOPPING on the way out, and
// WATCHDOG pings only while the parts that do the work show recent progress,
// so a wedged poll loop or store writer gets the process restarted. Outside
// systemd (no NOTIFY_SOCKET) every call does nothing.
package systemd

import (
	"context"
	"fmt"
	"log/slog"
	"strings"
	"time"

	"github.com/coreos/go-systemd/v22/daemon"

	"plateau/drivers/clock"
)

// Ready says start-up is complete, with a status line.
func Ready(status string) error { return notify(daemon.SdNotifyReady, status) }

// Status updates the line `systemctl status` shows.
func Status(status string) error { return notify("", status) }

// Stopping says shutdown has begun, with a status line.
func Stopping(status string) error { return notify(daemon.SdNotifyStopping, status) }

func notify(state, status string) error {
	var lines []string
	if state != "" {
		lines = append(lines, state)
	}
	if status != "" {
		// A newline would start a new assignment in the datagram.
		lines = append(lines, "STATUS="+strings.ReplaceAll(status, "\n", " "))
	}
	if _, err := daemon.SdNotify(false, strings.Join(lines, "\n")); err != nil {
		return fmt.Errorf("notify systemd: %w", err)
	}
	return nil
}

// Probe is one part of the daemon that must keep making progress.
type Probe struct {
	Name string
	// Last returns when the part last completed a cycle of its loop (on
	// the watchdog's clock) — an iteration, not a success: a poll loop
	// whose instrument is unplugged still iterates, and the daemon should
	// run degraded rather than be restarted for it.
	Last func() time.Time
}

// Watchdog feeds systemd's watchdog while every probe is fresh.
type Watchdog struct {
	// Interval is WatchdogSec; zero asks systemd (WATCHDOG_USEC) and
	// makes Run return at once when the watchdog is off.
	Interval time.Duration
	// MaxAge is how old a probe's last progress may be (default Interval/2).
	MaxAge time.Duration
	Probes []Probe
	Clock  clock.Clock // default wall
	Log    *slog.Logger
}

// Run pings every Interval/2 while all probes are fresh, until ctx ends.
// When a probe goes stale it stops pinging and says which one in the
// status line; systemd then kills and restarts the daemon once Interval
// passes without a ping. Progress that resumes in time resumes the pings.
func (w Watchdog) Run(ctx context.Context) error {
	if w.Interval <= 0 {
		iv, err := daemon.SdWatchdogEnabled(false)
		if err != nil {
			return fmt.Errorf("watchdog: %w", err)
		}
		if iv <= 0 {
			return nil
		}
		w.Interval = iv
	}
	if w.MaxAge <= 0 {
		w.MaxAge = w.Interval / 2
	}
	if w.Clock == nil {
		w.Clock = clock.Wall{}
	}
	if w.Log == nil {
		w.Log = slog.New(slog.DiscardHandler)
	}
	wasStale := ""
	for {
		// A wait and the end of ctx can both be ready; select picks either,
		// so stopping is checked here too.
		if ctx.Err() != nil {
			return nil
		}
		if stale := w.stale(); stale != "" {
			if stale != wasStale {
				w.Log.Error("watchdog: no progress, pings withheld; systemd will restart the daemon", "part", stale, "max_age_seconds", w.MaxAge.Seconds())
				Status("no progress from " + stale)
			}
			wasStale = stale
		} else {
			if wasStale != "" {
				w.Log.Info("watchdog: progress again, pings resumed", "part", wasStale)
				wasStale = ""
			}
			if _, err := daemon.SdNotify(false, daemon.SdNotifyWatchdog); err != nil {
				w.Log.Warn("watchdog ping failed", "err", err)
			}
		}
		select {
		case <-ctx.Done():
			return nil
		case <-w.Clock.After(w.Interval / 2):
		}
	}
}

// stale names the probes whose last progress is older than MaxAge.
func (w Watchdog) stale() string {
	now := w.Clock.Now()
	var names []string
	for _, p := range w.Probes {
		if now.Sub(p.Last()) > w.MaxAge {
			names = append(names, p.Name)
		}
	}
	return strings.Join(names, ", ")
}
