package line

import (
	"strings"
	"testing"
)

// takeLineByHand is the plain statement of what takeLine does, for the
// differential fuzz below: split what arrived at the terminator, keep the
// part after the last one, and answer the newest line that is not blank.
func takeLineByHand(buf, term string, partial bool) (line string, ok bool, rest string) {
	i := strings.LastIndex(buf, term)
	if i < 0 {
		return "", false, buf
	}
	rest = buf[i+len(term):]
	if partial {
		return "", true, rest
	}
	lines := strings.Split(buf[:i], term)
	for j := len(lines) - 1; j >= 0; j-- {
		if s := strings.TrimSpace(lines[j]); s != "" {
			return s, true, rest
		}
	}
	return "", false, rest
}

func TestTakeLine(t *testing.T) {
	cases := []struct {
		buf, term string
		partial   bool
		line      string
		ok        bool
		rest      string
	}{
		{"+1.0 bar\r\n", "\r\n", false, "+1.0 bar", true, ""},
		{"1\r\n2\r\n3", "\r\n", false, "2", true, "3"},
		{"1\r\n  \r\n\r\n+4", "\r\n", false, "1", true, "+4"},
		{"half", "\r\n", false, "", false, "half"},
		{"tail of a line\n5\n", "\n", true, "", true, ""},
		{"\r\n\r\n", "\r\n", false, "", false, ""},
	}
	for _, c := range cases {
		g := &Gauge{buf: []byte(c.buf), term: []byte(c.term)}
		line, ok := g.takeLine(c.partial)
		if line != c.line || ok != c.ok || string(g.buf) != c.rest {
			t.Errorf("takeLine(%q) = %q, %v, rest %q; want %q, %v, rest %q", c.buf, line, ok, g.buf, c.line, c.ok, c.rest)
		}
	}
}

// Bytes on the line come from outside: takeLine never panics and always
// agrees with the plain statement, whatever arrives and however it is split.
func FuzzTakeLine(f *testing.F) {
	for _, s := range []string{"+1.0 bar\r\n", "1\r\n2\r\n3", "\r\n\r\n", "x\ny\n", "\r\r\n\n", "\x00\xff\r\n"} {
		f.Add(s, 3, uint8(0), false)
	}
	terms := []string{"\r\n", "\n", "\r"}
	f.Fuzz(func(t *testing.T, data string, split int, which uint8, partial bool) {
		term := terms[int(which)%len(terms)]
		if split < 0 || split > len(data) {
			split = len(data) / 2
		}
		g := &Gauge{term: []byte(term)}
		buf := ""
		for _, part := range []string{data[:split], data[split:]} {
			g.buf = append(g.buf, part...)
			buf += part
			line, ok := g.takeLine(partial)
			wantLine, wantOK, rest := takeLineByHand(buf, term, partial)
			if line != wantLine || ok != wantOK || string(g.buf) != rest {
				t.Fatalf("takeLine(%q, %q) = %q, %v, rest %q; want %q, %v, rest %q", buf, term, line, ok, g.buf, wantLine, wantOK, rest)
			}
			buf = rest
		}
	})
}
