package store

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math"
	"strconv"
	"time"

	"plateau/drivers"
)

// A block holds consecutive samples of one instrument under one key (the
// Unix ns of its first sample, or one more than the previous key when that
// would collide). Version 2 is a bit stream close to what the data carries:
//
//	block   = version(1)=2 uvarint(len unit) unit stream count(u32 BE) crc32c(u32 BE, of all before it)
//	sample  = time value [good: pa] wire
//	time    = signed(delta-of-delta ns; the first delta is from the key), in time widths
//	value   = "0"    signed(digits − previous digits)         the decimal at the block's exponent
//	        | "10"   exp(5 bits) signed(digits)                a finer exponent from here on
//	        | "110"  Raw(64 bits)                              neither: the float itself
//	        | "1110" unsigned(kind) text(message)              a failed read
//	        | "1111" signed(bits32(Raw) − previous bits32)     a float32 value (register words), as ordered bits
//	pa      = "0"                                              Pa = Raw × scale exactly
//	        | "10"   signed(bits(Pa) − bits(prediction))       prediction = previous Pa + (Raw − previous Raw) × slope
//	        | "11"   scale(64 bits)                            a new scale, and Pa = Raw × scale exactly
//
// slope is (Pa − previous Pa) / (Raw − previous Raw) of the last two good
// samples with different values, so an affine conversion (4–20 mA) is
// predicted to within a few units in the last place.
//
//	wire    = "0" | "1" text(wire)                             the audit text, when kept
//	text    = unsigned(length) bytes
//	signed  = unsigned(zigzag)
//	unsigned= "0" (0) | "10" 4 bits | "110" 8 bits | "1110" 16 bits | "11110" 32 bits | "11111" 64 bits
//	          (time widths: "10" 12 bits | "110" 16 | "1110" 20 | "11110" 24 | "111110" 32 | "111111" 64)
//
// A value is stored as the decimal the instrument most likely gave — the
// integer digits d and exponent k with Raw == d / 10^k — only when that
// reproduces Raw bit for bit: |d| < 2^53 and 10^k ≤ 10^22 are exact, so the
// division is correctly rounded (the fast path of decimal-to-binary
// conversion, W. D. Clinger, "How to read floating point numbers
// accurately", PLDI 1990; cited from memory). A value that is exactly a
// float32 is stored as its bits, anything else as the float64 itself. Pa
// is exact from Raw × scale or stored as the difference of its bit pattern
// from the prediction, so time, Raw and Pa read back bit-exactly (tested).
const (
	blockV2     = 2
	maxExp      = 22 // 10^22 is the largest power of ten a float64 holds exactly
	maxDecimals = 12 // the finest exponent a block moves to
	trailerSz   = 8
	// blockBytes is the size a block is filled to: two blocks with their
	// element headers (16 bytes) and keys (8) fill a 4 KiB page after its
	// 16-byte header, and rewriting the last block each commit stays cheap.
	blockBytes = (4096-16)/2 - 16 - 8
)

var pow10 = func() (p [maxExp + 1]float64) {
	p[0] = 1
	for i := 1; i <= maxExp; i++ {
		p[i] = p[i-1] * 10 // exact up to 1e22
	}
	return
}()

// decimalAt returns the digits of v at exponent k when they reproduce v.
func decimalAt(v float64, k int) (int64, bool) {
	d := math.Round(v * pow10[k])
	if !(math.Abs(d) < 1<<53) {
		return 0, false
	}
	return int64(d), math.Float64bits(fromDecimal(int64(d), k)) == math.Float64bits(v)
}

func fromDecimal(d int64, k int) float64 { return float64(d) / pow10[k] }

// shortestExp is the number of decimals in v's shortest representation.
func shortestExp(v float64) int {
	s := strconv.FormatFloat(v, 'e', -1, 64)
	var mant, exp int
	for i := 0; i < len(s); i++ {
		if s[i] == 'e' {
			exp, _ = strconv.Atoi(s[i+1:])
			for _, c := range s[:i] {
				if c >= '0' && c <= '9' {
					mant++
				}
			}
			break
		}
	}
	return max(0, mant-1-exp)
}

// coderState is what encoder and decoder both track through a block.
type coderState struct {
	lastNs    int64
	lastDelta int64
	exp       int
	digits    int64
	f32       int64 // bits of the previous float32 value, as a signed ordered integer
	scale     float64
	slope     float64
	prevPa    float64
	prevRaw   float64
	seen      bool // prevPa and prevRaw hold a good sample of this block
}

// goodSample moves the state past a good sample (encoder and decoder alike).
func (st *coderState) goodSample(raw, pa float64) {
	if raw != st.prevRaw {
		if sl := (pa - st.prevPa) / (raw - st.prevRaw); !math.IsInf(sl, 0) && !math.IsNaN(sl) && sl != 0 {
			st.slope = sl
		}
	}
	st.prevPa, st.prevRaw, st.seen = pa, raw, true
}

// ordered32 maps float32 bits to integers that order like the floats, so
// nearby values differ by a small number.
func ordered32(b uint32) int64 {
	if b&(1<<31) != 0 {
		return -int64(b &^ (1 << 31))
	}
	return int64(b)
}

func unordered32(v int64) (uint32, bool) {
	switch {
	case v > math.MaxUint32>>1 || v < -(math.MaxUint32>>1):
		return 0, false
	case v < 0:
		return uint32(-v) | 1<<31, true
	}
	return uint32(v), true
}

type blockWriter struct {
	key   int64
	unit  string
	bits  bitWriter
	count uint32
	st    coderState
}

func newBlock(key int64, unit string) blockWriter {
	b := blockWriter{key: key, unit: unit, st: coderState{lastNs: key}}
	b.bits.buf = append(b.bits.buf, blockV2)
	b.bits.buf = binary.AppendUvarint(b.bits.buf, uint64(len(unit)))
	b.bits.buf = append(b.bits.buf, unit...)
	return b
}

// clone gives a copy that can be appended to without touching b.
func (b blockWriter) clone() blockWriter {
	b.bits.buf = append(make([]byte, 0, len(b.bits.buf)+256), b.bits.buf...)
	return b
}

// add appends smp unless the block would grow past blockBytes; it reports
// whether it did (on false the block is unchanged).
func (b *blockWriter) add(smp Sample, keepWire bool) bool {
	saveBits, saveSt := b.bits.mark(), b.st
	b.encode(smp, keepWire)
	if len(b.bits.buf)+trailerSz > blockBytes && b.count > 0 {
		b.bits.reset(saveBits)
		b.st = saveSt
		return false
	}
	b.count++
	return true
}

func (b *blockWriter) encode(smp Sample, keepWire bool) {
	w, st := &b.bits, &b.st
	ns := smp.Time.UnixNano()
	delta := ns - st.lastNs
	w.signedTime(delta - st.lastDelta)
	st.lastNs, st.lastDelta = ns, delta
	if smp.Failed {
		w.write(0b1110, 4)
		w.unsigned(uint64(smp.Kind))
		w.text(smp.Message)
	} else {
		b.value(smp.Raw)
		b.pa(smp.Raw, smp.Pa)
	}
	if keepWire && smp.Wire != "" {
		w.write(1, 1)
		w.text(smp.Wire)
	} else {
		w.write(0, 1)
	}
}

func (b *blockWriter) value(raw float64) {
	w, st := &b.bits, &b.st
	if d, ok := decimalAt(raw, st.exp); ok {
		w.write(0, 1)
		w.signed(d - st.digits)
		st.digits = d
		return
	}
	// Register words decoded as a float32 are stored as such (a decimal
	// reply is seldom exactly a float32).
	if f := float32(raw); float64(f) == raw && !(f == 0 && math.Signbit(raw)) {
		o := ordered32(math.Float32bits(f))
		w.write(0b1111, 4)
		w.signed(o - st.f32)
		st.f32 = o
		return
	}
	// Instruments reply with a handful of decimals: a value whose shortest
	// form needs more than maxDecimals takes the float escape.
	if k := shortestExp(raw); k > st.exp && k <= maxDecimals {
		if d, ok := decimalAt(raw, k); ok {
			w.write(0b10, 2)
			w.write(uint64(k), 5)
			w.signed(d)
			st.exp, st.digits = k, d
			return
		}
	}
	w.write(0b110, 3)
	w.write(math.Float64bits(raw), 64)
}

func (b *blockWriter) pa(raw, pa float64) {
	w, st := &b.bits, &b.st
	defer st.goodSample(raw, pa)
	if same(raw*st.scale, pa) {
		w.write(0, 1)
		return
	}
	if st.seen && nearRatio(raw, pa, st.prevRaw, st.prevPa) {
		if s, ok := scaleFor(raw, pa); ok && same(st.prevRaw*s, st.prevPa) {
			w.write(0b11, 2)
			w.write(math.Float64bits(s), 64)
			st.scale = s
			return
		}
	}
	w.write(0b10, 2)
	w.signed(int64(math.Float64bits(pa) - math.Float64bits(st.predict(raw))))
}

// nearRatio tells whether two samples could share one exact scale factor:
// their ratios pa/raw lie within a few units in the last place (an affine
// conversion gives ratios far apart, and no search is worth its cost).
func nearRatio(raw, pa, prevRaw, prevPa float64) bool {
	a, b := pa/raw, prevPa/prevRaw
	return math.Abs(a-b) <= 8*math.Abs(math.Nextafter(a, math.Inf(1))-a)
}

func (st *coderState) predict(raw float64) float64 { return st.prevPa + (raw-st.prevRaw)*st.slope }

func same(a, b float64) bool { return math.Float64bits(a) == math.Float64bits(b) }

// scaleFor looks for a factor s with raw × s == pa exactly near pa / raw,
// preferring the one with the shortest decimal form (unit factors are round
// numbers such as 1e5 for bar), so later samples are likely to match too.
// The encoder takes it only when it reproduces the previous sample as well:
// under an affine conversion some factor fits any one sample, and taking
// each would cost 64 bits a sample.
func scaleFor(raw, pa float64) (float64, bool) {
	if raw == 0 || math.IsInf(raw, 0) || math.IsNaN(raw) {
		return 0, false
	}
	s0 := pa / raw
	if math.IsInf(s0, 0) || math.IsNaN(s0) || s0 == 0 {
		return 0, false
	}
	best, bestLen := 0.0, 100
	for _, dir := range []float64{math.Inf(1), math.Inf(-1)} {
		s := s0
		for range 4 {
			if same(raw*s, pa) {
				if n := len(strconv.FormatFloat(s, 'g', -1, 64)); n < bestLen {
					best, bestLen = s, n
				}
			}
			s = math.Nextafter(s, dir)
		}
	}
	return best, bestLen < 100
}

// bytes is the block as stored: header, stream, count and checksum.
func (b *blockWriter) bytes() []byte {
	v := make([]byte, 0, len(b.bits.buf)+trailerSz)
	v = append(v, b.bits.buf...)
	v = binary.BigEndian.AppendUint32(v, b.count)
	return binary.BigEndian.AppendUint32(v, crc32.Checksum(v, castagnoli))
}

// decodeBlockV2 calls fn for each sample of a version-2 block; damage gives
// an error marked ErrBadRecord (a checksum mismatch also ErrDamaged).
func decodeBlockV2(key int64, b []byte, fn func(Sample) error) error {
	bad := func(format string, a ...any) error {
		return fmt.Errorf("block %d: %w: %s", key, ErrBadRecord, fmt.Sprintf(format, a...))
	}
	if len(b) < 2+trailerSz {
		return bad("%d bytes is too short", len(b))
	}
	body := b[:len(b)-4]
	if got, want := crc32.Checksum(body, castagnoli), binary.BigEndian.Uint32(b[len(b)-4:]); got != want {
		return fmt.Errorf("block %d: checksum %08x, stored %08x: %w (%w)", key, got, want, ErrDamaged, ErrBadRecord)
	}
	count := binary.BigEndian.Uint32(b[len(b)-trailerSz:])
	n, w := binary.Uvarint(b[1:])
	if avail := len(b) - 1 - w - trailerSz; w <= 0 || avail < 0 || n > uint64(avail) {
		return bad("bad unit length")
	}
	unit := string(b[1+w : 1+w+int(n)])
	r := bitReader{buf: b[1+w+int(n) : len(b)-trailerSz]}
	if uint64(count) > uint64(len(r.buf))*8 {
		return bad("%d samples cannot fit in %d bytes", count, len(r.buf))
	}
	st := coderState{lastNs: key}
	for i := range count {
		dod := r.signedTime()
		st.lastDelta += dod
		st.lastNs += st.lastDelta
		smp := Sample{Time: time.Unix(0, st.lastNs)}
		switch {
		case r.bit() == 0:
			st.digits += r.signed()
			smp.Raw = fromDecimal(st.digits, st.exp)
		case r.bit() == 0:
			k := int(r.read(5))
			if k > maxExp {
				return bad("sample %d: exponent %d", i, k)
			}
			st.exp, st.digits = k, r.signed()
			smp.Raw = fromDecimal(st.digits, st.exp)
		case r.bit() == 0:
			smp.Raw = math.Float64frombits(r.read(64))
		case r.bit() == 0:
			smp.Failed = true
			smp.Kind = drivers.Kind(r.unsigned())
			smp.Message = r.text()
		default:
			st.f32 += r.signed()
			bits, ok := unordered32(st.f32)
			if !ok {
				return bad("sample %d: float32 value out of range", i)
			}
			smp.Raw = float64(math.Float32frombits(bits))
		}
		if !smp.Failed {
			smp.RawUnit = unit
			switch {
			case r.bit() == 0:
				smp.Pa = smp.Raw * st.scale
			case r.bit() == 0:
				smp.Pa = math.Float64frombits(math.Float64bits(st.predict(smp.Raw)) + uint64(r.signed()))
			default:
				st.scale = math.Float64frombits(r.read(64))
				smp.Pa = smp.Raw * st.scale
			}
			st.goodSample(smp.Raw, smp.Pa)
		}
		if r.bit() == 1 {
			smp.Wire = r.text()
		}
		if r.err != nil {
			return bad("sample %d: %v", i, r.err)
		}
		if err := fn(smp); err != nil {
			return err
		}
	}
	return nil
}

// bitWriter appends bits, most significant first.
type bitWriter struct {
	buf  []byte
	free uint // unused low bits of the last byte
}

type bitMark struct {
	n    int
	last byte
	free uint
}

func (w *bitWriter) mark() bitMark {
	m := bitMark{n: len(w.buf), free: w.free}
	if m.n > 0 {
		m.last = w.buf[m.n-1]
	}
	return m
}

func (w *bitWriter) reset(m bitMark) {
	w.buf, w.free = w.buf[:m.n], m.free
	if m.n > 0 {
		w.buf[m.n-1] = m.last
	}
}

func (w *bitWriter) write(v uint64, n uint) {
	for n > 0 {
		if w.free == 0 {
			w.buf = append(w.buf, 0)
			w.free = 8
		}
		take := min(n, w.free)
		chunk := (v >> (n - take)) & (1<<take - 1)
		w.buf[len(w.buf)-1] |= byte(chunk << (w.free - take))
		w.free -= take
		n -= take
	}
}

// Widths of the variable-length integers: a value takes the first width
// it fits, after a unary prefix ("0" alone is zero). Time steps jitter by
// microseconds (tens of thousands of ns), values by a few digits.
var (
	valueWidths = []uint{4, 8, 16, 32, 64}
	timeWidths  = []uint{12, 16, 20, 24, 32, 64}
)

func (w *bitWriter) unsignedIn(u uint64, widths []uint) {
	if u == 0 {
		w.write(0, 1)
		return
	}
	for j, width := range widths {
		last := j == len(widths)-1
		if last || u < 1<<width {
			if last {
				w.write(1<<(j+1)-1, uint(j+1))
			} else {
				w.write(1<<(j+2)-2, uint(j+2))
			}
			w.write(u, width)
			return
		}
	}
}

func (w *bitWriter) unsigned(u uint64) { w.unsignedIn(u, valueWidths) }

func (w *bitWriter) signed(v int64) { w.unsigned(zigzag(v)) }

func (w *bitWriter) signedTime(v int64) { w.unsignedIn(zigzag(v), timeWidths) }

func zigzag(v int64) uint64 { return uint64(v<<1) ^ uint64(v>>63) }

func unzigzag(u uint64) int64 { return int64(u>>1) ^ -int64(u&1) }

func (w *bitWriter) text(s string) {
	s = cutText(s)
	w.unsigned(uint64(len(s)))
	for i := 0; i < len(s); i++ {
		w.write(uint64(s[i]), 8)
	}
}

// bitReader reads what bitWriter wrote; reading past the end sets err.
type bitReader struct {
	buf []byte
	pos uint64 // bit position
	err error
}

func (r *bitReader) read(n uint) uint64 {
	if r.err != nil {
		return 0
	}
	if r.pos+uint64(n) > uint64(len(r.buf))*8 {
		r.err = fmt.Errorf("stream ends at bit %d, %d more bits wanted", r.pos, n)
		return 0
	}
	var v uint64
	for n > 0 {
		byteAt, off := r.pos/8, uint(r.pos%8)
		take := min(n, 8-off)
		chunk := uint64(r.buf[byteAt]>>(8-off-take)) & (1<<take - 1)
		v = v<<take | chunk
		r.pos += uint64(take)
		n -= take
	}
	return v
}

func (r *bitReader) bit() uint64 { return r.read(1) }

func (r *bitReader) unsignedIn(widths []uint) uint64 {
	if r.bit() == 0 {
		return 0
	}
	for j, width := range widths {
		if j == len(widths)-1 || r.bit() == 0 {
			return r.read(width)
		}
	}
	return 0
}

func (r *bitReader) unsigned() uint64 { return r.unsignedIn(valueWidths) }

func (r *bitReader) signed() int64 { return unzigzag(r.unsigned()) }

func (r *bitReader) signedTime() int64 { return unzigzag(r.unsignedIn(timeWidths)) }

func (r *bitReader) text() string {
	n := r.unsigned()
	if r.err != nil {
		return ""
	}
	if n > (uint64(len(r.buf))*8-r.pos)/8 {
		r.err = fmt.Errorf("text of %d bytes runs past the stream at bit %d", n, r.pos)
		return ""
	}
	out := make([]byte, n)
	for i := range out {
		out[i] = byte(r.read(8))
	}
	return string(out)
}

func crcOf(b []byte) uint32 { return crc32.Checksum(b, castagnoli) }
