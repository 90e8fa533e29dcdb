package record

import (
	"plateau/analysis"
	"plateau/config"
)

// loopOf is the output of the device under test read by the named
// instrument ("" for the only device), with the loop meter described with
// the reference; nil when the device is not read as a 4–20 mA current.
func loopOf(cfg *config.Config, instrument string) *analysis.Loop {
	lo, hi, ok := cfg.OutputLoop(instrument)
	if !ok {
		return nil
	}
	m := cfg.Reference.LoopMeter
	return &analysis.Loop{LowerPa: lo, UpperPa: hi, Meter: analysis.LoopMeter{
		PercentOfReading: m.UncertaintyPct, FloorMA: m.FloorMA, K: m.Coverage, ResolutionMA: m.ResolutionMA}}
}
