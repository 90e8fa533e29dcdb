package main

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/poll"
	"plateau/analysis/units"
)

// waitingDial is a bench whose dial waits for a reading.
type waitingDial struct{}

func (waitingDial) Status() acquire.Status {
	return acquire.Status{Instruments: []poll.State{{Name: "dial", Waiting: "cycle 1 up point 2"}}}
}
func (waitingDial) Enter(acquire.Entry) error { return errors.New("no entry expected") }

// With a pressure balance the dial prompt says what to load, not just the
// pressure to set.
func TestDialPromptNamesLoading(t *testing.T) {
	for _, tc := range []struct {
		name    string
		loading func(float64) string
		want    string
	}{
		{"balance", func(float64) string { return "load P1+M1+M2 (≈ 8.000 bar)" }, "dial, cycle 1 up point 2: load P1+M1+M2 (≈ 8.000 bar), read the dial: "},
		{"no planned loading", func(float64) string { return "" }, "dial, cycle 1 up point 2: set 8.000 bar, read the dial: "},
		{"no balance", nil, "dial, cycle 1 up point 2: set 8.000 bar, read the dial: "},
	} {
		t.Run(tc.name, func(t *testing.T) {
			lines := make(chan string)
			close(lines)
			var out strings.Builder
			p := &dialPrompt{bench: waitingDial{}, lines: lines, out: &out, show: display{unit: units.Bar, res: 1e2}, poll: time.Hour, loading: tc.loading}
			if err := p.ask(context.Background(), "dial", "cycle 1 up point 2", 8e5); !errors.Is(err, errInputClosed) {
				t.Fatalf("ask: %v, want the end of input", err)
			}
			if !strings.Contains(out.String(), tc.want) {
				t.Errorf("prompt %q, want %q", out.String(), tc.want)
			}
		})
	}
}
