package sim

import (
	"context"
	"errors"
	"fmt"
	"os"
	"sync"
	"time"

	"github.com/creack/pty"
	"golang.org/x/sys/unix"
	"golang.org/x/term"
)

// ptyPort is the instrument's end of a pseudo-terminal pair: the program
// under test opens Path (the slave device) as if it were a serial port, and
// the simulated instrument reads and writes the master.
type ptyPort struct {
	Path   string
	master *os.File
	slave  *os.File // held open so the master never sees a hang-up between clients

	writeMu sync.Mutex
}

func openPTY() (*ptyPort, error) {
	master, slave, err := pty.Open()
	if err != nil {
		return nil, fmt.Errorf("open pseudo-terminal: %w", err)
	}
	// Raw mode: no echo, no line editing, no CR/LF translation, whatever
	// the client sets later. A serial port carries bytes, not a terminal session.
	if _, err := term.MakeRaw(int(slave.Fd())); err != nil {
		master.Close()
		slave.Close()
		return nil, fmt.Errorf("raw mode on %s: %w", slave.Name(), err)
	}
	pollable, err := pollable(master)
	if err != nil {
		slave.Close()
		return nil, fmt.Errorf("pseudo-terminal %s: %w", slave.Name(), err)
	}
	return &ptyPort{Path: slave.Name(), master: pollable, slave: slave}, nil
}

// pollable returns a copy of f that read deadlines work on, and closes f.
// pty.Open asks for the master's descriptor, which puts it in blocking mode
// for good; a non-blocking duplicate goes back to the runtime's poller.
func pollable(f *os.File) (*os.File, error) {
	defer f.Close()
	fd, err := unix.Dup(int(f.Fd()))
	if err != nil {
		return nil, fmt.Errorf("dup: %w", err)
	}
	if err := unix.SetNonblock(fd, true); err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("non-blocking: %w", err)
	}
	return os.NewFile(uintptr(fd), f.Name()), nil
}

func (p *ptyPort) Close() error {
	return errors.Join(p.master.Close(), p.slave.Close())
}

func (p *ptyPort) write(b []byte) error {
	p.writeMu.Lock()
	defer p.writeMu.Unlock()
	_, err := p.master.Write(b)
	return err
}

// errIdle says no byte arrived within the idle wait; callers loop on it.
var errIdle = errors.New("idle")

// readFrame returns the bytes of one RTU frame — everything received until
// the line has been silent for gap (t3.5), or until complete says the bytes
// are a whole request — and when its first byte arrived. A pseudo-terminal
// has no character timing, so the t1.5 rule inside a frame cannot be
// checked here; clients write a frame in one go, which arrives in one
// piece, and waiting out the silence after a frame that is plainly whole
// would only slow the line (with wire time on, the reply is held back to
// the wire's pace anyway).
func (p *ptyPort) readFrame(gap, idle time.Duration, complete func([]byte) bool) ([]byte, time.Time, error) {
	var frame []byte
	var first time.Time
	buf := make([]byte, 512)
	if err := p.master.SetReadDeadline(time.Now().Add(idle)); err != nil {
		return nil, first, err
	}
	for {
		n, err := p.master.Read(buf)
		if n > 0 {
			if len(frame) == 0 {
				first = time.Now()
			}
			if len(frame) <= maxRTUFrame {
				frame = append(frame, buf[:n]...)
			}
			if complete != nil && complete(frame) {
				return frame, first, nil
			}
			if err := p.master.SetReadDeadline(time.Now().Add(gap)); err != nil {
				return nil, first, err
			}
		}
		if errors.Is(err, os.ErrDeadlineExceeded) {
			if len(frame) == 0 {
				return nil, first, errIdle
			}
			return frame, first, nil
		}
		if err != nil {
			return nil, first, err
		}
	}
}

// silence3_5 is the inter-frame gap for a baud rate (Modbus over Serial
// Line V1.02 §2.5.1.1): 3.5 characters of 11 bits, fixed at 1.75 ms above
// 19200 Bd.
func silence3_5(baud int) time.Duration {
	if baud <= 0 || baud > 19200 {
		return 1750 * time.Microsecond
	}
	return time.Duration(3.5 * 11 * float64(time.Second) / float64(baud))
}

// sleepCtx waits d of wall time or until ctx ends.
func sleepCtx(ctx context.Context, d time.Duration) {
	if d <= 0 {
		return
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
	case <-ctx.Done():
	}
}
