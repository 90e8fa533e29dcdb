package crc16

import (
	"bytes"
	"encoding/hex"
	"strings"
	"testing"
)

// The catalogue check value of CRC-16/MODBUS for the ASCII digits
// "123456789" is 0x4B37 (the usual CRC catalogue entry; recomputed in
// REFERENCES.md §9.2).
func TestCheckValue(t *testing.T) {
	if got := Modbus([]byte("123456789")); got != 0x4B37 {
		t.Fatalf("CRC = %#04x, want 0x4B37", got)
	}
}

// Whole RTU frames from the Modbus Application Protocol V1.1b3 examples
// (FC 03, 04, 06, 16 and an exception), as reproduced byte for byte in
// device manuals (REFERENCES.md §9.1).
func TestSpecificationFrames(t *testing.T) {
	for _, f := range []string{
		"01 03 00 6B 00 03 74 17",
		"01 03 06 02 2B 00 00 00 64 05 7A",
		"01 04 00 08 00 01 B0 08",
		"01 04 02 00 0A 39 37",
		"01 06 00 01 00 03 98 0B",
		"01 10 00 01 00 02 04 00 0A 01 02 92 30",
		"01 10 00 01 00 02 10 08",
		"02 83 03 F1 31",
	} {
		b, err := hex.DecodeString(strings.ReplaceAll(f, " ", ""))
		if err != nil {
			t.Fatal(err)
		}
		if !Valid(b) {
			t.Errorf("%s: CRC does not check", f)
		}
		if got := Append(append([]byte(nil), b[:len(b)-2]...)); !bytes.Equal(got, b) {
			t.Errorf("%s: Append gives % X", f, got)
		}
		b[0] ^= 1
		if Valid(b) {
			t.Errorf("%s: a changed byte still checks", f)
		}
	}
}
