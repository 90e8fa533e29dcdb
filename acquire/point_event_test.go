package acquire_test

import (
	"strings"
	"testing"
	"time"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/config"
)

// A transmitter whose zero output is 3.70 mA (a scenario of our own: the
// fake device reads 0.30 bar low on a 0–16 bar loop, 0.30 mA): the live
// log's event of each zero point names its NE 43 flag, and the points in
// the band carry none. NE 43 band 3.8–20.5 mA (REFERENCES.md §7).
func TestPointEventNamesTheOutputFlag(t *testing.T) {
	t.Parallel()
	b := newFakeBenchOf(t, func(c *config.Config) {
		c.Instruments[1].Loop = config.CurrentLoop{Enabled: true, LowerPa: 0, UpperPa: 16e5}
	}, nil, func(m *fakeModel) []acquire.Instrument {
		return []acquire.Instrument{{Name: "dut", Gauge: fakeGauge{m: m, offset: -0.30e5}, Poll: 100 * time.Millisecond}}
	})
	if _, err := b.eng.Start("as found"); err != nil {
		t.Fatal(err)
	}
	if st, why := b.waitEnd(t); st != store.StateFinished {
		t.Fatalf("run ended %s: %s", st, why)
	}
	evs, err := b.st.Events(0, 10000)
	if err != nil {
		t.Fatal(err)
	}
	flagged, plain := 0, 0
	for _, ev := range evs {
		if ev.Type != "point" {
			continue
		}
		zero := strings.Contains(ev.Message, "reference 0.000 bar")
		named := strings.HasSuffix(ev.Message, "; output under-range, below the NE 43 measuring band (3.8–20.5 mA)")
		if zero != named {
			t.Errorf("point event %q: zero %v, flag named %v", ev.Message, zero, named)
		}
		if named {
			flagged++
		} else {
			plain++
		}
	}
	if flagged == 0 || plain == 0 {
		t.Errorf("%d flagged and %d plain point events, want some of each", flagged, plain)
	}
}
