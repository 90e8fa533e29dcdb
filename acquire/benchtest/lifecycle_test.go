package benchtest

import (
	"errors"
	"strings"
	"sync/atomic"
	"testing"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/config"
)

// stateFails is a store whose state writes fail while on.
type stateFails struct {
	acquire.Store
	on atomic.Bool
}

func (s *stateFails) SetState(id store.RunID, st store.State, reason string) (store.Run, error) {
	if s.on.Load() {
		return store.Run{}, errors.New("read-only file system (injected)")
	}
	return s.Store.SetState(id, st, reason)
}

// A state write that fails leaves no run "running" behind the engine's
// back: a second start is refused while the store holds the unfinished run,
// stop ends it, and then a new run starts.
func TestFailedStateWriteLeavesNoHiddenRun(t *testing.T) {
	t.Parallel()
	fake := &stateFails{}
	b := bench(t, shortCycle, withStore(func(st *store.Store) acquire.Store { fake.Store = st; return fake }))
	first, err := b.eng.Start("first")
	if err != nil {
		t.Fatal(err)
	}
	fake.on.Store(true)
	if err := b.eng.Stop("stopped while the disk is read-only"); err != nil {
		t.Fatal(err)
	}
	if run, err := b.st.Run(first); err != nil || run.State.Terminal() {
		t.Fatalf("stored run %+v (%v): the injected failure did not bite", run, err)
	}
	fake.on.Store(false)
	_, err = b.eng.Start("second")
	if !errors.Is(err, acquire.ErrBusy) || !strings.Contains(err.Error(), first.String()) {
		t.Fatalf("second start: %v, want a refusal naming %s", err, first)
	}
	if err := b.eng.Stop("end the run left unfinished"); err != nil {
		t.Fatal(err)
	}
	if run, _ := b.st.Run(first); run.State != store.StateStopped {
		t.Fatalf("left-over run is %s, want stopped", run.State)
	}
	second, err := b.eng.Start("second")
	if err != nil {
		t.Fatal(err)
	}
	if err := b.eng.Stop("done"); err != nil {
		t.Fatal(err)
	}
	if run, _ := b.st.Run(second); run.State != store.StateStopped {
		t.Errorf("second run is %s", run.State)
	}
}

// No decision rule is assumed: without one a run does not start, and the
// refusal says how to choose.
func TestNoDecisionRuleNoRun(t *testing.T) {
	t.Parallel()
	b := bench(t, func(c *config.Config) { c.Procedure.Decision = "" })
	_, err := b.eng.Start("no rule")
	if err == nil || !strings.Contains(err.Error(), "procedure.decision") || !strings.Contains(err.Error(), "ILAC-G8") {
		t.Fatalf("start without a rule: %v", err)
	}
	if st := b.eng.Status(); st.Run != "" {
		t.Errorf("status shows run %s", st.Run)
	}
}
