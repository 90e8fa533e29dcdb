package modbus

import (
	"context"
	"math"
	"testing"

	"plateau/config"
	"plateau/drivers"
)

// A register value that is not a finite number, or becomes one through the
// configured scale, offset or range, is a failed read of a sensible kind,
// never a NaN reading. The bit patterns are IEEE 754 (float32 NaN 7FC00000,
// +Inf 7F800000, largest finite 7F7FFFFF; float64 +Inf 7FF0000000000000).
func TestNonFiniteValuesAreFailedReads(t *testing.T) {
	srv := &countingServer{regs: map[uint16]uint16{
		0: 0x7FC0, 1: 0x0000, // float32 NaN
		2: 0x7F80, 3: 0x0000, // float32 +Inf
		4: 0xFF80, 5: 0x0000, // float32 -Inf
		6: 0x7F7F, 7: 0xFFFF, // float32 3.4028235e38, finite
		8: 0x7FF0, 9: 0, 10: 0, 11: 0, // float64 +Inf
		12: 0x7FFF, 13: 0xFFFF, // int32 2147483647
		16: 0x3F80, 17: 0x0000, // float32 1.0
		18: 0x41A4, 19: 0x0000, // float32 20.5 (mA), the top of the NAMUR NE 43 measuring band
	}}
	addr := startCounting(t, srv)
	cases := []struct {
		name string
		val  config.ValueRead
		unit string
		loop config.CurrentLoop
		kind drivers.Kind
	}{
		{"float32 NaN", config.ValueRead{Register: 0, Type: "float32"}, "bar", config.CurrentLoop{}, drivers.KindBadReply},
		{"float32 +Inf", config.ValueRead{Register: 2, Type: "float32"}, "bar", config.CurrentLoop{}, drivers.KindBadReply},
		{"float32 -Inf", config.ValueRead{Register: 4, Type: "float32"}, "bar", config.CurrentLoop{}, drivers.KindBadReply},
		{"float64 +Inf", config.ValueRead{Register: 8, Type: "float64", WordOrder: "ABCDEFGH"}, "bar", config.CurrentLoop{}, drivers.KindBadReply},
		{"scale overflows", config.ValueRead{Register: 6, Type: "float32", Scale: 1e300}, "bar", config.CurrentLoop{}, drivers.KindOutOfRange},
		{"int32 times scale overflows", config.ValueRead{Register: 12, Type: "int32", Scale: 1e300}, "bar", config.CurrentLoop{}, drivers.KindOutOfRange},
		{"offset overflows", config.ValueRead{Register: 6, Type: "float32", Scale: 1e270, Offset: math.MaxFloat64}, "bar", config.CurrentLoop{}, drivers.KindOutOfRange},
		{"unit conversion overflows", config.ValueRead{Register: 6, Type: "float32", Scale: 1e266}, "MPa", config.CurrentLoop{}, drivers.KindOutOfRange},
		{"4–20 mA conversion overflows", config.ValueRead{Register: 18, Type: "float32"}, "mA",
			config.CurrentLoop{Enabled: true, Lower: "0 Pa", Upper: "1.79e308 Pa"}, drivers.KindOutOfRange},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			in := inst("ref", config.LinkModbusTCP, addr, c.val)
			in.Unit, in.Loop = c.unit, c.loop
			r, err := mustOpen(t, in).Read(context.Background())
			if err == nil {
				t.Fatalf("read %+v, want a failed read", r)
			}
			if k := drivers.KindOf(err); k != c.kind {
				t.Errorf("kind %s, want %s (%v)", k, c.kind, err)
			}
			if math.IsNaN(r.Pa) || math.IsInf(r.Pa, 0) || math.IsNaN(r.Raw) || math.IsInf(r.Raw, 0) || r.Pa != 0 {
				t.Errorf("failed read carries a value: %+v", r)
			}
			if r.Wire == "" {
				t.Errorf("failed read lost its register words")
			}
		})
	}
	// The same server gives a good reading where the value is a number.
	r, err := mustOpen(t, inst("ok", config.LinkModbusTCP, addr, config.ValueRead{Register: 16, Type: "float32"})).Read(context.Background())
	if err != nil || r.Pa != 1e5 {
		t.Errorf("1.0 bar: %+v %v", r, err)
	}
}

// A setpoint that is not a number, or not one once scaled, is refused before
// anything reaches the controller.
func TestNonFiniteSetpointRefused(t *testing.T) {
	srv := &countingServer{}
	s := sourceOn(t, startCounting(t, srv))
	for _, pa := range []float64{math.NaN(), math.Inf(1), math.Inf(-1), math.MaxFloat64} {
		if err := s.SetPoint(context.Background(), pa); err == nil {
			t.Errorf("setpoint %g Pa accepted", pa)
		}
	}
	if n := srv.requests.Load(); n != 0 {
		t.Errorf("%d non-finite setpoints reached the controller", n)
	}
}

func nan() float64 { return math.NaN() }
func inf() float64 { return math.Inf(1) }
