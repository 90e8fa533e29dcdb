package api

import (
	"bufio"
	"bytes"
	"io"
)

// maxSSELine bounds one line of an event stream, so a broken or hostile
// peer cannot make the client buffer without end.
const maxSSELine = 1 << 20

// sseFrame is one dispatched block of a text/event-stream.
type sseFrame struct {
	ID    string // the id field, if the block had one
	HasID bool
	Data  []byte // data lines joined by "\n"; empty for an id-only block
}

// sseReader parses text/event-stream framing: "field: value" lines, comment
// lines starting with ':', blocks ended by a blank line. Lines may end in
// "\n" or "\r\n".
type sseReader struct {
	sc *bufio.Scanner
}

func newSSEReader(r io.Reader) *sseReader {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 4096), maxSSELine)
	return &sseReader{sc: sc}
}

// Next returns the next block that carries an id or data. At the end of
// input it returns io.EOF; a block cut off by the end is discarded, as the
// format requires.
func (r *sseReader) Next() (sseFrame, error) {
	var f sseFrame
	var data [][]byte
	hasData := false
	for r.sc.Scan() {
		line := bytes.TrimSuffix(r.sc.Bytes(), []byte("\r"))
		if len(line) == 0 {
			if hasData || f.HasID {
				f.Data = bytes.Join(data, []byte("\n"))
				return f, nil
			}
			continue
		}
		if line[0] == ':' {
			continue // comment, e.g. keepalive
		}
		field, value, _ := bytes.Cut(line, []byte(":"))
		value = bytes.TrimPrefix(value, []byte(" "))
		switch string(field) {
		case "data":
			data = append(data, bytes.Clone(value))
			hasData = true
		case "id":
			if bytes.IndexByte(value, 0) < 0 { // the format ignores ids with NUL
				f.ID, f.HasID = string(value), true
			}
		}
	}
	if err := r.sc.Err(); err != nil {
		return sseFrame{}, err
	}
	return sseFrame{}, io.EOF
}
