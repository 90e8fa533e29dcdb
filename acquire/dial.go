package acquire

import (
	"context"
	"fmt"
	"log/slog"
	"math"
	"time"

	"plateau/acquire/settle"
	"plateau/analysis"
	"plateau/analysis/units"
	"plateau/drivers"
)

// captureDial pairs a reading of an analog dial, typed by a person (or by
// the simulated operator), with the reference window that was settled when
// the dial was read. In set-by-device mode the pointer must stand on the
// scale mark: an entry off the mark is refused, and with a pressure source
// the setpoint is corrected by the difference and the dial read again.
func (e *Engine) captureDial(ctx context.Context, r *activeRun, s Step, note string) (analysis.Point, error) {
	// Zero readings are taken vented: there is no mark to set the pointer on.
	onMark := e.cfg.Procedure.Compare == "set-by-device" && s.PointKind == analysis.Measurement
	deadline := e.clk.Now().Add(e.cfg.Procedure.Timeout)
	how := "read the dial and enter its indication"
	if onMark {
		how = "bring the pointer exactly onto the mark, then enter the mark's value"
	}
	for adjust := 0; ; adjust++ {
		asked := e.clk.Now()
		e.emit(r.id, slog.LevelInfo, "enter", e.dut.Name,
			fmt.Sprintf("%s: %s (target %s)", s, how, e.fmtPa(s.TargetPa)), map[string]float64{"target_pa": s.TargetPa})
		rd, err := e.nextDialReading(ctx, asked, deadline)
		if err != nil {
			return analysis.Point{}, err
		}
		// The reference window must be settled and cover the moment the
		// dial was read; an older window is never paired with the entry.
		ref := e.ref.State()
		if !ref.Settled || rd.Time.Before(ref.Window.Start) || !e.current(ref, rd.Time) {
			e.emit(r.id, slog.LevelWarn, "enter", e.dut.Name,
				fmt.Sprintf("%s: the reference was not steady when the dial was read; waiting for it, then read the dial again", s), nil)
			if err := e.waitReferenceSettled(ctx, deadline); err != nil {
				return analysis.Point{}, err
			}
			continue
		}
		if off := s.TargetPa - rd.Pa; onMark && math.Abs(off) > e.cfg.Device.ResolutionPa/2*(1+1e-9) {
			if next := e.setpoint + off; e.source != nil && next < e.cfg.Device.LowerPa {
				// Below the lower range value the source cannot go (a vented
				// gauge at its stop): take the dial as it reads.
				note = joinNote(note, "pointer could not be brought onto the mark; taken as read")
			} else if e.source == nil || adjust >= 5 {
				e.emit(r.id, slog.LevelWarn, "enter", e.dut.Name,
					fmt.Sprintf("%s: the entry %s is not the mark %s: bring the pointer onto the mark and enter again", s, e.fmtPa(rd.Pa), e.fmtPa(s.TargetPa)), nil)
				continue
			} else {
				// Move the pressure by what the pointer is off the mark.
				if err := e.setPressure(ctx, r, e.setpoint+off, "(bringing the pointer onto the mark)"); err != nil {
					return analysis.Point{}, err
				}
				e.ref.restart(e.clk.Now().Add(e.cfg.Procedure.Hold), 0, false)
				if err := e.waitReferenceSettled(ctx, deadline); err != nil {
					return analysis.Point{}, err
				}
				continue
			}
		}
		dut := analysis.Window{Mean: rd.Pa, Count: 1, Start: rd.Time, End: rd.Time}
		return analysis.Point{Cycle: s.Cycle, Direction: s.Direction, Kind: s.PointKind, Index: s.Index,
			Nominal: s.TargetPa, Reference: ref.Window, DUT: dut, Note: note}, nil
	}
}

// nextDialReading waits for a dial reading entered after asked.
func (e *Engine) nextDialReading(ctx context.Context, asked, deadline time.Time) (drivers.Reading, error) {
	for {
		rd, err := e.dial.Read(ctx)
		if ctx.Err() != nil {
			return drivers.Reading{}, ctx.Err()
		}
		// record stores the reading (good or failed) once and counts it.
		e.dut.record(rd, err)
		if err == nil && !rd.Time.Before(asked) {
			return rd, nil
		}
		if e.clk.Now().After(deadline) {
			return drivers.Reading{}, &missedError{fmt.Sprintf("no dial reading entered within %s", e.cfg.Procedure.Timeout)}
		}
		if err != nil && drivers.KindOf(err) != drivers.KindTimeout {
			e.log.Warn("dial reading not usable", "err", err)
		}
		if err := e.sleep(ctx, e.tick()); err != nil {
			return drivers.Reading{}, err
		}
	}
}

// waitReferenceSettled waits until the reference holds a live settled window.
func (e *Engine) waitReferenceSettled(ctx context.Context, deadline time.Time) error {
	for {
		now := e.clk.Now()
		if st := e.ref.State(); st.Settled && e.current(st, now) {
			return nil
		}
		if now.After(deadline) {
			return &missedError{"the reference did not settle: " + e.ref.State().Why}
		}
		if err := e.sleep(ctx, e.tick()); err != nil {
			return err
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
		if have && math.Abs(p-last) <= e.band() {
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

// formatIn prints a pressure in the named unit.
func formatIn(pa float64, unit string) string {
	u, err := units.Lookup(unit)
	if err != nil {
		return fmt.Sprintf("%.6g Pa", pa)
	}
	return fmt.Sprintf("%.6g %s", u.FromPa(pa), u.Symbol)
}

func joinNote(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}
