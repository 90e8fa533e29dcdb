package record

import (
	"plateau/analysis"
	"plateau/analysis/balance"
	"plateau/config"
)

// balanceCoverage is the coverage factor of the line that stands for a
// pressure balance's budget: k = 2, as the certificate states it.
const balanceCoverage = 2

// withBalance gives a pressure balance reference the uncertainty of its own
// budget: the line (% of reading plus a floor) that covers the expanded
// uncertainty of every loading the run uses (config.Balance.PlannedResults),
// at the balance's reference level. The head to each device stays the
// run's head correction with its own terms, as for any reference, so it is
// not counted twice. The reference: section's line is then not used.
func withBalance(cfg *config.Config, ref *analysis.Reference) {
	b := cfg.ReferenceBalance()
	if b == nil {
		return
	}
	results, err := b.PlannedResults()
	if err != nil || len(results) == 0 {
		// A validated section always has a pressure for its loadings; a
		// section built in code without them keeps the reference: line.
		return
	}
	ref.PercentOfReading, ref.FloorPa = balance.Cover(results, balanceCoverage)
	ref.K = balanceCoverage
}
