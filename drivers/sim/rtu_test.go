package sim

import (
	"bytes"
	"encoding/hex"
	"strings"
	"testing"

	"github.com/simonvetter/modbus"

	"plateau/drivers/crc16"
)

// tableHandler is a plain register table for checking the responder
// against published frames, independent of the rig's register map.
type tableHandler struct {
	holding, input map[uint16]uint16
	coils          map[uint16]bool
	writes         []string
}

func (h *tableHandler) HandleCoils(req *modbus.CoilsRequest) ([]bool, error) {
	out := make([]bool, req.Quantity)
	for i := range out {
		a := req.Addr + uint16(i)
		v, ok := h.coils[a]
		if !ok {
			return nil, modbus.ErrIllegalDataAddress
		}
		if req.IsWrite {
			h.coils[a] = req.Args[i]
			continue
		}
		out[i] = v
	}
	return out, nil
}

func (h *tableHandler) HandleDiscreteInputs(req *modbus.DiscreteInputsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalDataAddress
}

func (h *tableHandler) HandleHoldingRegisters(req *modbus.HoldingRegistersRequest) ([]uint16, error) {
	out := make([]uint16, req.Quantity)
	for i := range out {
		a := req.Addr + uint16(i)
		if req.IsWrite {
			h.holding[a] = req.Args[i]
			h.writes = append(h.writes, hex.EncodeToString([]byte{byte(a >> 8), byte(a), byte(req.Args[i] >> 8), byte(req.Args[i])}))
			continue
		}
		v, ok := h.holding[a]
		if !ok {
			return nil, modbus.ErrIllegalDataAddress
		}
		out[i] = v
	}
	return out, nil
}

func (h *tableHandler) HandleInputRegisters(req *modbus.InputRegistersRequest) ([]uint16, error) {
	out := make([]uint16, req.Quantity)
	for i := range out {
		v, ok := h.input[req.Addr+uint16(i)]
		if !ok {
			return nil, modbus.ErrIllegalDataAddress
		}
		out[i] = v
	}
	return out, nil
}

func unhex(t testing.TB, s string) []byte {
	t.Helper()
	b, err := hex.DecodeString(strings.ReplaceAll(s, " ", ""))
	if err != nil {
		t.Fatalf("bad hex %q: %v", s, err)
	}
	return b
}

// CRC-16/MODBUS check value for the ASCII string "123456789" is 0x4B37
// (REFERENCES.md §9.2; the CRC catalogue's check value for CRC-16/MODBUS).
func TestCRC16CheckValue(t *testing.T) {
	if got := crc16.Modbus([]byte("123456789")); got != 0x4B37 {
		t.Fatalf("crc16(\"123456789\") = %#04x, want 0x4B37", got)
	}
	// The wire carries the low byte first: CRC 0x1774 appears as 74 17
	// (REFERENCES.md §9.1, read holding 108–110 of slave 1).
	if got := crc16.Append(unhex(t, "01 03 00 6B 00 03")); !bytes.Equal(got, unhex(t, "01 03 00 6B 00 03 74 17")) {
		t.Fatalf("frame with CRC = % X", got)
	}
}

// Every request/response pair here is a published frame: MODBUS Application
// Protocol Specification V1.1b3 §6.3, 6.4, 6.6, 6.12 examples with RTU
// framing for slave 1, and the further verified frames of REFERENCES.md §9.1.
func TestRTUFramesByteForByte(t *testing.T) {
	newTable := func() *tableHandler {
		return &tableHandler{
			holding: map[uint16]uint16{0x6B: 555, 0x6C: 0, 0x6D: 100, 0: 0, 1: 1, 2: 2, 4: 0},
			input:   map[uint16]uint16{8: 10, 0x20: 5, 0x21: 10, 0x22: 16},
			coils:   map[uint16]bool{},
		}
	}
	cases := []struct {
		name      string
		unit      uint8
		req, resp string
		writes    string // registers written, "aaaavvvv" each
	}{
		{"FC03 read holding 108-110 (spec §6.3)", 1, "01 03 00 6B 00 03 74 17", "01 03 06 02 2B 00 00 00 64 05 7A", ""},
		{"FC04 read input register 9 (spec §6.4)", 1, "01 04 00 08 00 01 B0 08", "01 04 02 00 0A 39 37", ""},
		{"FC06 write register 2 = 3 (spec §6.6)", 1, "01 06 00 01 00 03 98 0B", "01 06 00 01 00 03 98 0B", "00010003"},
		{"FC16 write registers 2-3 (spec §6.12)", 1, "01 10 00 01 00 02 04 00 0A 01 02 92 30", "01 10 00 01 00 02 10 08", "0001000a 00020102"},
		{"FC03 slave 2 three registers", 2, "02 03 00 00 00 03 05 F8", "02 03 06 00 00 00 01 00 02 E5 84", ""},
		{"FC04 three input registers", 1, "01 04 00 20 00 03 B1 C1", "01 04 06 00 05 00 0A 00 10 8D 5D", ""},
		{"FC06 write register 5 = 20", 1, "01 06 00 04 00 14 C8 04", "01 06 00 04 00 14 C8 04", "00040014"},
		// Quantity 0 is an illegal data value; the published exception frame.
		{"exception illegal data value", 2, appendHex(t, "02 03 00 00 00 00"), "02 83 03 F1 31", ""},
		// Coil 0 of slave 10 does not exist here: the spec's exception example.
		{"exception illegal data address", 10, appendHex(t, "0A 01 00 00 00 01"), "0A 81 02 B0 53", ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newTable()
			r := &rtuResponder{unit: c.unit, h: h}
			got := r.respond(unhex(t, c.req))
			if want := unhex(t, c.resp); !bytes.Equal(got, want) {
				t.Fatalf("response\n got % X\nwant % X", got, want)
			}
			if w := strings.Join(h.writes, " "); w != c.writes {
				t.Fatalf("writes %q, want %q", w, c.writes)
			}
		})
	}
}

func appendHex(t *testing.T, s string) string {
	return hex.EncodeToString(crc16.Append(unhex(t, s)))
}

func TestRTUSilentCases(t *testing.T) {
	h := &tableHandler{holding: map[uint16]uint16{1: 7}, input: map[uint16]uint16{}, coils: map[uint16]bool{}}
	r := &rtuResponder{unit: 1, h: h}
	cases := []struct{ name, frame string }{
		{"bad CRC", "01 03 00 6B 00 03 74 18"},
		{"another slave", appendHex(t, "05 03 00 01 00 01")},
		{"short frame", "01 03 00"},
		{"broadcast write is executed but not answered", appendHex(t, "00 06 00 01 00 09")},
	}
	for _, c := range cases {
		if got := r.respond(unhex(t, c.frame)); got != nil {
			t.Errorf("%s: got reply % X, want silence", c.name, got)
		}
	}
	if h.holding[1] != 9 {
		t.Errorf("broadcast write not executed: register 1 = %d", h.holding[1])
	}
}

func TestRTUExceptions(t *testing.T) {
	h := &tableHandler{holding: map[uint16]uint16{}, input: map[uint16]uint16{}, coils: map[uint16]bool{0: false}}
	r := &rtuResponder{unit: 1, h: h}
	cases := []struct {
		name, req string
		fc, code  byte
	}{
		{"unknown function", "01 2B 0E 01 00", 0xAB, exIllegalFunction},
		{"too many registers", "01 03 00 00 00 7E", 0x83, exIllegalDataValue},
		{"too many coils", "01 01 00 00 07 D1", 0x81, exIllegalDataValue},
		{"coil value not FF00/0000", "01 05 00 00 12 34", 0x85, exIllegalDataValue},
		{"byte count mismatch", "01 10 00 00 00 02 03 00 01 00", 0x90, exIllegalDataValue},
		{"absent register", "01 03 00 10 00 01", 0x83, exIllegalDataAddress},
	}
	for _, c := range cases {
		got := r.respond(crc16.Append(unhex(t, c.req)))
		want := crc16.Append([]byte{1, c.fc, c.code})
		if !bytes.Equal(got, want) {
			t.Errorf("%s: got % X, want % X", c.name, got, want)
		}
	}
	// FC05 then FC01 through the responder: the coil is set and read back.
	if got := r.respond(crc16.Append(unhex(t, "01 05 00 00 FF 00"))); !bytes.Equal(got, crc16.Append(unhex(t, "01 05 00 00 FF 00"))) {
		t.Fatalf("FC05 reply % X", got)
	}
	if got := r.respond(crc16.Append(unhex(t, "01 01 00 00 00 01"))); !bytes.Equal(got, crc16.Append(unhex(t, "01 01 01 01"))) {
		t.Fatalf("FC01 reply % X", got)
	}
	// FC15 clears it.
	if got := r.respond(crc16.Append(unhex(t, "01 0F 00 00 00 01 01 00"))); !bytes.Equal(got, crc16.Append(unhex(t, "01 0F 00 00 00 01"))) {
		t.Fatalf("FC15 reply % X", got)
	}
	if h.coils[0] {
		t.Fatal("FC15 did not clear coil 0")
	}
}

// FuzzRTUFrame feeds arbitrary bytes from the line to the responder: it must
// never panic, and any reply it gives is a well-formed frame for its unit.
func FuzzRTUFrame(f *testing.F) {
	f.Add(unhex(f, "01 03 00 6B 00 03 74 17"))
	f.Add(unhex(f, "01 10 00 01 00 02 04 00 0A 01 02 92 30"))
	f.Add(crc16.Append(unhex(f, "01 0F 00 00 00 10 02 FF FF")))
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, frame []byte) {
		h := &tableHandler{holding: map[uint16]uint16{0: 1, 1: 2}, input: map[uint16]uint16{0: 3}, coils: map[uint16]bool{0: true, 1: false}}
		r := &rtuResponder{unit: 1, h: h}
		// A frame taken as whole before its silence must be one the
		// responder reads as a request: it checks the CRC the same way.
		if wholeRequest(frame) && crc16.Modbus(frame[:len(frame)-2]) != uint16(frame[len(frame)-2])|uint16(frame[len(frame)-1])<<8 {
			t.Fatalf("% X taken as a whole request with a bad CRC", frame)
		}
		got := r.respond(frame)
		if got == nil {
			return
		}
		if len(got) < 5 || got[0] != 1 || crc16.Modbus(got[:len(got)-2]) != uint16(got[len(got)-2])|uint16(got[len(got)-1])<<8 {
			t.Fatalf("malformed reply % X to % X", got, frame)
		}
	})
}

// A request is taken as whole as soon as its last byte is in, not before,
// and nothing else is.
func TestWholeRequest(t *testing.T) {
	read := unhex(t, "01 03 00 6B 00 03 74 17")
	write := unhex(t, "01 10 00 01 00 02 04 00 0A 01 02 92 30")
	for _, c := range []struct {
		name  string
		frame []byte
		whole bool
	}{
		{"read", read, true},
		{"read, one byte short", read[:7], false},
		{"read, one byte more", append(append([]byte{}, read...), 0), false},
		{"read, bad CRC", append(append([]byte{}, read[:7]...), read[7]^1), false},
		{"write registers", write, true},
		{"write registers, half", write[:9], false},
		{"unknown function", crc16.Append(unhex(t, "01 2B 0E 01 00 00")), false},
		{"empty", nil, false},
	} {
		if got := wholeRequest(c.frame); got != c.whole {
			t.Errorf("%s: whole = %v, want %v", c.name, got, c.whole)
		}
	}
}
