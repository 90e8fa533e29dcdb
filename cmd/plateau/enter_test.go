package main

import (
	"context"
	"errors"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"plateau/acquire/api"
)

func TestSplitReadings(t *testing.T) {
	cases := []struct {
		in              []string
		readings, flags []string
	}{
		{[]string{"-0.1"}, []string{"-0.1"}, nil},
		{[]string{"-0,1", "bar"}, []string{"-0,1"}, []string{"bar"}},
		{[]string{"--confirm", "-.5"}, []string{"-.5"}, []string{"--confirm"}},
		{[]string{"--socket", "/tmp/s", "4.02"}, nil, []string{"--socket", "/tmp/s", "4.02"}},
		{[]string{"-c", "x.yaml", "--", "-3"}, []string{"-3"}, []string{"-c", "x.yaml"}},
		{[]string{"-h"}, nil, []string{"-h"}},
	}
	for _, c := range cases {
		r, f := splitReadings(c.in)
		if !slices.Equal(r, c.readings) || !slices.Equal(f, c.flags) {
			t.Errorf("%q: readings %q flags %q, want %q %q", c.in, r, f, c.readings, c.flags)
		}
	}
}

// plateau enter against a running daemon with a dial as the device under
// test and no run: the daemon's refusal is printed and the exit status is
// not zero, for a negative reading too; a reading that is not a number is
// refused before the daemon is asked.
func TestEnterRefusedWithoutStep(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the daemon as a process")
	}
	dir := t.TempDir()
	bin := plateauBinary(t)
	cfgPath := simConfig(t, dir, "enter",
		"    link: {kind: sim}\n    sim_part: device\n    sim_via: modbus-rtu\n    poll: 100ms\n", "    link: {kind: manual}\n    unit: bar\n")
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	startDaemon(t, ctx, bin, cfgPath, filepath.Join(dir, "daemon.log"))
	waitReady(t, ctx, api.NewUnixClient(filepath.Join(dir, "enter.sock"), ""))
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"enter", "-0.1"}, "no step is waiting for a dial reading"},
		{[]string{"enter", "4,02", "bar"}, "no step is waiting for a dial reading"},
		{[]string{"enter", "--confirm", "17.2"}, "no step is waiting for a dial reading"},
		{[]string{"enter", "4.0x"}, `reading "4.0x"`},
		{[]string{"enter"}, "give the reading"},
	}
	for _, c := range cases {
		out, err := exec.CommandContext(ctx, bin, append([]string{"-c", cfgPath}, c.args...)...).CombinedOutput()
		var exit *exec.ExitError
		if err == nil || !errors.As(err, &exit) || exit.ExitCode() == 0 {
			t.Errorf("%v: exit %v, want a non-zero status\n%s", c.args, err, out)
		}
		if !strings.Contains(string(out), c.want) {
			t.Errorf("%v: output %q, want %q", c.args, out, c.want)
		}
	}
}
