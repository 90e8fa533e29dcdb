package sim

import (
	"testing"

	"plateau/drivers/clock"
)

// The write log keeps the newest commands in order and never grows past
// its bound, however long the bench serves.
func TestWriteLogIsBounded(t *testing.T) {
	b := &bank{clk: clock.Wall{}, ctl: &controller{}}
	for i := range 3 * maxWrites {
		b.logWrite(Write{Pa: float64(i)})
	}
	w := b.ctl.accepted()
	if len(w) > maxWrites || len(w) < maxWrites/2 || cap(b.ctl.writes) > 2*maxWrites {
		t.Fatalf("%d writes kept (capacity %d), want at most %d", len(w), cap(b.ctl.writes), maxWrites)
	}
	for i := 1; i < len(w); i++ {
		if w[i].Pa != w[i-1].Pa+1 {
			t.Fatalf("write %d is %v after %v: not in order", i, w[i].Pa, w[i-1].Pa)
		}
	}
	if last := w[len(w)-1].Pa; last != float64(3*maxWrites-1) {
		t.Errorf("newest write %v, want %d", last, 3*maxWrites-1)
	}
}
