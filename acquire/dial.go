package acquire

import (
	"context"
	"fmt"
	"log/slog"

	"plateau/acquire/settle"
	"plateau/analysis"
	"plateau/analysis/units"
	"plateau/drivers"
)

// captureDial pairs the settled reference window with one reading of an
// analog dial typed by a person (or by the simulated operator). In
// set-by-device mode the pointer is brought onto the scale mark and the DUT
// reading is the mark itself.
func (e *Engine) captureDial(ctx context.Context, r *activeRun, s Step, rs PollerState, note string) (analysis.Point, error) {
	asked := e.clk.Now()
	how := "read the dial and enter its indication"
	if e.cfg.Procedure.Compare == "set-by-device" {
		how = "bring the pointer exactly onto the mark, then confirm by entering the mark's value"
	}
	e.emit(r.id, slog.LevelInfo, "enter", e.dut.Name,
		fmt.Sprintf("%s: %s (target %s)", s, how, e.fmtPa(s.TargetPa)), map[string]float64{"target_pa": s.TargetPa})
	deadline := asked.Add(e.cfg.Procedure.Timeout)
	for {
		rd, err := e.dial.Read(ctx)
		if ctx.Err() != nil {
			return analysis.Point{}, ctx.Err()
		}
		// record stores the reading (good or failed) once and counts it.
		e.dut.record(rd, err)
		if err == nil && !rd.Time.Before(asked) {
			// The reference window is taken again now, so that it covers
			// the moment the person read the dial.
			ref := e.ref.State()
			if !ref.Settled {
				ref = rs
			}
			dut := analysis.Window{Mean: rd.Pa, Count: 1, Start: rd.Time, End: rd.Time}
			if e.cfg.Procedure.Compare == "set-by-device" {
				dut.Mean = s.TargetPa
			}
			return analysis.Point{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index,
				Nominal: s.TargetPa, Reference: ref.Window, DUT: dut, Note: note}, nil
		}
		if e.clk.Now().After(deadline) {
			return analysis.Point{}, &missedError{fmt.Sprintf("no dial reading entered within %s", e.cfg.Procedure.Timeout)}
		}
		if err != nil && drivers.KindOf(err) != drivers.KindTimeout {
			e.log.Warn("dial reading not usable", "err", err)
		}
		if err := e.sleep(ctx, e.tick()); err != nil {
			return analysis.Point{}, err
		}
	}
}

// freeRun has no plan: every plateau that both instruments hold for a full
// window becomes a point, for benches where the pressure is set by hand.
// The direction of each point follows from the previous plateau.
func (e *Engine) freeRun(ctx context.Context, r *activeRun) error {
	existing, err := e.st.Points(r.id)
	if err != nil {
		return fmt.Errorf("read captured points: %w", err)
	}
	last, have := 0.0, false
	dir := analysis.Ascending
	n := len(existing)
	if n > 0 {
		last, have, dir = existing[n-1].Reference.Mean, true, existing[n-1].Direction
	}
	e.emit(r.id, slog.LevelInfo, "step", "", "free run: every plateau both instruments hold for a full window becomes a point", nil)
	e.ref.restart(e.clk.Now(), 0, false)
	e.dut.restart(e.clk.Now(), 0, false)
	for {
		if err := e.waitWhilePaused(ctx, r); err != nil {
			return err
		}
		if err := e.sleep(ctx, e.tick()); err != nil {
			return err
		}
		rs, ds := e.ref.State(), e.dut.State()
		if !settle.Both(rs.Settle, ds.Settle) {
			continue
		}
		p := rs.Window.Mean
		if have && abs(p-last) <= e.band() {
			continue // the same plateau as the last point
		}
		if have {
			if p > last {
				dir = analysis.Ascending
			} else {
				dir = analysis.Descending
			}
		}
		pt := analysis.Point{Cycle: 1, Direction: dir, Kind: analysis.Measurement, Index: n,
			Nominal: p, Reference: rs.Window, DUT: ds.Window}
		if err := e.commitPoint(r, pt); err != nil {
			return err
		}
		n++
		last, have = p, true
		// the next plateau must be a fresh window
		now := e.clk.Now()
		e.ref.restart(now, 0, false)
		e.dut.restart(now, 0, false)
	}
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

// formatIn prints a pressure in the named unit.
func formatIn(pa float64, unit string) string {
	u, err := units.Lookup(unit)
	if err != nil {
		return fmt.Sprintf("%.6g Pa", pa)
	}
	return fmt.Sprintf("%.6g %s", u.FromPa(pa), u.Symbol)
}
