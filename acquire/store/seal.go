package store

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
)

// Records (runs, points, events) are stored sealed: a tag byte, the JSON
// text and a CRC-32C of both, so a changed digit inside a record is caught
// when it is read. Files of format 1 hold unsealed JSON, still accepted
// there.
const sealTag = 0xC5 // never the first byte of JSON text

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

func seal(js []byte) []byte {
	v := make([]byte, 0, len(js)+5)
	v = append(append(v, sealTag), js...)
	return binary.BigEndian.AppendUint32(v, crc32.Checksum(v, castagnoli))
}

// unseal returns the JSON text of a stored record. legacy allows unsealed
// JSON (format-1 files).
func unseal(v []byte, legacy bool) ([]byte, error) {
	if len(v) > 0 && v[0] == '{' && legacy {
		return v, nil
	}
	if len(v) < 5 || v[0] != sealTag {
		return nil, fmt.Errorf("record is not sealed (%d bytes): %w", len(v), ErrDamaged)
	}
	body, sum := v[:len(v)-4], binary.BigEndian.Uint32(v[len(v)-4:])
	if got := crc32.Checksum(body, castagnoli); got != sum {
		return nil, fmt.Errorf("record checksum %08x, stored %08x: %w", got, sum, ErrDamaged)
	}
	return body[1:], nil
}
