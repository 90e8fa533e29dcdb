package acquire

import (
	"fmt"
	"log/slog"
	"time"

	"plateau/acquire/store"
)

// spaceReporter is a store that can say how much room its disk has left.
type spaceReporter interface {
	FreeBytes() (uint64, error)
}

// bytesPerSample is what one stored sample may take, with a margin (about
// twice) over the compact encoding of realistic data.
const bytesPerSample = 8

// ExpectedDuration is the least time the plan takes (PlanDuration);
// settling itself usually adds to it.
func (e *Engine) ExpectedDuration() time.Duration {
	least, _ := PlanDuration(e.cfg.Procedure, e.steps)
	return least
}

// bytesNeeded estimates what a whole run writes: every polled instrument's
// samples over the expected duration, plus a little for points and events.
func (e *Engine) bytesNeeded(d time.Duration) uint64 {
	var perSecond float64
	for _, p := range e.pollers() {
		if p.Interval() > 0 {
			perSecond += float64(time.Second) / float64(p.Interval())
		}
	}
	return uint64(perSecond*d.Seconds()*bytesPerSample) + 64<<10
}

// checkSpace refuses a start when the store's disk cannot hold the run.
func (e *Engine) checkSpace() error {
	sr, ok := e.st.(spaceReporter)
	if !ok {
		return nil
	}
	free, err := sr.FreeBytes()
	if err != nil {
		return nil // a disk that cannot say is judged by its writes
	}
	if need := e.bytesNeeded(e.ExpectedDuration()); free < need {
		return fmt.Errorf("the store's disk has %s free, and this run needs about %s: free space first", byteSize(free), byteSize(need))
	}
	return nil
}

// watchSpace warns once per run when the disk gets close to full: below
// 10 MiB and below twice what the rest of the run needs.
func (e *Engine) watchSpace(warned *store.RunID) {
	sr, ok := e.st.(spaceReporter)
	r := e.runs.active()
	if !ok || r == nil || *warned == r.id {
		return
	}
	free, err := sr.FreeBytes()
	if err != nil {
		return
	}
	if free < 10<<20 && free < 2*e.bytesNeeded(e.ExpectedDuration()) {
		*warned = r.id
		e.emit(r.id, slog.LevelWarn, "store", "", fmt.Sprintf("the store's disk has only %s free: free space before it runs out (the run pauses if it does)", byteSize(free)), nil)
	}
}

func byteSize(n uint64) string {
	switch {
	case n >= 1<<30:
		return fmt.Sprintf("%.1f GiB", float64(n)/(1<<30))
	case n >= 1<<20:
		return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20))
	}
	return fmt.Sprintf("%.0f KiB", float64(n)/(1<<10))
}
