package acquire

import (
	"context"
	"fmt"
	"log/slog"
	"time"

	"plateau/acquire/safety"
	"plateau/acquire/store"
)

// tripped is the safety guard's report, on a goroutine of its own: the run
// is paused with the reason, resumable by a person once they have looked,
// so that one spike does not cost an unattended night.
func (e *Engine) tripped(t safety.Trip) {
	msg := "safety trip: " + t.Reason
	if e.source != nil {
		msg += "; no further setpoint is sent and the source is being vented"
	}
	data := map[string]string{"reason": t.Reason}
	r := e.runs.active()
	if r == nil {
		e.emit(0, slog.LevelError, "safety", e.ref.Name, msg, data)
		return
	}
	msg += "; run paused: look at the bench, then resume (plateau resume) or stop it"
	r.gate.set(true, "safety: "+t.Reason)
	_ = e.runs.setState(r.id, store.StatePaused, "safety: "+t.Reason, e.clk.Now())
	e.emit(r.id, slog.LevelError, "safety", e.ref.Name, msg, data)
}

// ventedAfterTrip reports how the guard's vent went.
func (e *Engine) ventedAfterTrip(err error) {
	run := store.RunID(0)
	if r := e.runs.active(); r != nil {
		run = r.id
	}
	if err != nil {
		e.emit(run, slog.LevelError, "safety", "", fmt.Sprintf("vent after the safety trip failed (%v): still trying; vent the system by hand", err), nil)
		return
	}
	e.emit(run, slog.LevelWarn, "safety", "", "source vented after the safety trip", nil)
}

// storeTrouble is called whenever the store cannot take what it is given.
// The first report of a fault trips the guard (vent, latch, pause the run):
// a run must not go on capturing what cannot be kept.
func (e *Engine) storeTrouble(err error) {
	msg := err.Error()
	if !e.storeFault.CompareAndSwap(nil, &msg) {
		return
	}
	e.faultAt.Store(time.Now().UnixNano())
	e.log.Error("the store cannot write", "err", err)
	// Hold the procedure at once, before the guard's report arrives: the
	// step that could not be stored is done again after the resume.
	if r := e.runs.active(); r != nil {
		r.gate.set(true, "safety: the store cannot write: "+msg)
	}
	e.guard.Trip("the store cannot write: " + msg)
}

// watchStore follows the store writer: a failed commit is a store fault;
// once a write succeeds again the fault is cleared (the run stays paused
// until a person resumes it).
func (e *Engine) watchStore(ctx context.Context) {
	t := time.NewTicker(200 * time.Millisecond)
	defer t.Stop()
	probe, spaced := time.Time{}, time.Time{}
	var warned store.RunID
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		if time.Since(spaced) > 5*time.Second {
			spaced = time.Now()
			e.watchSpace(&warned)
		}
		ws := e.st.WriterStatus()
		if ws.Err != nil {
			e.storeTrouble(ws.Err)
			continue
		}
		// A fault is probed again no sooner than two seconds after it was
		// seen, and then every two seconds.
		if e.storeFault.Load() == nil || ws.Pending > 0 || time.Since(probe) < 2*time.Second ||
			time.Since(time.Unix(0, e.faultAt.Load())) < 2*time.Second {
			continue
		}
		// Try a real write: an event saying the store works again.
		probe = time.Now()
		run := store.RunID(0)
		if r := e.runs.active(); r != nil {
			run = r.id
		}
		ev := store.Event{Time: e.clk.Now(), Run: run, Level: slog.LevelWarn, Type: "store",
			Message: "the store writes again; resume the run when ready (plateau resume)"}
		id, err := e.st.AddEvent(ev)
		if err != nil {
			continue
		}
		ev.ID = id
		e.storeFault.Store(nil)
		e.log.Warn(ev.Message, "type", ev.Type, "run", run.String())
		e.bus.Publish(ev)
	}
}
