package store

import (
	"encoding/binary"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"os"
)

// The file is examined with plain reads before bbolt maps it: bbolt trusts
// its pages and panics (or faults on a page past the end of a truncated
// file) when they are damaged. The layout below is bbolt's on-disk format
// (go.etcd.io/bbolt v1.5.0, internal/common: page.go, meta.go, types.go),
// little-endian on the machines plateau runs on.
const (
	pageHeaderSize = 16 // id u64, flags u16, count u16, overflow u32
	elementSize    = 16 // branch: pos u32, ksize u32, pgid u64; leaf: flags u32, pos u32, ksize u32, vsize u32
	metaSumOffset  = 56 // the meta's FNV-64a checksum covers the 56 bytes before it
	boltMagic      = 0xED0CDAED
	boltVersion    = 2
	flagBranch     = 0x01
	flagLeaf       = 0x02
	flagMeta       = 0x04
	flagFreelist   = 0x10
	leafIsBucket   = 0x01
	noFreelist     = ^uint64(0)
	maxDepth       = 64
)

type boltMeta struct {
	pageSize uint32
	root     uint64
	freelist uint64
	hwm      uint64 // pages in use: the file must hold at least hwm pages
	txid     uint64
}

// readMeta decodes and validates the meta page found at off.
func readMeta(f io.ReaderAt, off int64) (boltMeta, error) {
	var b [pageHeaderSize + 64]byte
	if _, err := f.ReadAt(b[:], off); err != nil {
		return boltMeta{}, fmt.Errorf("cannot read %d bytes at offset %d: %w", len(b), off, err)
	}
	le := binary.LittleEndian
	m := b[pageHeaderSize:]
	if le.Uint32(m[0:]) != boltMagic {
		return boltMeta{}, errNoMagic
	}
	if v := le.Uint32(m[4:]); v != boltVersion {
		return boltMeta{}, fmt.Errorf("bbolt version %d, want %d", v, boltVersion)
	}
	h := fnv.New64a()
	h.Write(m[:metaSumOffset])
	if got, want := h.Sum64(), le.Uint64(m[metaSumOffset:]); got != want {
		return boltMeta{}, fmt.Errorf("checksum %016x, stored %016x", got, want)
	}
	if fl := le.Uint16(b[8:]); fl != flagMeta {
		return boltMeta{}, fmt.Errorf("page flags %#x, want a meta page", fl)
	}
	return boltMeta{pageSize: le.Uint32(m[8:]), root: le.Uint64(m[16:]), freelist: le.Uint64(m[32:]),
		hwm: le.Uint64(m[40:]), txid: le.Uint64(m[48:])}, nil
}

var errNoMagic = errors.New("no bbolt marker")

// fileReport is what inspectFile found.
type fileReport struct {
	size    int64
	meta    boltMeta
	pages   int               // pages walked
	sampled int               // sample leaf pages only counted, not read (bounded walk)
	owner   map[uint64]string // page → the bucket (or freelist) that uses it
}

// inspectFile checks the file's meta pages, its size against the pages in
// use, the freelist and the tree of pages from the root: every page in
// range, of a known type, used once, with its elements inside the page.
// When bounded, the leaf pages of sample buckets are not read (they are
// most of the file); reading them later is still guarded.
func inspectFile(path string, bounded bool) (fileReport, error) {
	var rep fileReport
	f, err := os.Open(path)
	if err != nil {
		return rep, err
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return rep, err
	}
	rep.size = fi.Size()
	switch {
	case rep.size == 0:
		return rep, fmt.Errorf("the file is empty (0 bytes): %w", ErrWrongFile)
	case rep.size < 1024:
		var head [pageHeaderSize + 4]byte
		if n, _ := f.ReadAt(head[:], 0); n == len(head) && binary.LittleEndian.Uint32(head[pageHeaderSize:]) == boltMagic {
			return rep, fmt.Errorf("truncated to %d bytes: %w", rep.size, ErrDamaged)
		}
		return rep, fmt.Errorf("the file has only %d bytes: %w", rep.size, ErrWrongFile)
	}
	m, err := chooseMeta(f, rep.size, false)
	if err != nil {
		return rep, err
	}
	rep.meta = m
	ps := int64(m.pageSize)
	if m.hwm < 3 || m.hwm > uint64(rep.size/ps) {
		return rep, fmt.Errorf("truncated: the file has %d bytes but its pages reach %d bytes (%d pages of %d): %w",
			rep.size, m.hwm*uint64(ps), m.hwm, ps, ErrDamaged)
	}
	w := &walker{f: f, ps: ps, hwm: m.hwm, used: map[uint64]string{}, bounded: bounded, rep: &rep}
	if m.freelist != noFreelist {
		if err := w.freelist(m.freelist); err != nil {
			return rep, fmt.Errorf("freelist page %d: %v: %w", m.freelist, err, ErrDamaged)
		}
	}
	if err := w.bucketPage(m.root, nil, 0); err != nil {
		return rep, fmt.Errorf("%v: %w", err, ErrDamaged)
	}
	rep.owner = w.used
	return rep, nil
}

// chooseMeta reads both meta pages and returns the newer valid one. A
// damaged meta page is an error unless tolerant (salvage), which takes the
// other one.
func chooseMeta(f io.ReaderAt, size int64, tolerant bool) (boltMeta, error) {
	m, _, err := chooseMetaNote(f, size, tolerant)
	return m, err
}

// chooseMetaNote is chooseMeta that also says which damaged meta page a
// tolerant choice passed over.
func chooseMetaNote(f io.ReaderAt, size int64, tolerant bool) (boltMeta, string, error) {
	m0, err0 := readMeta(f, 0)
	var m1 boltMeta
	err1 := errNoMagic
	if err0 == nil {
		m1, err1 = readMeta(f, int64(m0.pageSize))
	} else {
		// Page size unknown: try the sizes bbolt allows, as bbolt does.
		for ps := int64(1024); ps <= 1<<24 && ps < size; ps <<= 1 {
			if m1, err1 = readMeta(f, ps); err1 == nil && int64(m1.pageSize) == ps {
				break
			}
		}
	}
	switch {
	case errors.Is(err0, errNoMagic) && errors.Is(err1, errNoMagic):
		return boltMeta{}, "", fmt.Errorf("no bbolt meta page at the start: %w", ErrWrongFile)
	case err0 != nil && err1 != nil:
		return boltMeta{}, "", fmt.Errorf("both meta pages are damaged (first: %v; second: %v): %w", err0, err1, ErrDamaged)
	case err0 != nil && !tolerant:
		return boltMeta{}, "", fmt.Errorf("meta page 0 is damaged (%v); meta page 1 holds transaction %d: %w", err0, m1.txid, ErrDamaged)
	case err1 != nil && !tolerant:
		return boltMeta{}, "", fmt.Errorf("meta page 1 is damaged (%v); meta page 0 holds transaction %d: %w", err1, m0.txid, ErrDamaged)
	case err0 == nil && err1 == nil && m0.pageSize != m1.pageSize:
		return boltMeta{}, "", fmt.Errorf("meta pages disagree on the page size (%d, %d): %w", m0.pageSize, m1.pageSize, ErrDamaged)
	}
	m, note := m0, ""
	if err0 != nil || (err1 == nil && m1.txid > m0.txid) {
		m = m1
	}
	switch {
	case err0 != nil:
		note = fmt.Sprintf("meta page 0 is damaged (%v): copied as of transaction %d", err0, m1.txid)
	case err1 != nil:
		note = fmt.Sprintf("meta page 1 is damaged (%v): copied as of transaction %d", err1, m0.txid)
	}
	if ps := int64(m.pageSize); ps < 1024 || ps > 1<<24 || ps&(ps-1) != 0 {
		return m, note, fmt.Errorf("page size %d is not a power of two between 1 KiB and 16 MiB: %w", ps, ErrDamaged)
	}
	return m, note, nil
}

type walker struct {
	f       io.ReaderAt
	ps      int64
	hwm     uint64
	used    map[uint64]string // page → what uses it
	bounded bool
	rep     *fileReport

	// A tolerant walk (salvage) records a damaged subtree in lost and goes
	// on with the rest; visit sees every key/value, bucket every bucket.
	tolerant bool
	lost     []string
	visit    func(path []string, key, val []byte)
	bucket   func(path []string, seq uint64)
}

// skip returns err, or records it and returns nil on a tolerant walk.
func (w *walker) skip(err error) error {
	if err == nil || !w.tolerant {
		return err
	}
	w.lost = append(w.lost, err.Error())
	return nil
}

// page reads page id with its overflow pages and checks its header.
func (w *walker) page(id uint64, what string) ([]byte, error) {
	if id < 2 || id >= w.hwm {
		return nil, fmt.Errorf("%s: page %d is outside the pages in use (2 to %d)", what, id, w.hwm-1)
	}
	var hdr [pageHeaderSize]byte
	if _, err := w.f.ReadAt(hdr[:], int64(id)*w.ps); err != nil {
		return nil, fmt.Errorf("%s: page %d cannot be read: %v", what, id, err)
	}
	le := binary.LittleEndian
	if got := le.Uint64(hdr[0:]); got != id {
		return nil, fmt.Errorf("%s: page %d calls itself page %d", what, id, got)
	}
	over := uint64(le.Uint32(hdr[12:]))
	if over >= w.hwm-id {
		return nil, fmt.Errorf("%s: page %d runs %d pages past the pages in use", what, id, over)
	}
	if err := w.claim(id, over+1, what); err != nil {
		return nil, err
	}
	buf := make([]byte, int64(over+1)*w.ps)
	if _, err := w.f.ReadAt(buf, int64(id)*w.ps); err != nil {
		return nil, fmt.Errorf("%s: page %d cannot be read: %v", what, id, err)
	}
	w.rep.pages += int(over + 1)
	return buf, nil
}

func (w *walker) claim(id, n uint64, what string) error {
	for p := id; p < id+n; p++ {
		if other, dup := w.used[p]; dup {
			return fmt.Errorf("page %d is used twice (%s and %s)", p, other, what)
		}
		w.used[p] = what
	}
	return nil
}

func (w *walker) freelist(id uint64) error {
	b, err := w.page(id, "freelist")
	if err != nil {
		return err
	}
	le := binary.LittleEndian
	if fl := le.Uint16(b[8:]); fl != flagFreelist {
		return fmt.Errorf("page flags %#x, want a freelist page", fl)
	}
	start, n := uint64(pageHeaderSize), uint64(le.Uint16(b[10:]))
	if n == 0xFFFF {
		n = le.Uint64(b[start:])
		start += 8
	}
	if n > (uint64(len(b))-start)/8 {
		return fmt.Errorf("%d free page ids do not fit in %d bytes", n, len(b))
	}
	for i := range n {
		p := le.Uint64(b[start+8*i:])
		if p < 2 || p >= w.hwm {
			return fmt.Errorf("free page id %d is outside the pages in use", p)
		}
		if err := w.claim(p, 1, "free"); err != nil {
			return err
		}
	}
	return nil
}

// sampleLeaves tells whether the bucket at path holds sample blocks:
// runs/<id>/samples/<instrument>.
func sampleLeaves(path []string) bool {
	return len(path) == 4 && path[0] == string(bucketRuns) && path[2] == string(bucketSamples)
}

// bucketPage walks the tree of one bucket rooted at page id.
func (w *walker) bucketPage(id uint64, path []string, depth int) error {
	what := "bucket /" + joinPath(path)
	if depth > maxDepth {
		return fmt.Errorf("%s: tree deeper than %d pages", what, maxDepth)
	}
	b, err := w.page(id, what)
	if err != nil {
		return err
	}
	le := binary.LittleEndian
	switch fl := le.Uint16(b[8:]); fl {
	case flagBranch:
		n := int(le.Uint16(b[10:]))
		for i := range n {
			e := pageHeaderSize + i*elementSize
			if e+elementSize > len(b) {
				return fmt.Errorf("%s: page %d: %d elements do not fit", what, id, n)
			}
			pos, ks := int(le.Uint32(b[e:])), int(le.Uint32(b[e+4:]))
			if e+pos+ks > len(b) || pos < 0 {
				return fmt.Errorf("%s: page %d: key %d lies outside the page", what, id, i)
			}
			child := le.Uint64(b[e+8:])
			if sampleLeaves(path) && w.bounded {
				if err := w.sampleChild(child, path, depth+1); err != nil {
					return err
				}
				continue
			}
			if err := w.skip(w.bucketPage(child, path, depth+1)); err != nil {
				return err
			}
		}
		return nil
	case flagLeaf:
		return w.leaf(b, id, path, depth, what)
	default:
		return fmt.Errorf("%s: page %d has flags %#x, want a branch or leaf page", what, id, fl)
	}
}

// sampleChild checks one child of a sample bucket's branch page without
// reading a leaf's contents: only its header.
func (w *walker) sampleChild(id uint64, path []string, depth int) error {
	what := "bucket /" + joinPath(path)
	if id < 2 || id >= w.hwm {
		return fmt.Errorf("%s: page %d is outside the pages in use (2 to %d)", what, id, w.hwm-1)
	}
	var hdr [pageHeaderSize]byte
	if _, err := w.f.ReadAt(hdr[:], int64(id)*w.ps); err != nil {
		return fmt.Errorf("%s: page %d cannot be read: %v", what, id, err)
	}
	le := binary.LittleEndian
	if fl := le.Uint16(hdr[8:]); fl == flagBranch {
		return w.bucketPage(id, path, depth)
	}
	over := uint64(le.Uint32(hdr[12:]))
	switch {
	case le.Uint64(hdr[0:]) != id:
		return fmt.Errorf("%s: page %d calls itself page %d", what, id, le.Uint64(hdr[0:]))
	case le.Uint16(hdr[8:]) != flagLeaf:
		return fmt.Errorf("%s: page %d has flags %#x, want a leaf page", what, id, le.Uint16(hdr[8:]))
	case over >= w.hwm-id:
		return fmt.Errorf("%s: page %d runs %d pages past the pages in use", what, id, over)
	}
	w.rep.sampled += int(over + 1)
	return w.claim(id, over+1, what)
}

// leaf checks a leaf page (or an inline bucket's page, b starting at its
// header) and walks the buckets it holds.
func (w *walker) leaf(b []byte, id uint64, path []string, depth int, what string) error {
	le := binary.LittleEndian
	n := int(le.Uint16(b[10:]))
	for i := range n {
		e := pageHeaderSize + i*elementSize
		if e+elementSize > len(b) {
			return fmt.Errorf("%s: page %d: %d elements do not fit", what, id, n)
		}
		flags, pos := le.Uint32(b[e:]), int(le.Uint32(b[e+4:]))
		ks, vs := int(le.Uint32(b[e+8:])), int(le.Uint32(b[e+12:]))
		if pos < 0 || ks < 0 || vs < 0 || e+pos+ks+vs > len(b) || e+pos+ks+vs < e {
			return fmt.Errorf("%s: page %d: entry %d lies outside the page", what, id, i)
		}
		key := string(b[e+pos : e+pos+ks])
		val := b[e+pos+ks : e+pos+ks+vs]
		if flags&leafIsBucket == 0 {
			if w.visit != nil {
				w.visit(path, []byte(key), val)
			}
			continue
		}
		sub := append(append([]string(nil), path...), key)
		if len(val) < 16 {
			if err := w.skip(fmt.Errorf("%s: page %d: bucket %q header is %d bytes", what, id, key, len(val))); err != nil {
				return err
			}
			continue
		}
		if w.bucket != nil {
			w.bucket(sub, le.Uint64(val[8:]))
		}
		if root := le.Uint64(val); root != 0 {
			if err := w.skip(w.bucketPage(root, sub, depth+1)); err != nil {
				return err
			}
			continue
		}
		inline := val[16:]
		var err error
		switch {
		case len(inline) < pageHeaderSize || le.Uint16(inline[8:]) != flagLeaf:
			err = fmt.Errorf("bucket /%s: inline page is not a leaf page", joinPath(sub))
		case depth+1 > maxDepth:
			err = fmt.Errorf("bucket /%s: deeper than %d levels", joinPath(sub), maxDepth)
		default:
			err = w.leaf(inline, id, sub, depth+1, "bucket /"+joinPath(sub))
		}
		if err := w.skip(err); err != nil {
			return err
		}
	}
	return nil
}

func joinPath(p []string) string {
	out := ""
	for i, s := range p {
		if i > 0 {
			out += "/"
		}
		if len(s) == 8 && i == 1 {
			out += RunID(binary.BigEndian.Uint64([]byte(s))).String()
		} else {
			out += fmt.Sprintf("%q", s)
		}
	}
	return out
}
