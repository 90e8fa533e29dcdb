package sim

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"strings"
	"time"
)

// The line instruments' command set. A command ends with CR, LF or CR LF;
// a command with no line end is taken as complete after lineIdle of quiet.
const (
	CmdRead     = "READ?" // reply: the value and its unit, e.g. "+12.3456 bar"
	CmdIdentify = "*IDN?" // IEEE 488.2 identification query
	lineIdle    = 100 * time.Millisecond
	// ReplyOverload is the whole reply line when the value is beyond range.
	ReplyOverload = "OL"
)

// valueFunc picks an instrument's value, its unit and an over-range flag
// from a sample.
type valueFunc func(Sample) (v float64, unit string, over bool)

// serveLines runs a query/response ASCII instrument on a pseudo-terminal.
// d is the device whose faults and link the instrument shares (the first
// device's for the reference).
func (r *Rig) serveLines(ctx context.Context, port *ptyPort, part string, d *dut, value valueFunc, step float64) error {
	var pending []byte
	buf := make([]byte, 256)
	decimals := decimalsFor(step)
	for ctx.Err() == nil {
		if err := port.master.SetReadDeadline(time.Now().Add(lineIdle)); err != nil {
			return err
		}
		n, err := port.master.Read(buf)
		pending = append(pending, buf[:n]...)
		idle := errors.Is(err, os.ErrDeadlineExceeded)
		if err != nil && !idle {
			return fmt.Errorf("%s line %s: %w", part, port.Path, err)
		}
		var cmds []string
		cmds, pending = splitCommands(pending, idle)
		for _, cmd := range cmds {
			if err := r.answerLine(ctx, port, part, d, cmd, value, decimals); err != nil {
				return err
			}
		}
	}
	return nil
}

// maxPending bounds a command without a line end: a longer stream is
// noise, not a command, and is thrown away.
const maxPending = 1024

// splitCommands takes the complete commands (ended by CR or LF; the rest
// too when the line has gone idle) from received bytes and returns what is
// left waiting for its line end. Empty commands are dropped.
func splitCommands(pending []byte, idle bool) (cmds []string, rest []byte) {
	for {
		i := bytes.IndexAny(pending, "\r\n")
		if i < 0 {
			break
		}
		if c := strings.TrimSpace(string(pending[:i])); c != "" {
			cmds = append(cmds, c)
		}
		pending = pending[i+1:]
	}
	if idle && len(pending) > 0 {
		if c := strings.TrimSpace(string(pending)); c != "" {
			cmds = append(cmds, c)
		}
		pending = nil
	}
	if len(pending) > maxPending {
		pending = nil
	}
	return cmds, pending
}

func (r *Rig) answerLine(ctx context.Context, port *ptyPort, part string, d *dut, cmd string, value valueFunc, decimals int) error {
	cmd = strings.ToUpper(strings.TrimSpace(cmd))
	if cmd == "" {
		return nil
	}
	if r.j.linkDown(r.clk.Now()) || r.muted(part) || (part != PartReference && r.cut(d)) {
		return nil
	}
	f := d.j.request(r.p.faults.Garbage)
	if f.drop {
		return nil
	}
	var reply string
	switch cmd {
	case CmdRead:
		s := d.j.value(r.m.sample(r.clk.Now(), d.k), r.p, d.p)
		v, unit, over := value(s)
		if over {
			reply = ReplyOverload
		} else {
			reply = fmt.Sprintf("%+.*f %s", decimals, v, unit)
		}
	case CmdIdentify:
		reply = "plateau,simulated " + part + ",SIM-" + strings.ToUpper(part[:3]) + ",1"
		if part != PartReference && d.k > 0 {
			reply = fmt.Sprintf("plateau,simulated %s,SIM-DEV-%d,1", PartDevice, d.k+1)
		}
	default:
		reply = "ERR unknown command " + cmd
	}
	if f.corrupt {
		reply = r.garbage(len(reply))
	}
	sleepCtx(ctx, f.delay)
	if err := port.write([]byte(reply + "\r\n")); err != nil {
		return fmt.Errorf("%s line %s: %w", part, port.Path, err)
	}
	return nil
}

// garbage is what a line looks like at the wrong baud rate: bytes with the
// high bit set and punctuation, never a digit, so no parser can mistake it
// for a number.
func (r *Rig) garbage(n int) string {
	const pool = "#$%&*?@^~|\x80\x9f\xa3\xbf\xc7\xd5\xe6\xf0\xfe\xff"
	r.j.mu.Lock()
	defer r.j.mu.Unlock()
	b := make([]byte, max(n, 4))
	for i := range b {
		b[i] = pool[r.j.rng.IntN(len(pool))]
	}
	return string(b)
}

// decimalsFor gives the number of decimals that shows a resolution step
// (six when the step is zero or finer than that).
func decimalsFor(step float64) int {
	if step <= 0 {
		return 6
	}
	d := int(math.Ceil(-math.Log10(step) - 1e-9))
	return min(max(d, 0), 6)
}
