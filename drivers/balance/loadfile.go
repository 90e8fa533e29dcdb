package balance

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	model "plateau/analysis/balance"
)

// The loading file is a few lines of text of our own, written whole by
// `plateau load` (a temporary file renamed over the old one, so the daemon
// never reads half of it):
//
//	# plateau loading
//	loading P1+M1+M2
//	temperature 21.3
//
// or the one word "vented". Blank lines and lines starting with # are
// ignored; temperature (°C of the piston) is optional when the
// configuration enters one for the run.

// maxLoadingFile bounds what is read: a loading is a line or two.
const maxLoadingFile = 4096

// Loading is what is on the piston.
type Loading struct {
	Vented         bool
	Pieces         []string
	TemperatureC   float64
	HasTemperature bool
}

// Text is the loading as the operator writes it, P1+M1+M2 (or "vented").
func (l Loading) Text() string {
	if l.Vented {
		return "vented"
	}
	return strings.Join(l.Pieces, "+")
}

// ParseLoading reads a loading file's content.
func ParseLoading(data []byte) (Loading, error) {
	if len(data) > maxLoadingFile {
		return Loading{}, fmt.Errorf("%d bytes: a loading file holds a line or two", len(data))
	}
	var l Loading
	seen := map[string]int{}
	for n, line := range strings.Split(string(data), "\n") {
		line = strings.TrimSpace(line)
		if line == "" || line[0] == '#' {
			continue
		}
		key, value, _ := strings.Cut(line, " ")
		value = strings.TrimSpace(value)
		if first, dup := seen[key]; dup {
			return Loading{}, fmt.Errorf("line %d: %s is given twice (also line %d)", n+1, key, first)
		}
		seen[key] = n + 1
		switch key {
		case "vented":
			if value != "" {
				return Loading{}, fmt.Errorf("line %d: vented takes nothing after it", n+1)
			}
			l.Vented = true
		case "loading":
			ids, err := model.ParseLoading(value)
			if err != nil {
				return Loading{}, fmt.Errorf("line %d: %w", n+1, err)
			}
			l.Pieces = ids
		case "temperature":
			t, err := strconv.ParseFloat(value, 64)
			if err != nil || math.IsNaN(t) || math.IsInf(t, 0) {
				return Loading{}, fmt.Errorf("line %d: temperature %q is not a number of °C", n+1, value)
			}
			l.TemperatureC, l.HasTemperature = t, true
		default:
			return Loading{}, fmt.Errorf("line %d: %q is not loading, temperature or vented", n+1, key)
		}
	}
	switch {
	case l.Vented && (l.Pieces != nil || l.HasTemperature):
		return Loading{}, errors.New("vented, yet pieces or a temperature are given")
	case !l.Vented && l.Pieces == nil:
		return Loading{}, errors.New("no loading line (and not vented)")
	}
	return l, nil
}

// Format writes a loading as its file's content.
func (l Loading) Format() []byte {
	var b bytes.Buffer
	b.WriteString("# plateau loading\n")
	if l.Vented {
		b.WriteString("vented\n")
		return b.Bytes()
	}
	b.WriteString("loading " + l.Text() + "\n")
	if l.HasTemperature {
		b.WriteString("temperature " + strconv.FormatFloat(l.TemperatureC, 'f', -1, 64) + "\n")
	}
	return b.Bytes()
}

// WriteLoading replaces the loading file at path with l, whole: it writes
// a temporary file next to it, syncs it and renames it over the old one.
func WriteLoading(path string, l Loading) error {
	if _, err := ParseLoading(l.Format()); err != nil {
		return fmt.Errorf("loading %s: %w", l.Text(), err)
	}
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("write loading: %w", err)
	}
	tmp := f.Name()
	_, err = f.Write(l.Format())
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, path)
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("write loading %s: %w", path, err)
	}
	return nil
}
