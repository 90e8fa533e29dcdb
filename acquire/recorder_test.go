package acquire

import (
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/drivers"
)

// countingStore takes samples and counts them; the rest of Store is not
// used by the recorder's hand-off.
type countingStore struct {
	Store
	puts int
}

func (c *countingStore) Put(store.RunID, string, store.Sample) error { c.puts++; return nil }

// The hand-off allocates nothing per batch in the steady state (two arrays
// take turns), and an array grown while the store lagged is let go rather
// than held for the daemon's lifetime.
func TestRecorderReusesItsBatches(t *testing.T) {
	st := &countingStore{}
	r := newRecorder(st, 1<<16, func(err error) { t.Error(err) })
	r.setRun(1)
	rd := drivers.Reading{Time: time.Unix(1_700_000_000, 0), Pa: 1e5, Raw: 1, RawUnit: "bar"}
	batch := func(n int) {
		for range n {
			r.Sample("ref", rd, nil)
		}
		r.putPending()
	}
	batch(recorderBatch) // both arrays exist from here on (AllocsPerRun adds a warm-up run to its 50)
	batch(recorderBatch)
	if allocs := testing.AllocsPerRun(50, func() { batch(recorderBatch) }); allocs != 0 {
		t.Errorf("%.1f allocations per batch of %d samples, want none", allocs, recorderBatch)
	}
	batch(20 * recorderBatch) // the store lagged
	if c := cap(r.spare); c > 4*recorderBatch {
		t.Errorf("kept an array of %d items after a burst", c)
	}
	batch(recorderBatch)
	batch(recorderBatch)
	if c := cap(r.pending); c > 4*recorderBatch {
		t.Errorf("the hand-off still holds %d items of room after the burst", c)
	}
	if want := (2 + 51 + 20 + 2) * recorderBatch; st.puts != want {
		t.Errorf("%d samples handed to the store, want %d", st.puts, want)
	}
}
