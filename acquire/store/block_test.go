package store

import (
	"errors"
	"testing"
	"time"
)

// FuzzDecodeBlock feeds damaged blocks to the decoder: it must return an
// error or samples, never panic or loop.
func FuzzDecodeBlock(f *testing.F) {
	b := newBlock(t0.UnixNano(), "bar")
	for i, smp := range []Sample{
		{Time: t0, Pa: 1.6e6, Raw: 16, RawUnit: "bar", Wire: "+16.00000"},
		{Time: t0.Add(time.Millisecond), Pa: 1.6e6 + 1, Raw: 16.00001, RawUnit: "bar"},
		{Time: t0.Add(time.Second), Failed: true, Kind: 1, Message: "no reply", Wire: "?"},
	} {
		ns := smp.Time.UnixNano()
		b.add(b.record(nil, ns, smp, i != 1), ns, smp)
	}
	f.Add(int64(t0.UnixNano()), b.buf)
	f.Add(int64(0), []byte{blockVersion, 0})
	f.Add(int64(-1), []byte{blockVersion, 0, flagWire, 0x80})
	f.Fuzz(func(t *testing.T, key int64, data []byte) {
		n := 0
		err := decodeBlock(key, data, func(Sample) error { n++; return nil })
		if err != nil && !errors.Is(err, ErrBadRecord) {
			t.Fatalf("error not marked as a bad record: %v", err)
		}
		if n > len(data) {
			t.Fatalf("%d samples from %d bytes", n, len(data))
		}
	})
}
