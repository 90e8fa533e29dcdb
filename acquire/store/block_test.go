package store

import (
	"encoding/binary"
	"errors"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"plateau/drivers"
)

func blockOf(t testing.TB, smps []Sample, wire bool) []byte {
	t.Helper()
	b := newBlock(smps[0].Time.UnixNano(), smps[0].RawUnit)
	for _, smp := range smps {
		if !b.add(smp, wire) {
			t.Fatalf("block full after %d samples", b.count)
		}
	}
	return b.bytes()
}

func decodeAll(t testing.TB, key int64, v []byte) []Sample {
	t.Helper()
	var out []Sample
	if err := decodeBlock(key, v, func(s Sample) error { out = append(out, s); return nil }); err != nil {
		t.Fatal(err)
	}
	return out
}

// Each value takes the path the encoding promises and reads back bit-exactly.
func TestBlockValuesBitExact(t *testing.T) {
	at := func(ms int) time.Time { return t0.Add(time.Duration(ms) * time.Millisecond) }
	for _, tc := range []struct {
		name string
		smps []Sample
	}{
		{"five decimals in bar", []Sample{
			{Time: at(0), Raw: 16.0001, Pa: 16.0001 * 1e5, RawUnit: "bar"},
			{Time: at(50), Raw: 16.00012, Pa: 16.00012 * 1e5, RawUnit: "bar"}, // finer exponent
			{Time: at(100), Raw: 15.99987, Pa: 15.99987 * 1e5, RawUnit: "bar"},
		}},
		{"not a short decimal", []Sample{
			{Time: at(0), Raw: float64(float32(16.00012)), Pa: 1600012.0161, RawUnit: "bar"},
			{Time: at(50), Raw: math.Pi, Pa: math.E, RawUnit: "bar"},
		}},
		{"odd values", []Sample{
			{Time: at(0), Raw: math.Copysign(0, -1), Pa: math.Copysign(0, -1), RawUnit: "mA"},
			{Time: at(1), Raw: math.Inf(1), Pa: math.Inf(-1), RawUnit: "mA"},
			{Time: at(1), Raw: math.MaxFloat64, Pa: math.SmallestNonzeroFloat64, RawUnit: "mA"},
			{Time: at(-5), Raw: 1e22, Pa: 1e-300, RawUnit: "mA"},
			{Time: at(7), Raw: 4.000001, Pa: (4.000001 - 4) / 16 * 1.6e6, RawUnit: "mA"}, // an affine scale
		}},
		{"float32 register values, 4–20 mA", func() []Sample {
			var out []Sample
			for i := range 200 {
				ma := float64(float32(12 + 0.001*math.Sin(float64(i))))
				out = append(out, Sample{Time: at(50 * i), Raw: ma, Pa: (ma - 4) / 16 * 1.6e6, RawUnit: "mA"})
			}
			out = append(out, Sample{Time: at(50 * 200), Raw: float64(float32(math.Inf(-1))), Pa: -1, RawUnit: "mA"},
				Sample{Time: at(50 * 201), Raw: float64(float32(-3.5e-40)), Pa: 0, RawUnit: "mA"})
			return out
		}()},
		{"failures between readings", []Sample{
			{Time: at(0), Raw: 12, Pa: 12 * 6894.757293168361, RawUnit: "psi"},
			{Time: at(50), Failed: true, Kind: drivers.KindTimeout, Message: "no reply within 500 ms", Wire: "?"},
			{Time: at(100), Raw: 12.5, Pa: 12.5 * 6894.757293168361, RawUnit: "psi"},
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for i := range tc.smps {
				if !tc.smps[i].Failed {
					tc.smps[i].Wire = "w"
				}
			}
			v := blockOf(t, tc.smps, true)
			got := decodeAll(t, tc.smps[0].Time.UnixNano(), v)
			if len(got) != len(tc.smps) {
				t.Fatalf("%d samples back, want %d", len(got), len(tc.smps))
			}
			for i, w := range tc.smps {
				g := got[i]
				if !g.Time.Equal(w.Time) || !same(g.Pa, w.Pa) || !same(g.Raw, w.Raw) || g.Failed != w.Failed ||
					g.Kind != w.Kind || g.Message != w.Message || g.Wire != w.Wire || (!w.Failed && g.RawUnit != w.RawUnit) {
					t.Errorf("sample %d:\n got %+v\nwant %+v", i, g, w)
				}
			}
		})
	}
}

// A changed bit anywhere in a block is caught by its checksum.
func TestBlockChecksum(t *testing.T) {
	v := blockOf(t, []Sample{{Time: t0, Raw: 1, Pa: 1e5, RawUnit: "bar"}, {Time: t0.Add(time.Second), Raw: 1.00001, Pa: 1.00001e5, RawUnit: "bar"}}, false)
	for i := range len(v) * 8 {
		c := append([]byte(nil), v...)
		c[i/8] ^= 1 << (i % 8)
		err := decodeBlock(t0.UnixNano(), c, func(Sample) error { return nil })
		if err == nil {
			t.Fatalf("bit %d flipped: no error", i)
		}
		if !errors.Is(err, ErrBadRecord) {
			t.Fatalf("bit %d flipped: %v", i, err)
		}
	}
}

// FuzzDecodeBlock feeds damaged blocks of both versions to the decoder: it
// must return an error or samples, never panic or loop. Inputs with a valid
// checksum reach the bit-stream decoder.
func FuzzDecodeBlock(f *testing.F) {
	smps := []Sample{
		{Time: t0, Pa: 1.6e6, Raw: 16, RawUnit: "bar", Wire: "+16.00000"},
		{Time: t0.Add(time.Millisecond), Pa: 1.6e6 + 1, Raw: 16.00001, RawUnit: "bar"},
		{Time: t0.Add(time.Second), Failed: true, Kind: 1, Message: "no reply", Wire: "?"},
	}
	f.Add(t0.UnixNano(), blockOf(f, smps, true), false)
	f.Add(t0.UnixNano(), blockOf(f, smps, true)[:20], true)
	f.Add(int64(0), []byte{blockV1, 0}, false)
	f.Add(int64(-1), []byte{blockV1, 0, flagWire, 0x80}, false)
	f.Fuzz(func(t *testing.T, key int64, data []byte, reseal bool) {
		if reseal && len(data) >= trailerSz+2 {
			data[0] = blockV2
			body := data[:len(data)-4]
			binary.BigEndian.PutUint32(data[len(data)-4:], crcOf(body))
		}
		n := 0
		err := decodeBlock(key, data, func(Sample) error { n++; return nil })
		if err != nil && !errors.Is(err, ErrBadRecord) {
			t.Fatalf("error not marked as a bad record: %v", err)
		}
		if n > len(data)*8 {
			t.Fatalf("%d samples from %d bytes", n, len(data))
		}
	})
}

// BenchmarkBlockEncoding reports the encoded size of three kinds of
// stream, blocks only (no bbolt): the bench's reference (five decimals in
// bar), its device (quantised to 0.01 bar), and a 4–20 mA transmitter read
// as a float32 register pair with an affine conversion to Pa.
func BenchmarkBlockEncoding(b *testing.B) {
	g := &benchBench{rng: rand.New(rand.NewPCG(3, 4))}
	var ref, dut, ma []Sample
	for i := range 20_000 {
		_, smp := g.sample(i)
		if i%2 == 1 {
			dut = append(dut, smp)
			continue
		}
		ref = append(ref, smp)
		cur := float64(float32(12 + 1e-3*g.rng.NormFloat64()))
		ma = append(ma, Sample{Time: smp.Time, Raw: cur, Pa: (cur - 4) / 16 * 1.6e6, RawUnit: "mA"})
	}
	for _, tc := range []struct {
		name string
		smps []Sample
	}{{"reference", ref}, {"device", dut}, {"float32-mA", ma}} {
		b.Run(tc.name, func(b *testing.B) {
			var bytes, n int
			for b.Loop() {
				bytes, n = encodeStream(tc.smps)
			}
			b.ReportMetric(float64(bytes)/float64(n), "block-bytes/sample")
		})
	}
}

// encodeStream packs samples into blocks as the writer does (no wire text)
// and returns the bytes of all blocks and the sample count.
func encodeStream(smps []Sample) (int, int) {
	total := 0
	blk := newBlock(smps[0].Time.UnixNano(), smps[0].RawUnit)
	for _, smp := range smps {
		if !blk.add(smp, false) {
			total += len(blk.bytes())
			blk = newBlock(smp.Time.UnixNano(), smp.RawUnit)
			blk.add(smp, false)
		}
	}
	return total + len(blk.bytes()), len(smps)
}
