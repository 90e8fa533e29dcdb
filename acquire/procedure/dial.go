package procedure

import (
	"context"
	"fmt"
	"log/slog"
	"math"
	"time"

	"plateau/acquire/poll"
	"plateau/analysis"
	"plateau/drivers"
)

// captureDial pairs a reading of an analog dial, typed by a person (or by
// the simulated operator), with the reference window that was settled when
// the dial was read. In set-by-device mode the pointer must stand on the
// scale mark: an entry off the mark is refused, and with a pressure source
// the setpoint is corrected by the difference and the dial read again.
func (p *Procedure) captureDial(ctx context.Context, s Step, d Device, note string) (analysis.Point, error) {
	// Zero readings are taken vented: there is no mark to set the pointer on.
	onMark := p.Settings.Compare == SetByDevice && s.PointKind == analysis.Measurement
	deadline := p.Clock.Now().Add(p.Settings.Timeout)
	how := "read the dial and enter its indication"
	if onMark {
		how = "bring the pointer exactly onto the mark, then enter the mark's value"
	}
	name := d.Dial.State().Name
	for adjust := 0; ; adjust++ {
		asked := p.Clock.Now()
		p.Rec.Event(slog.LevelInfo, "enter", name,
			fmt.Sprintf("%s: %s (target %s)", s, how, p.format(s.TargetPa)), map[string]float64{"target_pa": s.TargetPa})
		rd, err := p.nextDialReading(ctx, d.Dial, s, asked, deadline)
		if err != nil {
			return analysis.Point{}, err
		}
		// The reference window must be settled and cover the moment the
		// dial was read; an older window is never paired with the entry.
		ref := p.Ref.State()
		if !ref.Settled || rd.Time.Before(ref.Window.Start) || !ref.Live(rd.Time, p.Tick) {
			p.Rec.Event(slog.LevelWarn, "enter", name,
				fmt.Sprintf("%s: the reference was not steady when the dial was read; waiting for it, then read the dial again", s), nil)
			if err := p.waitReferenceSettled(ctx, deadline); err != nil {
				return analysis.Point{}, err
			}
			continue
		}
		if off := s.TargetPa - rd.Pa; onMark && math.Abs(off) > p.Settings.ResolutionPa/2*(1+1e-9) {
			if next := p.setpoint + off; p.Source != nil && next < p.Settings.LowerPa {
				// Below the lower range value the source cannot go (a vented
				// gauge at its stop): take the dial as it reads.
				note = joinNote(note, "pointer could not be brought onto the mark; taken as read")
			} else if p.Source == nil || adjust >= 5 {
				p.Rec.Event(slog.LevelWarn, "enter", name,
					fmt.Sprintf("%s: the entry %s is not the mark %s: bring the pointer onto the mark and enter again", s, p.format(rd.Pa), p.format(s.TargetPa)), nil)
				continue
			} else {
				// Move the pressure by what the pointer is off the mark.
				if err := p.setPressure(ctx, p.setpoint+off, "(bringing the pointer onto the mark)"); err != nil {
					return analysis.Point{}, err
				}
				p.Ref.Restart(p.Clock.Now().Add(p.Settings.Hold), 0, false)
				if err := p.waitReferenceSettled(ctx, deadline); err != nil {
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

// nextDialReading waits for a dial reading entered after asked. While it
// waits, the dial is "waiting for an entry": that is not a failed read.
func (p *Procedure) nextDialReading(ctx context.Context, dial Dial, s Step, asked, deadline time.Time) (drivers.Reading, error) {
	dial.SetWaiting(fmt.Sprintf("an entry for %s", s), s.TargetPa)
	defer dial.SetWaiting("", 0)
	for {
		rd, err := dial.Read(ctx)
		if ctx.Err() != nil {
			return drivers.Reading{}, ctx.Err()
		}
		if err == nil && !rd.Time.Before(asked) {
			return rd, nil
		}
		if p.Clock.Now().After(deadline) {
			return drivers.Reading{}, &Missed{fmt.Sprintf("no dial reading entered within %s", p.Settings.Timeout)}
		}
		if err != nil && drivers.KindOf(err) != drivers.KindTimeout {
			p.Log.Warn("dial reading not usable", "err", err)
		}
		if err := p.sleep(ctx, p.Tick); err != nil {
			return drivers.Reading{}, err
		}
	}
}

// free has no plan: every plateau that both instruments hold for a full
// window becomes a point, for benches where the pressure is set by hand.
// The direction of each point follows from the previous plateau.
func (p *Procedure) free(ctx context.Context) error {
	existing, err := p.Rec.Captured()
	if err != nil {
		return fmt.Errorf("read captured points: %w", err)
	}
	last, have := 0.0, false
	dir := analysis.Ascending
	n := 0 // plateaus so far: every device's point of one plateau has its index
	for _, pt := range existing {
		n = max(n, pt.Index+1)
	}
	if k := len(existing); k > 0 {
		last, have, dir = existing[k-1].Reference.Mean, true, existing[k-1].Direction
	}
	p.Rec.Progress(0, n, 0, "free run")
	p.Rec.Event(slog.LevelInfo, "step", "", "free run: every plateau both instruments hold for a full window becomes a point", nil)
	restart := func() {
		now := p.Clock.Now()
		p.Ref.Restart(now, 0, false)
		for _, d := range p.Devices {
			d.Inst.Restart(now, 0, false)
		}
	}
	restart()
	for {
		if err := p.Gate.Wait(ctx); err != nil {
			return err
		}
		if err := p.sleep(ctx, p.Tick); err != nil {
			if err == errPaused {
				restart() // a plateau never spans a pause
				continue
			}
			return err
		}
		rs, now := p.Ref.State(), p.Clock.Now()
		// Every device that answers must be settled with the reference;
		// one whose link is down does not hold up the others.
		var pairs []analysis.Window
		var who []Device
		waiting := false
		for _, d := range p.Devices {
			ds := d.Inst.State()
			switch {
			case poll.Paired(rs, ds, now, p.Tick):
				pairs, who = append(pairs, ds.Window), append(who, d)
			case ds.LastErr == "":
				waiting = true
			}
		}
		if waiting || len(pairs) == 0 {
			continue
		}
		at := rs.Window.Mean
		if have && math.Abs(at-last) <= p.band() {
			continue // the same plateau as the last point
		}
		if have {
			if at > last {
				dir = analysis.Ascending
			} else {
				dir = analysis.Descending
			}
		}
		for i, d := range who {
			pt := analysis.Point{Cycle: 1, Direction: dir, Kind: analysis.Measurement, Index: n,
				Nominal: at, Reference: rs.Window, DUT: pairs[i], Device: d.Label}
			if err := p.Rec.Point(pt); err != nil {
				return err
			}
		}
		n++
		last, have = at, true
		p.Rec.Progress(0, n, 0, "free run")
		restart() // the next plateau must be a fresh window
	}
}

func joinNote(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}
