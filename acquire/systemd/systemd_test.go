package systemd

import (
	"context"
	"net"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"testing"
	"time"
)

// listenNotify stands in for systemd: a unixgram socket named by
// NOTIFY_SOCKET, as sd_notify(3) describes.
func listenNotify(t *testing.T) *net.UnixConn {
	t.Helper()
	path := filepath.Join(t.TempDir(), "notify.sock")
	conn, err := net.ListenUnixgram("unixgram", &net.UnixAddr{Name: path, Net: "unixgram"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	t.Setenv("NOTIFY_SOCKET", path)
	return conn
}

func receive(t *testing.T, conn *net.UnixConn) string {
	t.Helper()
	conn.SetReadDeadline(time.Now().Add(5 * time.Second))
	buf := make([]byte, 4096)
	n, err := conn.Read(buf)
	if err != nil {
		t.Fatalf("no notification: %v", err)
	}
	return string(buf[:n])
}

func TestNotifications(t *testing.T) {
	conn := listenNotify(t)
	cases := []struct {
		name string
		send func() error
		want string
	}{
		{"ready", func() error { return Ready("serving on /run/plateau/plateau.sock") }, "READY=1\nSTATUS=serving on /run/plateau/plateau.sock"},
		{"status", func() error { return Status("run r000003: step 4/22") }, "STATUS=run r000003: step 4/22"},
		{"status one line", func() error { return Status("a\nREADY=1") }, "STATUS=a READY=1"},
		{"stopping", func() error { return Stopping("stopping: run r000003 left resumable") }, "STOPPING=1\nSTATUS=stopping: run r000003 left resumable"},
	}
	for _, c := range cases {
		if err := c.send(); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if got := receive(t, conn); got != c.want {
			t.Fatalf("%s: sent %q, want %q", c.name, got, c.want)
		}
	}
}

func TestOutsideSystemd(t *testing.T) {
	t.Setenv("NOTIFY_SOCKET", "")
	os.Unsetenv("NOTIFY_SOCKET")
	t.Setenv("WATCHDOG_USEC", "")
	if err := Ready("x"); err != nil {
		t.Fatalf("ready outside systemd: %v", err)
	}
	done := make(chan error)
	go func() { done <- (Watchdog{}).Run(context.Background()) }()
	select {
	case err := <-done:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("watchdog ran with no WATCHDOG_USEC")
	}
}

// stepClock hands each wait to the test, which decides when it ends.
type stepClock struct {
	mu    sync.Mutex
	now   time.Time
	waits chan chan time.Time
}

func (c *stepClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

func (c *stepClock) After(time.Duration) <-chan time.Time {
	ch := make(chan time.Time, 1)
	c.waits <- ch
	return ch
}

// step waits until the watchdog sleeps, moves time on by d and wakes it.
func (c *stepClock) step(t *testing.T, d time.Duration) {
	t.Helper()
	select {
	case ch := <-c.waits:
		c.mu.Lock()
		c.now = c.now.Add(d)
		now := c.now
		c.mu.Unlock()
		ch <- now
	case <-time.After(5 * time.Second):
		t.Fatal("watchdog never waited")
	}
}

// beat is a heartbeat the test sets.
type beat struct {
	mu sync.Mutex
	at time.Time
}

func (b *beat) set(t time.Time) { b.mu.Lock(); b.at = t; b.mu.Unlock() }
func (b *beat) last() time.Time { b.mu.Lock(); defer b.mu.Unlock(); return b.at }

// TestWatchdogFollowsProgress: pings go out while both the poll loop and
// the store writer make progress, stop (with a status line naming the
// culprit) when one stalls, and resume when it recovers.
func TestWatchdogFollowsProgress(t *testing.T) {
	conn := listenNotify(t)
	t0 := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	clk := &stepClock{now: t0, waits: make(chan chan time.Time)}
	var poll, writer beat
	poll.set(t0)
	writer.set(t0)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		done <- Watchdog{Interval: 10 * time.Second, Clock: clk, Probes: []Probe{
			{Name: "poll loop", Last: poll.last}, {Name: "store writer", Last: writer.last},
		}}.Run(ctx)
	}()

	if got := receive(t, conn); got != "WATCHDOG=1" {
		t.Fatalf("first ping %q", got)
	}
	// Both make progress: a ping every half interval.
	poll.set(t0.Add(4 * time.Second))
	writer.set(t0.Add(3 * time.Second))
	clk.step(t, 5*time.Second)
	if got := receive(t, conn); got != "WATCHDOG=1" {
		t.Fatalf("ping with fresh probes: %q", got)
	}
	// The poll loop wedges: at t0+11 s its last beat is 7 s old (> 5 s).
	writer.set(t0.Add(9 * time.Second))
	clk.step(t, 6*time.Second)
	if got := receive(t, conn); got != "STATUS=no progress from poll loop" {
		t.Fatalf("stalled poll loop: %q", got)
	}
	// Still stalled: nothing at all is sent, so systemd's timer runs out.
	writer.set(t0.Add(15 * time.Second))
	clk.step(t, 5*time.Second)
	clk.step(t, 0) // the loop has come round again without sending
	conn.SetReadDeadline(time.Now().Add(50 * time.Millisecond))
	if n, err := conn.Read(make([]byte, 64)); err == nil {
		t.Fatalf("watchdog pinged while stalled (%d bytes)", n)
	}
	// Progress again: pings resume.
	poll.set(clk.Now())
	writer.set(clk.Now())
	clk.step(t, time.Second)
	if got := receive(t, conn); got != "WATCHDOG=1" {
		t.Fatalf("ping after recovery: %q", got)
	}
	cancel()
	clk.step(t, 0)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
}

// TestWatchdogInterval: the interval comes from WATCHDOG_USEC when the
// process is the one systemd watches.
func TestWatchdogInterval(t *testing.T) {
	conn := listenNotify(t)
	t.Setenv("WATCHDOG_USEC", "3000000")
	t.Setenv("WATCHDOG_PID", strconv.Itoa(os.Getpid()))
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	now := time.Now()
	clk := &stepClock{now: now, waits: make(chan chan time.Time)}
	// MaxAge defaults to half the interval (1.5 s), so a 2 s old beat is stale.
	go (Watchdog{Clock: clk, Probes: []Probe{{Name: "poll loop", Last: func() time.Time { return now.Add(-2 * time.Second) }}}}).Run(ctx)
	if got := receive(t, conn); got != "STATUS=no progress from poll loop" {
		t.Fatalf("with WATCHDOG_USEC=3 s a 2 s old beat must be stale: %q", got)
	}
	clk.step(t, 0)
	cancel()
}
