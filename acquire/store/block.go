package store

import (
	"encoding/binary"
	"fmt"
	"math"
	"time"

	"plateau/drivers"
)

// Sample is one reading of one instrument as stored: a good reading with its
// value, or a failed read with its reason.
type Sample struct {
	Time    time.Time
	Pa      float64 // pressure in Pa; 0 for a failed read
	Raw     float64 // the instrument's own value in RawUnit; 0 for a failed read
	RawUnit string
	Wire    string // reply text or register words; kept on failures and every WireEvery-th good reading
	Failed  bool
	Kind    drivers.Kind // why the read failed; 0 when the error was not a *drivers.ReadError
	Message string       // the failure's text
}

// Version-1 blocks (files of format 1) are still read:
//
//	block  = version(1) uvarint(len unit) unit record*
//	record = flags(1) varint(ns since previous record; the first: since the key)
//	         good:   uvarint(bits(Pa) XOR bits(previous Pa)) uvarint(bits(Raw) XOR bits(previous Raw))
//	         failed: uvarint(kind) uvarint(len msg) msg
//	         [flagWire: uvarint(len wire) wire]
const (
	blockV1    = 1
	flagFailed = 1 << 0
	flagWire   = 1 << 1
	maxText    = 4096 // longer failure messages and wire texts are cut, with a marker
)

func cutText(s string) string {
	if len(s) > maxText {
		s = s[:maxText-len("…[cut]")] + "…[cut]"
	}
	return s
}

// blockReader decodes bytes from the file; damage gives an error, never a panic.
type blockReader struct {
	b   []byte
	off int
	err error
}

func (r *blockReader) uvarint() uint64 {
	if r.err != nil {
		return 0
	}
	v, n := binary.Uvarint(r.b[r.off:])
	if n <= 0 {
		r.err = fmt.Errorf("bad unsigned varint at byte %d", r.off)
		return 0
	}
	r.off += n
	return v
}

func (r *blockReader) varint() int64 {
	if r.err != nil {
		return 0
	}
	v, n := binary.Varint(r.b[r.off:])
	if n <= 0 {
		r.err = fmt.Errorf("bad varint at byte %d", r.off)
		return 0
	}
	r.off += n
	return v
}

func (r *blockReader) byte() byte {
	if r.err != nil {
		return 0
	}
	if r.off >= len(r.b) {
		r.err = fmt.Errorf("block ends at byte %d inside a record", r.off)
		return 0
	}
	r.off++
	return r.b[r.off-1]
}

func (r *blockReader) string() string {
	n := r.uvarint()
	if r.err != nil {
		return ""
	}
	if n > uint64(len(r.b)-r.off) {
		r.err = fmt.Errorf("text of %d bytes at byte %d runs past the block end", n, r.off)
		return ""
	}
	s := string(r.b[r.off : r.off+int(n)])
	r.off += int(n)
	return s
}

// decodeBlock calls fn for each sample in the block stored under key ns.
func decodeBlock(key int64, b []byte, fn func(Sample) error) error {
	if len(b) > 0 && b[0] == blockV2 {
		return decodeBlockV2(key, b, fn)
	}
	return decodeBlockV1(key, b, fn)
}

func decodeBlockV1(key int64, b []byte, fn func(Sample) error) error {
	r := &blockReader{b: b}
	if v := r.byte(); r.err == nil && v != blockV1 {
		return fmt.Errorf("block %d: version %d, this build reads %d and %d: %w", key, v, blockV1, blockV2, ErrBadRecord)
	}
	unit := r.string()
	ns := key
	var prevPa, prevRaw uint64
	for r.err == nil && r.off < len(b) {
		flags := r.byte()
		if flags&^(flagFailed|flagWire) != 0 {
			r.err = fmt.Errorf("unknown flags %#x at byte %d", flags, r.off-1)
			break
		}
		d := r.varint()
		if (d > 0 && ns > math.MaxInt64-d) || (d < 0 && ns < math.MinInt64-d) {
			r.err = fmt.Errorf("time step %d ns at byte %d overflows", d, r.off)
			break
		}
		ns += d
		smp := Sample{Time: time.Unix(0, ns), RawUnit: unit, Failed: flags&flagFailed != 0}
		if smp.Failed {
			smp.Kind = drivers.Kind(r.uvarint())
			smp.Message = r.string()
			smp.RawUnit = ""
		} else {
			prevPa ^= r.uvarint()
			prevRaw ^= r.uvarint()
			smp.Pa, smp.Raw = math.Float64frombits(prevPa), math.Float64frombits(prevRaw)
		}
		if flags&flagWire != 0 {
			smp.Wire = r.string()
		}
		if r.err != nil {
			break
		}
		if err := fn(smp); err != nil {
			return err
		}
	}
	if r.err != nil {
		return fmt.Errorf("block %d: %w: %v", key, ErrBadRecord, r.err)
	}
	return nil
}
