package acquire

import "plateau/analysis"

// outputSignal flags a point of a device read as a 4–20 mA current by
// where its mean current lies in the NE 43 levels, so that the stored
// point keeps what the bench saw (a zero of 3.70 mA is under range, and a
// point all the same). Other devices' points carry no flag.
func (e *Engine) outputSignal(p analysis.Point) analysis.Signal {
	lo, hi, ok := e.cfg.OutputLoop(p.Device)
	if !ok {
		return analysis.SignalNone
	}
	return analysis.ClassifyCurrent(analysis.Loop{LowerPa: lo, UpperPa: hi}.MilliAmps(p.DUT.Mean))
}
