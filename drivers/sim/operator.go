package sim

import (
	"context"
	"fmt"
	"math"
	"time"

	"plateau/drivers"
)

// Operator is the simulated technician who reads the analog dial. Asked for
// a reading, they watch the pointer until it stops moving, take their time
// (operator_delay), and give the value rounded to the dial's resolution. It
// satisfies drivers.Gauge, so the engine can use it where a typed entry
// would come from a person.
type Operator struct {
	r *Rig
	k int // the dial they read
	// Watch is how long the pointer must stay within a quarter of a
	// division before the operator calls it settled.
	Watch time.Duration
}

// Operator returns the reader of the rig's first dial.
func (r *Rig) Operator() *Operator { return &Operator{r: r, Watch: time.Second} }

// DialReader is the operator reading the first simulated device that is a
// dial, nil when none is.
func (r *Rig) DialReader() drivers.Gauge {
	for _, d := range r.devs {
		if d.p.kind == KindDial {
			return &Operator{r: r, k: d.k, Watch: time.Second}
		}
	}
	return nil
}

// DialReaderFor is the operator reading the dial the named instrument
// stands for, nil when that simulated device is not a dial.
func (r *Rig) DialReaderFor(instrument string) drivers.Gauge {
	d, err := r.deviceFor(instrument)
	if err != nil || d.p.kind != KindDial {
		return nil
	}
	return &Operator{r: r, k: d.k, Watch: time.Second}
}

// Read waits (in clock time) for the pointer to settle and the operator to
// read it, then returns the reading in the device's unit.
func (o *Operator) Read(ctx context.Context) (drivers.Reading, error) {
	p := o.r.p.devs[o.k]
	res := p.devUnit.FromPa(p.devRes)
	steady := res / 4
	if steady <= 0 {
		steady = p.devUnit.FromPa(p.upper-p.lower) * 1e-4
	}
	clk := o.r.clk
	last, _ := o.r.m.needle(clk.Now(), o.k)
	for {
		if err := o.wait(ctx, o.Watch); err != nil {
			return drivers.Reading{}, err
		}
		now, _ := o.r.m.needle(clk.Now(), o.k)
		if math.Abs(now-last) <= steady {
			break
		}
		last = now
	}
	if err := o.wait(ctx, p.operatorDelay); err != nil {
		return drivers.Reading{}, err
	}
	at := clk.Now()
	pointer, scatter := o.r.m.needle(at, o.k)
	v := quantize(pointer+scatter, res)
	return drivers.Reading{Time: at, Pa: p.devUnit.ToPa(v), Raw: v, RawUnit: p.devUnit.Symbol}, nil
}

func (o *Operator) wait(ctx context.Context, d time.Duration) error {
	select {
	case <-ctx.Done():
		return fmt.Errorf("simulated operator reading the dial: %w", ctx.Err())
	case <-o.r.clk.After(d):
		return nil
	}
}

// Close does nothing: the operator holds no connection.
func (o *Operator) Close() error { return nil }
