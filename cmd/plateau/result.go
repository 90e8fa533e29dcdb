package main

import (
	"fmt"
	"io"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/config"
)

// runResult is a run's evaluation with what a report needs besides it.
type runResult struct {
	Result analysis.Result
	Points []analysis.Point
}

// evaluate analyses the captured points of a run with the configuration's
// device, reference and decision rule.
func evaluate(st *store.Store, cfg *config.Config, id store.RunID) (*runResult, error) {
	pts, err := st.Points(id)
	if err != nil {
		return nil, fmt.Errorf("read points of %s: %w", id, err)
	}
	dev, ref, opt := acquire.AnalysisInputs(cfg)
	res, err := analysis.Analyze(pts, dev, ref, opt)
	if err != nil {
		return nil, fmt.Errorf("analyse %s: %w", id, err)
	}
	return &runResult{Result: res, Points: pts}, nil
}

func printResult(w io.Writer, cfg *config.Config, id store.RunID, r *runResult) error {
	fmt.Fprintf(w, "run %s: %d points, decision (%s): %s\n", id, len(r.Points), r.Result.DecisionRule, r.Result.Decision)
	return nil
}

// writeHTMLReport renders a run's report to path.
func writeHTMLReport(path string, cfg *config.Config, id store.RunID, r *runResult) error {
	return fmt.Errorf("html report for %s: not available yet", id)
}
