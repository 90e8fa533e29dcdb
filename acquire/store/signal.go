package store

import "plateau/analysis"

// Signal is the NE 43 flag of a good sample read as a loop current: where
// its current lies in the NE 43 levels (analysis.ClassifyCurrent). It is
// taken from the stored value itself, so every file keeps it without a
// field of its own: a good sample outside the measuring band can only be a
// device under test's, since the reference's and the guard's are failed
// reads, and files written before such readings were kept hold none.
func (s Sample) Signal() analysis.Signal {
	if s.Failed || s.RawUnit != "mA" {
		return analysis.SignalNone
	}
	return analysis.ClassifyCurrent(s.Raw)
}
