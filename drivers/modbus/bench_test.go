package modbus

import (
	"context"
	"os/exec"
	"strconv"
	"strings"
	"testing"
	"time"

	"plateau/config"
)

// BenchmarkReadTCP reads a float32 (2 registers) from the libmodbus server
// over loopback, through the whole driver (bus goroutine, decode, Pa). Next
// to it, libmodbus's own C client does the same read in a loop against the
// same server, as the third-party yardstick ("libmodbus-reads/s").
func BenchmarkReadTCP(b *testing.B) {
	port, _ := startTCPPeer(b, 0)
	const n = 5000
	// The peer serves one connection at a time: the C client goes first.
	out, err := exec.Command(peerBinary(b), "bench", strconv.Itoa(port), strconv.Itoa(n)).CombinedOutput()
	if err != nil {
		b.Fatalf("libmodbus client: %v\n%s", err, out)
	}
	f := strings.Fields(string(out))
	secs, _ := strconv.ParseFloat(f[1], 64)

	g := mustOpen(b, inst("ref", config.LinkModbusTCP, "127.0.0.1:"+strconv.Itoa(port),
		config.ValueRead{Register: 10, Type: "float32"}))
	ctx := context.Background()
	if _, err := g.Read(ctx); err != nil { // connect outside the timing
		b.Fatal(err)
	}
	b.ResetTimer()
	start := time.Now()
	for b.Loop() {
		if _, err := g.Read(ctx); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/time.Since(start).Seconds(), "reads/s")
	b.ReportMetric(n/secs, "libmodbus-reads/s")
}
