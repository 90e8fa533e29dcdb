package api

import (
	"context"
	"slices"

	"plateau/analysis/readout"
)

// RoleAmbient is the role of an instrument that reads the room: a
// temperature, a relative humidity or the barometric pressure.
const RoleAmbient = "ambient"

// statusOf asks the control for the status and names what each ambient
// instrument reads, from the unit of its readings, where the control has
// not: the status call and the metrics show the same.
func statusOf(c Control) func(context.Context) Status {
	return func(ctx context.Context) Status {
		st := c.Status(ctx)
		// A copy: a control may hand out the same slice to every caller.
		st.Instruments = slices.Clone(st.Instruments)
		for i := range st.Instruments {
			in := &st.Instruments[i]
			if in.Role != RoleAmbient || in.Quantity != "" {
				continue
			}
			if k, ok := readout.Quantity(in.RawUnit); ok {
				in.Quantity = string(k)
			}
		}
		return st
	}
}
