package modbus

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"net"
	"slices"
	"strconv"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/crc16"
)

// freshLine answers on one RTU line for units 1 … n. Its values change with
// every request, so a stale reply shows: a read of unit u answers the
// uint32 u<<16 | k, k being how many reads of u it has received, this one
// included. The replies to the holdReads-th reads of unit holdUnit leave
// hold after their request came in: later than the client's time-out. A coil write (the
// vent) is echoed. The order requests arrive in is kept.
type freshLine struct {
	n         int
	holdUnit  uint8
	holdReads []int64
	hold      time.Duration

	reads [248]atomic.Int64
	mu    sync.Mutex
	order []string
}

func (f *freshLine) serve(rw io.ReadWriter) { serveRTU(rw, f.answer) }

func (f *freshLine) answer(req []byte, arrived time.Time) []byte {
	unit := req[0]
	if unit < 1 || int(unit) > f.n {
		return nil
	}
	switch req[1] {
	case 3:
		k := f.reads[unit].Add(1)
		f.log(fmt.Sprintf("read %d#%d", unit, k))
		if unit == f.holdUnit && slices.Contains(f.holdReads, k) {
			time.Sleep(time.Until(arrived.Add(f.hold)))
		}
		return crc16.Append(binary.BigEndian.AppendUint32([]byte{unit, 3, 4}, uint32(unit)<<16|uint32(k)))
	case 5:
		f.log(fmt.Sprintf("vent %d", unit))
		return crc16.Append(append([]byte(nil), req[:6]...))
	}
	return nil
}

func (f *freshLine) log(s string) {
	f.mu.Lock()
	f.order = append(f.order, s)
	f.mu.Unlock()
}

func (f *freshLine) arrivals() []string {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]string(nil), f.order...)
}

// onPty serves f on a pseudo-terminal and returns the device the driver opens.
func (f *freshLine) onPty(t *testing.T) string {
	master, dev := rawPty(t)
	go f.serve(master)
	return dev
}

// onGateway serves f as a serial gateway would, RTU frames over TCP, each
// connection in turn; it returns host:port.
func (f *freshLine) onGateway(t *testing.T) string {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { ln.Close() })
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go func() { defer c.Close(); f.serve(c) }()
		}
	}()
	return ln.Addr().String()
}

const (
	resyncTimeout = 200 * time.Millisecond
	resyncHold    = 260 * time.Millisecond // the late reply: 60 ms past the time-out, well inside the grace
)

// freshGauges opens one gauge per unit on one line.
func freshGauges(t *testing.T, kind, addr string, units int) []drivers.Gauge {
	gs := make([]drivers.Gauge, units)
	for i := range gs {
		in := inst("u"+strconv.Itoa(i+1), kind, addr, config.ValueRead{Register: 0, Type: "uint32"})
		in.Link.UnitID, in.Link.Retries, in.Link.Timeout = i+1, 0, resyncTimeout
		gs[i] = mustOpen(t, in)
	}
	return gs
}

// fresh reads the units of one line and counts the requests it puts on the
// wire to each (every read does, one a time with no retries, but one refused
// while its unit is benched).
type fresh struct {
	gs   []drivers.Gauge
	sent [248]int64
}

// read reads unit u (1-based) and checks the reply is this request's: the
// unit's own value, with the count of requests sent to it.
func (c *fresh) read(ctx context.Context, u int) error {
	r, err := c.gs[u-1].Read(ctx)
	if !errors.Is(err, errSilent) {
		c.sent[u]++
	}
	if err != nil {
		return err
	}
	got := uint32(r.Raw)
	unit, k := int(got>>16), int64(got&0xFFFF)
	if unit != u || k != c.sent[u] {
		return fmt.Errorf("unit %d read unit %d's reply to its request #%d, but this was request #%d: a stale reply", u, unit, k, c.sent[u])
	}
	return nil
}

// One reply on a line of three units comes after the client's time-out.
// Without a resync it stays in the input and every later exchange reads the
// one before it: the next read of the same unit takes the old value as new,
// and reads of the others fail with a reply from the wrong unit. With it,
// the late reply is let in and thrown away, and every read after it gets its
// own reply — the same unit's first of all.
func TestLateReplyIsDiscardedBeforeTheNextRequest(t *testing.T) {
	for _, tc := range []struct {
		name, kind string
		start      func(*freshLine, *testing.T) string
	}{
		{"serial", config.LinkModbusRTU, (*freshLine).onPty},
		{"gateway", config.LinkModbusRTUTCP, (*freshLine).onGateway},
	} {
		t.Run(tc.name, func(t *testing.T) {
			const units = 3
			f := &freshLine{n: units, holdUnit: 2, holdReads: []int64{2}, hold: resyncHold}
			c := &fresh{gs: freshGauges(t, tc.kind, tc.start(f, t), units)}
			ctx := ctxT(t)
			for u := 1; u <= units; u++ {
				if err := c.read(ctx, u); err != nil {
					t.Fatalf("before the late reply: %v", err)
				}
			}
			if err := c.read(ctx, 2); !errors.Is(err, drivers.ErrTimeout) {
				t.Fatalf("the held read: %v, want a time-out", err)
			}
			// The same unit at once, while its late reply is on its way.
			if err := c.read(ctx, 2); err != nil {
				t.Fatalf("right after the late reply: %v", err)
			}
			failed := 0
			for i := range 30 {
				u := i%units + 1
				if err := c.read(ctx, u); err != nil {
					failed++
					t.Errorf("read %d: %v", i+1, err)
				}
			}
			l := c.gs[0].(*Gauge).link
			t.Logf("%d of 30 reads after the late reply failed; %d resync(s)", failed, l.step.resyncs.Load())
			if n := l.step.resyncs.Load(); n != 1 {
				t.Errorf("%d resyncs, want 1 (one late reply)", n)
			}
		})
	}
}

// A vent does not wait out the grace: asked while an ordinary read waits for
// the late reply to pass, it reaches the line first, gets its own echo (the
// late reply already in the input is thrown away before it goes out), and
// the read then gets its own reply.
func TestVentDoesNotWaitOutTheResync(t *testing.T) {
	const units = 3
	f := &freshLine{n: units, holdUnit: 2, holdReads: []int64{1}, hold: resyncHold}
	dev := f.onPty(t)
	c := &fresh{gs: freshGauges(t, config.LinkModbusRTU, dev, units)}
	in := inst("ctl", config.LinkModbusRTU, dev, config.ValueRead{})
	in.Role, in.Link.UnitID, in.Link.Retries, in.Link.Timeout = config.RoleSource, 3, 0, resyncTimeout
	coil := 7
	in.Set = config.SourceControl{Setpoint: complete(config.ValueRead{Register: 30, Type: "float32"}), VentCoil: &coil}
	src, err := drivers.OpenSource(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	ctx := ctxT(t)
	if err := c.read(ctx, 2); !errors.Is(err, drivers.ErrTimeout) {
		t.Fatalf("the held read: %v, want a time-out", err)
	}
	read := make(chan error, 1)
	go func() { read <- c.read(ctx, 1) }()
	// After the late reply has arrived (60 ms after the time-out), long
	// before the grace ends (a time-out and a longest frame after it).
	time.Sleep(150 * time.Millisecond)
	if err := src.Vent(ctx); err != nil {
		t.Errorf("vent during the grace: %v", err)
	}
	if err := <-read; err != nil {
		t.Errorf("read queued before the vent: %v", err)
	}
	if got := f.arrivals(); len(got) != 3 || got[1] != "vent 3" || got[2] != "read 1#1" {
		t.Errorf("arrivals %v: want the vent before the read that waits out the grace", got)
	}
}

// A unit that times out twice in a row is taken to be off, and its time-out
// no longer holds the line for the grace: only its own next read waits it
// out. If it answers late after all, another unit's read may fail on that
// reply (it names the wrong unit), but no read takes a stale value.
func TestLateReplyOfAUnitTakenToBeOff(t *testing.T) {
	const units = 3
	for _, next := range []int{2, 1} { // the unit read right after the second time-out
		t.Run("unit "+strconv.Itoa(next)+" next", func(t *testing.T) {
			f := &freshLine{n: units, holdUnit: 2, holdReads: []int64{1, 2}, hold: resyncHold}
			c := &fresh{gs: freshGauges(t, config.LinkModbusRTU, f.onPty(t), units)}
			ctx := ctxT(t)
			for range 2 {
				if err := c.read(ctx, 2); !errors.Is(err, drivers.ErrTimeout) {
					t.Fatalf("a held read: %v, want a time-out", err)
				}
			}
			err := c.read(ctx, next)
			if err != nil && (next == 2 || drivers.KindOf(err) != drivers.KindBadReply) {
				t.Errorf("unit %d after the second time-out: %v", next, err)
			}
			for i := range 30 {
				u := i%units + 1
				if err := c.read(ctx, u); err != nil {
					t.Errorf("read %d: %v", i+1, err)
				}
			}
		})
	}
}
