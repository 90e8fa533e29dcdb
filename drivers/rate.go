package drivers

import (
	"sync"
	"time"
)

// Rate is what a gauge achieves: good reads per second of the acquisition
// clock over its most recent reads, the time of the newest and the count.
type Rate struct {
	PerSecond float64
	Last      time.Time
	Reads     uint64
}

// RateReporter is an optional ability of a Gauge: the rate it actually
// reads at. On a shared line (several units on one RS-485 port) that can be
// less than its poll interval asks for; status shows the two side by side.
type RateReporter interface {
	ReadRate() Rate
}

// rateWindow is how many recent reads the rate is taken over: enough to
// smooth one slow reply, few enough to follow a change within seconds.
const rateWindow = 32

// RateMeter records good reads. The zero value is ready; it is safe for
// concurrent use (the poller marks, status reads).
type RateMeter struct {
	mu    sync.Mutex
	times [rateWindow]time.Time
	n     uint64
}

// Mark records a good read at t.
func (m *RateMeter) Mark(t time.Time) {
	m.mu.Lock()
	m.times[m.n%rateWindow] = t
	m.n++
	m.mu.Unlock()
}

// Rate returns the achieved rate over the recent reads (zero before two).
func (m *RateMeter) Rate() Rate {
	m.mu.Lock()
	defer m.mu.Unlock()
	r := Rate{Reads: m.n}
	if m.n == 0 {
		return r
	}
	k := min(m.n, rateWindow)
	newest := m.times[(m.n-1)%rateWindow]
	oldest := m.times[(m.n-k)%rateWindow]
	r.Last = newest
	if span := newest.Sub(oldest); k > 1 && span > 0 {
		r.PerSecond = float64(k-1) / span.Seconds()
	}
	return r
}
