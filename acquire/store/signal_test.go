package store

import (
	"testing"
	"time"

	"plateau/analysis"
	"plateau/drivers"
)

// A device's loop currents outside the NE 43 band (REFERENCES.md §7: 3.8–20.5
// mA) are stored as good samples and read back with their flag; a pressure
// and a failed read have none.
func TestSampleSignalSurvivesTheStore(t *testing.T) {
	s, _ := openTest(t, Options{})
	run := newRun(t, s)
	cases := []struct {
		r    drivers.Reading
		err  error
		want analysis.Signal
	}{
		{drivers.Reading{Raw: 3.70, RawUnit: "mA", Pa: -18750}, nil, analysis.SignalUnderRange},
		{drivers.Reading{Raw: 12, RawUnit: "mA", Pa: 8e5}, nil, analysis.SignalNone},
		{drivers.Reading{Raw: 3.8, RawUnit: "mA", Pa: -12500}, nil, analysis.SignalSaturated},
		{drivers.Reading{Raw: 20.8, RawUnit: "mA", Pa: 16.8e5}, nil, analysis.SignalOverRange},
		{drivers.Reading{Raw: 3.70, RawUnit: "bar", Pa: 3.7e5}, nil, analysis.SignalNone},
		{drivers.Reading{}, drivers.Fail("ref", drivers.KindOutOfRange, drivers.ErrLoopFault), analysis.SignalNone},
	}
	for i, c := range cases {
		c.r.Time = t0.Add(time.Duration(i) * time.Second)
		if err := s.Put(run.ID, "dut", SampleOf(c.r, c.err)); err != nil {
			t.Fatal(err)
		}
	}
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	i := 0
	err := s.Samples(run.ID, "dut", t0, t0.Add(time.Minute), func(smp Sample) error {
		if got := smp.Signal(); got != cases[i].want {
			t.Errorf("sample %d (%g %s): %q, want %q", i, smp.Raw, smp.RawUnit, got, cases[i].want)
		}
		i++
		return nil
	})
	if err != nil || i != len(cases) {
		t.Fatalf("read %d samples: %v", i, err)
	}
}
