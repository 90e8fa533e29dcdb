package main

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"plateau/acquire"
	"plateau/analysis/units"
)

// dialEntry is a reading as an operator typed it.
type dialEntry struct {
	Value float64
	Unit  string // empty: the device's unit
}

// parseDialEntry reads what an operator types for a dial reading: a number
// with a decimal point or a decimal comma ("4.05", "4,05", "-0.1"),
// optionally followed by a unit ("4.05 bar", "58.5psi").
func parseDialEntry(text string) (dialEntry, error) {
	t := strings.TrimSpace(text)
	if t == "" {
		return dialEntry{}, errors.New("the reading is empty: type the number the dial shows")
	}
	t, err := decimalPoint(text, t)
	if err != nil {
		return dialEntry{}, err
	}
	if v, err := strconv.ParseFloat(t, 64); err == nil {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return dialEntry{}, fmt.Errorf("reading %q is not a finite number", text)
		}
		return dialEntry{Value: v}, nil
	}
	q, err := units.ParseQuantity(t)
	if err != nil {
		return dialEntry{}, fmt.Errorf("reading %q: %w", text, err)
	}
	if q.Percent {
		return dialEntry{}, fmt.Errorf("reading %q: give the pressure as the dial shows it, not a percentage", text)
	}
	return dialEntry{Value: q.Value, Unit: q.Unit.Symbol}, nil
}

// decimalPoint reads a decimal comma, as many European dials and keyboards
// write it, as a point; a comma beside a point is a thousands separator we
// cannot read safely. text is the reading as typed, for the message.
func decimalPoint(text, t string) (string, error) {
	if strings.Count(t, ",") == 1 && !strings.Contains(t, ".") {
		return strings.Replace(t, ",", ".", 1), nil
	}
	if strings.Contains(t, ",") {
		return "", fmt.Errorf("reading %q: write one decimal separator and no thousands separator, e.g. 1234.5", text)
	}
	return t, nil
}

// parseAmbientEntry reads what an operator types for an ambient
// instrument of quantity k: a number ("23.4", "23,4", "-2") and, when it
// is not in the instrument's own unit, one of the quantity's units
// ("23.4 °C", "52%RH", "1013 hPa"). An empty Unit is the instrument's own.
func parseAmbientEntry(text string, k units.AmbientKind) (dialEntry, error) {
	t := strings.TrimSpace(text)
	if t == "" {
		return dialEntry{}, fmt.Errorf("the reading is empty: type the %s the instrument shows", k)
	}
	i := strings.IndexFunc(t, func(r rune) bool { return !strings.ContainsRune("+-0123456789.,", r) })
	if i < 0 {
		i = len(t)
	}
	num, err := decimalPoint(text, t[:i])
	if err != nil {
		return dialEntry{}, err
	}
	v, err := strconv.ParseFloat(num, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return dialEntry{}, fmt.Errorf("reading %q does not start with a number: type the %s as the instrument shows it, e.g. %s", text, k, ambientExample[k])
	}
	rest := strings.TrimSpace(t[i:])
	if rest == "" {
		return dialEntry{Value: v}, nil
	}
	u, err := units.LookupAmbient(k, rest)
	if err != nil {
		return dialEntry{}, fmt.Errorf("reading %q: %w", text, err)
	}
	return dialEntry{Value: v, Unit: u.Symbol}, nil
}

// ambientExample is a reading of each ambient quantity, for messages.
var ambientExample = map[units.AmbientKind]string{
	units.Temperature: "23.4 °C", units.Humidity: "52 %RH", units.Barometric: "1013.2 hPa",
}

// bench is what the prompt needs of the engine.
type dialBench interface {
	Status() acquire.Status
	Enter(acquire.Entry) error
}

// dialPrompt asks the operator at the terminal for each dial reading the
// run waits for. The reading is taken only after the operator has had the
// chance to correct it; an implausible one is taken only when confirmed.
type dialPrompt struct {
	bench dialBench
	lines <-chan string // closed at the end of input
	out   io.Writer
	show  display
	poll  time.Duration
	// loading is what to load on a pressure balance for a target
	// ("load P1+M1+M2 (≈ 8.000 bar)"); nil or "": set the target.
	loading func(targetPa float64) string
}

// readLines delivers the lines of r until it ends; the channel is then
// closed.
func readLines(r io.Reader) <-chan string {
	ch := make(chan string)
	go func() {
		defer close(ch)
		sc := bufio.NewScanner(r)
		for sc.Scan() {
			ch <- sc.Text()
		}
	}()
	return ch
}

// waiting is the first dial that waits for a reading, if any: its name,
// what it waits for, and the step's target.
func waiting(st acquire.Status) (name, what string, targetPa float64, ok bool) {
	for _, in := range st.Instruments {
		if in.Waiting != "" {
			return in.Name, in.Waiting, in.WaitingForPa, true
		}
	}
	return "", "", 0, false
}

// stillWaiting says whether the dial name still waits for what.
func stillWaiting(st acquire.Status, name, what string) bool {
	for _, in := range st.Instruments {
		if in.Name == name {
			return in.Waiting == what
		}
	}
	return false
}

// errInputClosed ends the prompting when standard input ends.
var errInputClosed = errors.New("standard input ended: no more dial readings can be typed")

// ask runs one prompt for the dial name waiting for what; it returns when
// the reading is taken, the dial stops waiting, or ctx ends. The prompt
// names the dial, so that with several on the manifold the operator reads
// the right one.
func (p *dialPrompt) ask(ctx context.Context, name, what string, targetPa float64) error {
	do := "set " + p.show.withUnit(targetPa)
	if p.loading != nil {
		if l := p.loading(targetPa); l != "" {
			do = l
		}
	}
	fmt.Fprintf(p.out, "\n%s, %s: %s, read the dial: ", name, what, do)
	var pending *dialEntry
	confirming := false // the next line answers "take it anyway?"
	tick := time.NewTicker(p.poll)
	defer tick.Stop()
	for {
		var line string
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-tick.C:
			if !stillWaiting(p.bench.Status(), name, what) {
				fmt.Fprintf(p.out, "\n%s no longer waits for %s\n", name, what)
				return nil
			}
			continue
		case l, ok := <-p.lines:
			if !ok {
				return errInputClosed
			}
			line = strings.TrimSpace(l)
		}
		switch {
		case confirming:
			confirming = false
			if a := strings.ToLower(line); a == "y" || a == "yes" {
				if done, _ := p.submit(name, *pending, true); done {
					return nil
				}
			} else {
				fmt.Fprint(p.out, "not taken; type the reading again: ")
			}
			pending = nil
		case pending != nil && line == "":
			done, confirm := p.submit(name, *pending, false)
			if done {
				return nil
			}
			confirming = confirm
			if !confirm {
				pending = nil
			}
		case line == "":
			fmt.Fprint(p.out, "read the dial: ")
		default:
			e, err := parseDialEntry(line)
			if err != nil {
				fmt.Fprintf(p.out, "%v\ntype the reading again: ", err)
				continue
			}
			// A second value replaces the first before anything is
			// taken: that is the operator's correction.
			pending = &e
			fmt.Fprintf(p.out, "%s: press Enter to take it, or type the right reading: ", p.text(e))
		}
	}
}

// submit hands an entry for the dial name to the engine. It reports
// whether the prompt is done, or whether the entry looked implausible and
// needs confirming.
func (p *dialPrompt) submit(name string, e dialEntry, confirmed bool) (done, confirm bool) {
	err := p.bench.Enter(acquire.Entry{Device: name, Value: e.Value, Unit: p.unitOf(e), Confirmed: confirmed})
	var odd *acquire.ImplausibleError
	switch {
	case err == nil:
		note := ""
		if confirmed {
			note = " (confirmed)"
		}
		fmt.Fprintf(p.out, "taken%s for %s: %s\n", note, name, p.text(e))
		return true, false
	case !confirmed && errors.As(err, &odd):
		fmt.Fprintf(p.out, "%s looks wrong: %s.\ntake it anyway? [y/N] ", p.text(e), odd.Why)
		return false, true
	case errors.Is(err, acquire.ErrNoStepWaiting):
		fmt.Fprintf(p.out, "not taken: %v\n", err)
		return true, false
	}
	fmt.Fprintf(p.out, "not taken: %v\ntype the reading again: ", err)
	return false, false
}

func (p *dialPrompt) unitOf(e dialEntry) string {
	if e.Unit != "" {
		return e.Unit
	}
	return p.show.unit.Symbol
}

// text is an entry as typed, with its unit.
func (p *dialPrompt) text(e dialEntry) string {
	return strconv.FormatFloat(e.Value, 'f', -1, 64) + " " + p.unitOf(e)
}
