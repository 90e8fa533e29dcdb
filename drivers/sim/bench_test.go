package sim

import (
	"testing"
	"time"

	"github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers/crc16"
)

// BenchmarkSample evaluates the model 250 ms of clock time after the last
// evaluation (25 friction steps), as a 4 Hz poller would.
func BenchmarkSample(b *testing.B) {
	r, clk := newTestRig(b, WithDefaults(config.Simulator{Seed: 1}))
	if err := r.SetPoint(8e5); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		clk.Advance(250 * time.Millisecond)
		r.Sample()
	}
}

// BenchmarkRTURespond is one FC03 request for 17 registers through the
// responder and the rig's register map, without the pseudo-terminal.
func BenchmarkRTURespond(b *testing.B) {
	r, _ := newTestRig(b, WithDefaults(config.Simulator{Seed: 1}))
	resp := &rtuResponder{unit: 1, h: r.bank}
	frame := crc16.Append([]byte{1, 3, 0, 0, 0, 17})
	b.ReportAllocs()
	for b.Loop() {
		if resp.respond(frame) == nil {
			b.Fatal("no reply")
		}
	}
}

func benchmarkRead(b *testing.B, url func(Endpoints) string) {
	r, _ := newTestRig(b, WithDefaults(config.Simulator{Seed: 1}))
	ep, err := r.Start(b.Context())
	if err != nil {
		b.Fatal(err)
	}
	defer r.Stop()
	c, err := modbus.NewClient(&modbus.ClientConfiguration{URL: url(ep), Timeout: time.Second, Speed: 19200, Parity: modbus.PARITY_EVEN, StopBits: 1})
	if err != nil {
		b.Fatal(err)
	}
	if err := c.Open(); err != nil {
		b.Fatal(err)
	}
	defer c.Close()
	for b.Loop() {
		if _, err := c.ReadRegisters(RegReference, 4, modbus.INPUT_REGISTER); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkTCPRead is a full Modbus TCP round trip on loopback.
func BenchmarkTCPRead(b *testing.B) {
	benchmarkRead(b, func(ep Endpoints) string { return "tcp://" + ep.TCP })
}

// BenchmarkRTURead is a full RTU round trip over the pseudo-terminal,
// t3.5 framing included.
func BenchmarkRTURead(b *testing.B) {
	benchmarkRead(b, func(ep Endpoints) string { return "rtu://" + ep.RTU })
}
