package config

import (
	"bytes"
	"fmt"
	"os"
	"strings"
	"testing"
)

// BenchmarkParse: what a file costs to refuse or accept. The figures are
// in the README's configuration section; the cost grows with the size of
// the file, not with its square.
func BenchmarkParse(b *testing.B) {
	sim, err := os.ReadFile("../testdata/config/sim.yaml")
	if err != nil {
		b.Fatal(err)
	}
	keys := func(n int) []byte {
		var s strings.Builder
		for i := 0; i < n; i++ {
			fmt.Fprintf(&s, "k%d: 1\n", i)
		}
		return []byte(s.String())
	}
	points := func(n int) []byte {
		var s strings.Builder
		s.WriteString(base + "procedure:\n  points:\n")
		for i := 0; i < n; i++ {
			s.WriteString("    - 1 bar\n")
		}
		return []byte(s.String())
	}
	for _, c := range []struct {
		name string
		data []byte
	}{
		{"sim.yaml", sim},
		{"unknown-keys-10000", keys(10000)},
		{"unknown-keys-80000", keys(80000)},
		{"points-80000", points(80000)},
		{"10MB", bytes.Repeat([]byte("# padding\n"), 1<<20)},
	} {
		b.Run(c.name, func(b *testing.B) {
			b.SetBytes(int64(len(c.data)))
			b.ReportAllocs()
			for b.Loop() {
				Parse(c.data, "bench.yaml")
			}
		})
	}
}
