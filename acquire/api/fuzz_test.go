package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"strings"
	"testing"
)

// FuzzSSEReader feeds arbitrary bytes, as a broken or hostile peer might
// send, to the event-stream parser: it must neither panic nor hang, and
// every frame it returns must be one the format allows.
func FuzzSSEReader(f *testing.F) {
	f.Add([]byte("retry: 2000\nid: 0\n\nid: 1\ndata: {\"id\":1}\n\n: keepalive\n\n"))
	f.Add([]byte("data: a\r\ndata: b\r\n\r\nid: 7\n\n"))
	f.Add([]byte("id: x\x00y\ndata\n\nevent: z\n"))
	f.Add([]byte(strings.Repeat("data: x\n", 100) + "\n"))
	f.Fuzz(func(t *testing.T, in []byte) {
		rd := newSSEReader(bytes.NewReader(in))
		for range len(in) + 1 { // each frame uses at least one byte
			fr, err := rd.Next()
			if err != nil {
				if !errors.Is(err, io.EOF) && !strings.Contains(err.Error(), "token too long") {
					t.Fatalf("unexpected error %v", err)
				}
				return
			}
			if !fr.HasID && len(fr.Data) == 0 && !bytes.Contains(in, []byte("data")) {
				t.Fatalf("empty frame returned without a data field in the input")
			}
			if strings.ContainsRune(fr.ID, 0) {
				t.Fatalf("id with NUL accepted: %q", fr.ID)
			}
		}
		t.Fatal("parser returned more frames than the input has bytes")
	})
}

// FuzzEntryBody feeds arbitrary request bodies to the strict decoder and
// the entry check: a body is either refused with a message or yields a
// finite value with a known unit — never a panic, never a zero reading
// made up from a missing field.
func FuzzEntryBody(f *testing.F) {
	f.Add([]byte(`{"value": 4.02, "unit": "bar"}`))
	f.Add([]byte(`{"value": 0, "unit": "kPa"}`))
	f.Add([]byte(`{"unit": "bar"}`))
	f.Add([]byte(`{"value": 1e400, "unit": "bar"}`))
	f.Add([]byte(`{"value": "1", "unit": 2}{}`))
	f.Add([]byte(`[{"value": 1}]`))
	f.Fuzz(func(t *testing.T, in []byte) {
		var b entryBody
		if err := decodeStrict(in, &b); err != nil {
			if err.Error() == "" {
				t.Fatal("refusal without a message")
			}
			return
		}
		e, err := b.entry()
		if err != nil {
			if !errors.Is(err, ErrInvalid) {
				t.Fatalf("entry error not marked invalid: %v", err)
			}
			return
		}
		if b.Value == nil {
			t.Fatal("entry accepted without a value")
		}
		// An accepted body must round-trip to the same entry.
		again, _ := json.Marshal(e)
		var b2 entryBody
		if err := decodeStrict(again, &b2); err != nil {
			t.Fatalf("accepted entry %+v does not re-decode: %v", e, err)
		}
		if e2, err := b2.entry(); err != nil || e2 != e {
			t.Fatalf("round trip %+v → %+v, %v", e, e2, err)
		}
	})
}
