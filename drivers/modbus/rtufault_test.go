package modbus

import (
	"errors"
	"io"
	"os"
	"testing"
	"time"

	"github.com/creack/pty"
	"golang.org/x/term"

	"plateau/config"
	"plateau/drivers"
	"plateau/drivers/crc16"
)

func withCRC(b []byte) []byte { return crc16.Append(b) }

// The test's own CRC must match the published check value and example frames
// before it may fake a device.
func TestCRCCheckValues(t *testing.T) {
	if c := crc16.Modbus([]byte("123456789")); c != 0x4B37 { // REFERENCES §9.2 check value
		t.Fatalf("crc16.Modbus(123456789) = %04X", c)
	}
	// REFERENCES §9.1: 01 03 00 6B 00 03 74 17 and 01 03 06 02 2B 00 00 00 64 05 7A.
	for _, f := range [][]byte{{1, 3, 0, 0x6B, 0, 3, 0x74, 0x17}, {1, 3, 6, 2, 0x2B, 0, 0, 0, 0x64, 0x05, 0x7A}} {
		if got := withCRC(f[:len(f)-2]); string(got) != string(f) {
			t.Errorf("frame % X, computed % X", f, got)
		}
	}
}

// The device side of a pty pair that answers each FC03 request of one
// register with the frame a fault function makes.
func fakeRTU(t *testing.T, replies ...func(req []byte) []byte) string {
	t.Helper()
	master, dev := rawPty(t)
	go func() {
		for _, reply := range replies {
			req := make([]byte, 8)
			if _, err := io.ReadFull(master, req); err != nil {
				return
			}
			if withCRC(req[:6])[7] != req[7] {
				t.Errorf("request with bad CRC from the driver: % X", req)
			}
			if out := reply(req); out != nil {
				master.Write(out)
			}
		}
	}()
	return dev
}

// rawPty makes a pseudo-terminal pair in raw mode, so bytes pass unchanged:
// the test plays the device on the master side, the driver opens the slave
// by its name. The slave stays open too, so the master never reads EIO
// while the driver has the port closed.
func rawPty(tb testing.TB) (*os.File, string) {
	tb.Helper()
	master, slave, err := pty.Open()
	if err != nil {
		tb.Skipf("no pseudo-terminals: %v", err)
	}
	if _, err := term.MakeRaw(int(slave.Fd())); err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { master.Close(); slave.Close() })
	return master, slave.Name()
}

// good answers 555 (REFERENCES §9.1 value) for every register asked.
func good(req []byte) []byte { return withCRC([]byte{req[0], 3, 2, 0x02, 0x2B}) }

func TestRTUFaults(t *testing.T) {
	badCRC := func(req []byte) []byte { f := good(req); f[len(f)-1] ^= 0xFF; return f }
	garbage := func([]byte) []byte { return []byte{0xFF, 0x00, 0x13, 0x37, 0x42, 0x99, 0xAA} }
	exception := func(req []byte) []byte { return withCRC([]byte{req[0], 0x83, 0x02}) } // illegal data address
	silent := func([]byte) []byte { return nil }
	otherUnit := func(req []byte) []byte { return withCRC([]byte{req[0] + 1, 3, 2, 0x02, 0x2B}) }

	cases := []struct {
		name  string
		fault func([]byte) []byte
		want  error
	}{
		{"corrupted CRC", badCRC, drivers.ErrBadReply},
		{"garbage bytes", garbage, drivers.ErrBadReply},
		{"exception reply", exception, drivers.ErrBadReply},
		{"no reply", silent, drivers.ErrTimeout},
		{"reply from another unit", otherUnit, drivers.ErrBadReply},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dev := fakeRTU(t, good, c.fault, good)
			in := inst("dut", config.LinkModbusRTU, dev, config.ValueRead{Register: 0x6B, Type: "uint16"})
			in.Link.Timeout = 150 * time.Millisecond
			in.Link.Retries = 0
			g := mustOpen(t, in)
			ctx := ctxT(t)
			if r, err := g.Read(ctx); err != nil || r.Raw != 555 || r.Wire != "022B" {
				t.Fatalf("control read: %+v %v", r, err)
			}
			_, err := g.Read(ctx)
			if !errors.Is(err, c.want) {
				t.Fatalf("faulty reply: %v, want %v", err, c.want)
			}
			// The line recovers: the next good frame reads normally.
			time.Sleep(20 * time.Millisecond)
			var r drivers.Reading
			if r, err = g.Read(ctx); err != nil || r.Raw != 555 {
				t.Fatalf("read after fault: %+v %v", r, err)
			}
		})
	}
}

// A retry turns one damaged frame into a good reading.
func TestRTURetryAfterBadCRC(t *testing.T) {
	badCRC := func(req []byte) []byte { f := good(req); f[3] ^= 0x01; return f }
	dev := fakeRTU(t, badCRC, good)
	in := inst("dut", config.LinkModbusRTU, dev, config.ValueRead{Register: 1, Type: "uint16"})
	in.Link.Retries = 1
	g := mustOpen(t, in)
	if r, err := g.Read(ctxT(t)); err != nil || r.Raw != 555 {
		t.Fatalf("read with one retry: %+v %v", r, err)
	}
}
