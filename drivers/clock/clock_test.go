package clock

import (
	"testing"
	"time"
)

// A Timer re-armed before its wait was received waits anew: the earlier
// wait is dropped, not delivered (a poller re-arms after every read).
func TestTimerResetDropsTheEarlierWait(t *testing.T) {
	for _, tc := range []struct {
		name string
		clk  Clock
	}{
		{"wall", Wall{}},
		{"scaled 100×", NewScaled(100)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tm := NewTimer(tc.clk)
			tm.Reset(time.Millisecond)
			time.Sleep(50 * time.Millisecond) // the first wait is over, unread
			tm.Reset(time.Hour)
			select {
			case <-tm.C():
				t.Fatal("a wait of an hour ended at once: the earlier wait was delivered")
			case <-time.After(100 * time.Millisecond):
			}
			tm.Reset(time.Millisecond)
			select {
			case <-tm.C():
			case <-time.After(5 * time.Second):
				t.Fatal("a wait of a millisecond did not end")
			}
			tm.Reset(time.Millisecond)
			tm.Stop()
			select {
			case <-tm.C():
				t.Fatal("a stopped timer delivered")
			case <-time.After(100 * time.Millisecond):
			}
		})
	}
}

// On the scaled clock a Timer waits the clock's time: a simulated minute
// at 600× is a tenth of a second of wall time.
func TestScaledTimerWaitsClockTime(t *testing.T) {
	c := NewScaled(600)
	tm := NewTimer(c)
	start := c.Now()
	tm.Reset(time.Minute)
	select {
	case <-tm.C():
	case <-time.After(10 * time.Second):
		t.Fatal("a simulated minute at 600× did not end within 10 s")
	}
	if got := c.Now().Sub(start); got < time.Minute {
		t.Errorf("the wait ended after %v of clock time, before the minute", got)
	}
}

// On the manual clock a Timer's wait is one of the clock's waits: it counts
// in Waiting and ends when the clock is advanced past it, not before.
func TestManualTimer(t *testing.T) {
	c := NewManual(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
	tm := NewTimer(c)
	if tm.C() != nil {
		t.Fatal("a timer never armed has a channel")
	}
	tm.Reset(time.Second)
	if n := c.Waiting(); n != 1 {
		t.Fatalf("Waiting() = %d after Reset, want 1", n)
	}
	c.Advance(500 * time.Millisecond)
	select {
	case <-tm.C():
		t.Fatal("the wait ended half-way")
	default:
	}
	c.Advance(500 * time.Millisecond)
	select {
	case <-tm.C():
	default:
		t.Fatal("the wait did not end when the clock reached it")
	}
}
