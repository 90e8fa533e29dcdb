package api

import (
	"context"
	"log/slog"
	"slices"
	"testing"
	"time"

	"plateau/acquire/store"
)

// BenchmarkCommitToViewer measures how long an event takes from the end of
// its store commit (bbolt Update with fsync returned) to its arrival, parsed,
// in a viewer following the stream through the Go client — over the unix
// socket and over loopback TCP. The target is 100 ms; the figures reported
// are the median, the 99th percentile and the worst case.
func BenchmarkCommitToViewer(b *testing.B) {
	for _, transport := range []string{"unix", "tcp"} {
		b.Run(transport, func(b *testing.B) {
			h := newHarness(b, harnessOptions{})
			c := h.unix
			if transport == "tcp" {
				c = h.http
			}
			got := make(chan time.Time, 1)
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan struct{})
			go func() {
				defer close(done)
				c.Follow(ctx, FollowOptions{}, func(store.Event) error { got <- time.Now(); return nil })
			}()
			defer func() { cancel(); <-done }()
			// Wait until the viewer is attached.
			waitFor(b, func() bool { return metric(b, h.http, "plateau_stream_viewers") == "1" })
			lat := make([]time.Duration, 0, b.N)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				ev := store.Event{Run: 1, Level: slog.LevelInfo, Instrument: "ref", Type: "point", Message: "point captured"}
				id, err := h.st.AddEvent(ev)
				if err != nil {
					b.Fatal(err)
				}
				committed := time.Now()
				ev.ID = id
				h.bench.feed.publish(ev)
				lat = append(lat, (<-got).Sub(committed))
			}
			b.StopTimer()
			slices.Sort(lat)
			ms := func(d time.Duration) float64 { return float64(d) / 1e6 }
			b.ReportMetric(ms(lat[len(lat)/2]), "ms-p50")
			b.ReportMetric(ms(lat[len(lat)*99/100]), "ms-p99")
			b.ReportMetric(ms(lat[len(lat)-1]), "ms-max")
			if worst := lat[len(lat)-1]; worst > 100*time.Millisecond {
				b.Errorf("an event took %v from commit to viewer; the target is 100 ms", worst)
			}
		})
	}
}
