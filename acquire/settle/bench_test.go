package settle

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"
)

// BenchmarkAddStatus measures one poll's work (Add then Status) on a full
// window; the figure must stay flat as the window grows.
func BenchmarkAddStatus(b *testing.B) {
	const dt = 100 * time.Millisecond
	for _, n := range []int{10, 100, 1_000, 10_000, 100_000} {
		b.Run(fmt.Sprintf("window=%d", n), func(b *testing.B) {
			d := mustNew(b, Rules{Window: time.Duration(n) * dt, MinSamples: 3, MaxDrift: 1, MaxSpread: 1, MaxRange: 10})
			rng := rand.New(rand.NewPCG(1, 1))
			at := t0
			add := func() {
				at = at.Add(dt)
				if err := d.Add(at, 1.6e6+rng.NormFloat64()); err != nil {
					b.Fatal(err)
				}
			}
			for range 2 * n {
				add()
			}
			var settled int
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				add()
				if d.Status().Settled {
					settled++
				}
			}
			_ = settled
		})
	}
}
