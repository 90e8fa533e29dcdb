package main

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
	"plateau/acquire/store"
)

// The simulated bench's servers go away for a while and come back: the
// daemon logs link lost and link restored for the instruments it reaches
// over them, and plateau tail, as a process, shows both with the
// instrument's name.
func TestTailShowsLinkLostAndRestored(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the daemon and tail as processes")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "links")
	text, err := os.ReadFile(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	// The servers are gone 3 s of every 12 s (clock time; the bench runs 60× faster).
	text = []byte(strings.Replace(string(text), "simulator:\n", "simulator:\n  faults: {link_down: 3s, link_every: 12s}\n", 1))
	if err := os.WriteFile(cfgPath, text, 0o644); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "serve.log"))
	c := api.NewUnixClient(filepath.Join(dir, "links.sock"), "")
	waitReady(t, ctx, c)
	lost, restored := false, false
	followCtx, stop := context.WithCancel(ctx)
	err = c.Follow(followCtx, api.FollowOptions{Tail: 100}, func(ev store.Event) error {
		if ev.Type == "link" && ev.Instrument == "ref" {
			lost = lost || strings.Contains(ev.Message, "link lost")
			restored = restored || (lost && strings.Contains(ev.Message, "link restored"))
		}
		if lost && restored {
			stop()
		}
		return nil
	})
	if !lost || !restored {
		t.Fatalf("link events of ref: lost %t, restored %t (%v)\n%s", lost, restored, err, readFile(filepath.Join(dir, "serve.log")))
	}
	out := tailFor(ctx, bin, cfgPath, 100, 2*time.Second)
	for _, want := range []string{` WARN  - +ref\s+ref: link lost \(`, ` INFO  - +ref\s+ref: link restored`} {
		if !regexp.MustCompile(want).Match(out) {
			t.Errorf("tail shows no line like %q:\n%s", want, out)
		}
	}
	checkHuman(t, "plateau tail", string(out))
	stopDaemon(t, d)
}

// tailFor runs plateau tail for a while and returns what it printed of the
// last n events and after: it follows for ever, so its context ends it.
func tailFor(ctx context.Context, bin, cfgPath string, n int, d time.Duration) []byte {
	ctx, cancel := context.WithTimeout(ctx, d)
	defer cancel()
	tail := exec.CommandContext(ctx, bin, "-c", cfgPath, "tail", "-n", strconv.Itoa(n))
	tail.Env = cleanEnv()
	out, _ := tail.CombinedOutput()
	return out
}
