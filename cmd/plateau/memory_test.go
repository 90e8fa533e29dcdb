package main

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
)

// residentKiB is the resident memory of a process, from /proc.
func residentKiB(pid int) (int, error) {
	f, err := os.Open(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return 0, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		if rest, ok := strings.CutPrefix(sc.Text(), "VmRSS:"); ok {
			return strconv.Atoi(strings.TrimSuffix(strings.TrimSpace(rest), " kB"))
		}
	}
	return 0, fmt.Errorf("no VmRSS for %d", pid)
}

// The daemon's memory stays flat across a long run: plateau serve runs a
// many-cycle procedure on the simulated bench at 120× and its resident
// memory is sampled every simulated hour; each sample after the first hour
// stays within 10 % of the first hour's. PLATEAU_MEMORY_HOURS sets how many
// simulated hours (default 3, a short count so the check cannot rot; 24
// for the figure in the README). The series is printed.
func TestMemoryStaysFlat(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the daemon for simulated hours")
	}
	hours := 3
	if v := os.Getenv("PLATEAU_MEMORY_HOURS"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 2 {
			t.Fatalf("PLATEAU_MEMORY_HOURS=%q: want a whole number of hours, at least 2", v)
		}
		hours = n
	}
	const speed = 120
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "memory", "speed: 60", fmt.Sprintf("speed: %d", speed), "cycles: 2", "cycles: 1000")
	c := api.NewUnixClient(filepath.Join(dir, "memory.sock"), "")
	ctx, cancel := context.WithTimeout(context.Background(), time.Duration(hours)*time.Hour/speed+2*time.Minute)
	defer cancel()
	d := startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "daemon.log"))
	waitReady(t, ctx, c)
	if _, err := c.Start(ctx, api.StartRequest{Label: "memory"}); err != nil {
		t.Fatal(err)
	}
	hour := time.Hour / speed
	var series []int
	for h := 1; h <= hours; h++ {
		select {
		case <-time.After(hour):
		case <-ctx.Done():
			t.Fatal(ctx.Err())
		}
		kib, err := residentKiB(d.Process.Pid)
		if err != nil {
			t.Fatal(err)
		}
		st, err := c.Status(ctx)
		if err != nil {
			t.Fatal(err)
		}
		series = append(series, kib)
		t.Logf("simulated hour %2d: resident %6d KiB, %d points", h, kib, st.PointsCaptured)
	}
	stopDaemon(t, d)
	first := series[0]
	for h, kib := range series[1:] {
		if d := float64(kib-first) / float64(first); d > 0.10 || d < -0.10 {
			t.Errorf("simulated hour %d: %d KiB, %+.1f %% from the first hour's %d KiB", h+2, kib, 100*d, first)
		}
	}
}
