package main

import (
	"context"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/procedure"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
)

// TestServeTermAndResume runs the real daemon on the simulated bench,
// sends SIGTERM while a point is being approached, and starts it again:
// the first daemon exits cleanly with the run left resumable, the second
// carries the run on to the end, no point is lost or doubled, and a viewer
// that follows the event stream across the restart sees every event once.
func TestServeTermAndResume(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the program and runs a calibration on the simulated bench")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "serve")
	socket := filepath.Join(dir, "serve.sock")
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	total := procedure.CaptureCount(procedure.Plan(cfg.Procedure, cfg.Device.LowerPa))

	c := api.NewUnixClient(socket, "")
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()

	// A viewer follows the whole time, across the restart.
	var mu sync.Mutex
	var ids []uint64
	var events []store.Event
	stepSeen := make(chan store.Event, 64)
	followCtx, stopFollow := context.WithCancel(ctx)
	followed := make(chan error, 1)
	go func() {
		followed <- c.Follow(followCtx, api.FollowOptions{Resume: true, Retry: true, MinBackoff: 20 * time.Millisecond, MaxBackoff: 100 * time.Millisecond},
			func(ev store.Event) error {
				mu.Lock()
				ids = append(ids, ev.ID)
				events = append(events, ev)
				mu.Unlock()
				if ev.Type == "step" || ev.Type == "point" {
					select {
					case stepSeen <- ev:
					default:
					}
				}
				return nil
			})
	}()

	first := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "first.log"))
	waitReady(t, ctx, c)
	id, err := c.Start(ctx, api.StartRequest{Label: "SIGTERM test"})
	if err != nil {
		t.Fatal(err)
	}

	// SIGTERM right after a new step begins, once a few points are in:
	// the daemon is then approaching or settling on a point.
	points := 0
	for points < 3 {
		select {
		case ev := <-stepSeen:
			if ev.Type == "point" {
				points++
			}
		case <-ctx.Done():
			t.Fatalf("only %d points before the deadline", points)
		}
	}
	for ev := range stepSeen {
		if ev.Type == "step" {
			break
		}
	}
	if err := first.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	if err := first.Wait(); err != nil {
		t.Fatalf("first daemon did not exit cleanly on SIGTERM: %v\n%s", err, readFile(filepath.Join(dir, "first.log")))
	}
	if log := readFile(filepath.Join(dir, "first.log")); !strings.Contains(log, "run left resumable") || !strings.Contains(log, "store flushed and closed") {
		t.Fatalf("first daemon's log lacks the orderly shutdown:\n%s", log)
	}
	before := storedPoints(t, cfg.Store.Path, id, store.StateRunning)
	if len(before) == 0 || len(before) >= total {
		t.Fatalf("%d points at SIGTERM; the test wants to stop mid-run (of %d)", len(before), total)
	}

	second := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "second.log"))
	statusSaysResumed := false
	for {
		st, err := c.Status(ctx)
		statusSaysResumed = statusSaysResumed || (err == nil && st.Run != nil && st.Reason == "resumed after a restart")
		if err == nil && st.Run == nil {
			if r, err := c.Run(ctx, id); err == nil && r.State.Terminal() {
				break
			}
		}
		if ctx.Err() != nil {
			t.Fatalf("run not finished after the restart:\n%s", readFile(filepath.Join(dir, "second.log")))
		}
		time.Sleep(100 * time.Millisecond)
	}
	last, err := c.Status(ctx)
	if err != nil {
		t.Fatal(err)
	}
	// Wait for the viewer to catch up, then stop it and the daemon.
	for {
		mu.Lock()
		n := len(ids)
		mu.Unlock()
		if n > 0 && ids[n-1] >= last.LastEventID {
			break
		}
		if ctx.Err() != nil {
			t.Fatal("viewer never caught up")
		}
		time.Sleep(20 * time.Millisecond)
	}
	stopFollow()
	if err := <-followed; !errors.Is(err, context.Canceled) {
		t.Fatalf("follow: %v", err)
	}
	second.Process.Signal(syscall.SIGTERM)
	if err := second.Wait(); err != nil {
		t.Fatalf("second daemon: %v", err)
	}

	after := storedPoints(t, cfg.Store.Path, id, store.StateFinished)
	if len(after) != total {
		t.Fatalf("%d points after the restart, want %d", len(after), total)
	}
	if !reflect.DeepEqual(after[:len(before)], before) {
		t.Fatal("points captured before SIGTERM changed after the restart")
	}
	seen := map[[4]any]bool{}
	for _, p := range after {
		k := [4]any{p.Cycle, p.Kind, p.Direction, p.Index}
		if seen[k] {
			t.Fatalf("point %v captured twice", k)
		}
		seen[k] = true
	}
	mu.Lock()
	defer mu.Unlock()
	for i, got := range ids {
		if got != uint64(i+1) {
			t.Fatalf("viewer's event %d has id %d: events missed or repeated across the restart", i, got)
		}
	}
	resumed := false
	for _, ev := range events {
		resumed = resumed || strings.Contains(ev.Message, "after a restart") && strings.HasPrefix(ev.Message, "resuming ")
	}
	if !statusSaysResumed {
		t.Error("status never said the run was resumed after a restart")
	}
	if !resumed {
		t.Fatal("no event says the run was resumed")
	}
	t.Logf("SIGTERM at %d of %d points; restart finished the run; viewer saw events 1…%d once each", len(before), total, len(ids))
}

func startDaemon(t *testing.T, ctx context.Context, bin, cfgPath, logPath string) *exec.Cmd {
	t.Helper()
	return startDaemonEnv(t, ctx, bin, cfgPath, logPath, "PLATEAU_LOG_LEVEL=debug")
}

// startDaemonEnv is startDaemon with the given extra environment.
func startDaemonEnv(t *testing.T, ctx context.Context, bin, cfgPath, logPath string, env ...string) *exec.Cmd {
	t.Helper()
	logf, err := os.Create(logPath)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { logf.Close() })
	cmd := exec.CommandContext(ctx, bin, "serve", "-c", cfgPath)
	cmd.Stdout, cmd.Stderr = logf, logf
	cmd.Env = append(append(os.Environ(), "NOTIFY_SOCKET="), env...)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if cmd.ProcessState == nil {
			cmd.Process.Kill()
			cmd.Wait()
		}
	})
	return cmd
}

func waitReady(t *testing.T, ctx context.Context, c *api.Client) {
	t.Helper()
	for {
		if _, err := c.Status(ctx); err == nil {
			return
		}
		if ctx.Err() != nil {
			t.Fatal("daemon never answered")
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// storedPoints reads the run's points from the store file with no daemon
// running, after bbolt's consistency check, and checks the run's state.
func storedPoints(t *testing.T, path string, id string, want store.State) []analysis.Point {
	t.Helper()
	st, err := store.Open(path, store.Options{Timeout: 5 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if err := st.Check(); err != nil {
		t.Fatal(err)
	}
	rid, err := store.ParseRunID(id)
	if err != nil {
		t.Fatal(err)
	}
	r, err := st.Run(rid)
	if err != nil || r.State != want {
		t.Fatalf("run %s: %+v, %v; want state %s", id, r, err, want)
	}
	pts, err := st.Points(rid)
	if err != nil {
		t.Fatal(err)
	}
	return pts
}

func readFile(path string) string {
	b, _ := os.ReadFile(path)
	return string(b)
}
