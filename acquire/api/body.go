package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"mime"
	"net/http"
	"strings"
	"unicode"
	"unicode/utf8"

	"plateau/analysis/readout"
	"plateau/analysis/units"
)

// maxText bounds free-text fields (labels, names, reasons) in runes.
const maxText = 200

// decode reads a JSON body of at most MaxBody bytes into dst, strictly:
// unknown fields, trailing data and wrong types are refused with a message
// that says what and where. An empty body leaves dst as it is unless
// required. It answers the caller itself and returns false on any problem.
func (s *Server) decode(w http.ResponseWriter, r *http.Request, dst any, required bool) bool {
	data, err := io.ReadAll(http.MaxBytesReader(w, r.Body, s.o.MaxBody))
	if err != nil {
		var tooBig *http.MaxBytesError
		if errors.As(err, &tooBig) {
			writeProblem(w, http.StatusRequestEntityTooLarge, fmt.Sprintf("request body is larger than %d bytes", tooBig.Limit))
			return false
		}
		writeProblem(w, http.StatusBadRequest, "request body could not be read")
		return false
	}
	if len(bytes.TrimSpace(data)) == 0 {
		if required {
			writeProblem(w, http.StatusBadRequest, "request body is empty: send a JSON object")
			return false
		}
		return true
	}
	if ct := r.Header.Get("Content-Type"); ct != "" {
		if mt, _, err := mime.ParseMediaType(ct); err != nil || mt != "application/json" {
			writeProblem(w, http.StatusUnsupportedMediaType, fmt.Sprintf("Content-Type %q: send application/json", ct))
			return false
		}
	}
	if err := decodeStrict(data, dst); err != nil {
		writeProblem(w, http.StatusBadRequest, err.Error())
		return false
	}
	return true
}

// decodeStrict unmarshals exactly one JSON value with no unknown fields.
func decodeStrict(data []byte, dst any) error {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(dst); err != nil {
		return describeJSONError(err)
	}
	if _, err := dec.Token(); err != io.EOF {
		return errors.New("request body: more than one JSON value; send a single object")
	}
	return nil
}

func describeJSONError(err error) error {
	var syntax *json.SyntaxError
	var typ *json.UnmarshalTypeError
	switch {
	case errors.As(err, &syntax):
		return fmt.Errorf("request body: invalid JSON at byte %d: %v", syntax.Offset, syntax)
	case errors.As(err, &typ):
		if typ.Field == "" {
			return fmt.Errorf("request body: expected a JSON object, got %s", typ.Value)
		}
		want := jsonKind(typ.Type.Kind().String())
		if want == "a number" && strings.HasPrefix(typ.Value, "number") {
			return fmt.Errorf("request body: field %q: %s is out of range", typ.Field, strings.TrimPrefix(typ.Value, "number "))
		}
		return fmt.Errorf("request body: field %q: expected %s, got %s", typ.Field, want, typ.Value)
	case errors.Is(err, io.ErrUnexpectedEOF):
		return errors.New("request body: JSON ends too early")
	case strings.HasPrefix(err.Error(), "json: unknown field "):
		return fmt.Errorf("request body: unknown field %s", strings.TrimPrefix(err.Error(), "json: unknown field "))
	}
	return fmt.Errorf("request body: %v", err)
}

func jsonKind(goKind string) string {
	switch goKind {
	case "float64", "float32", "int", "int64", "uint64", "ptr":
		return "a number"
	case "string":
		return "a string"
	case "struct", "map":
		return "an object"
	}
	return goKind
}

// checkText refuses over-long free text and control characters, which have
// no business in a label and would garble logs and reports.
func checkText(field, v string) error {
	if !utf8.ValidString(v) {
		return invalid("field %q: not valid UTF-8", field)
	}
	if n := utf8.RuneCountInString(v); n > maxText {
		return invalid("field %q: %d characters, at most %d allowed", field, n, maxText)
	}
	if i := strings.IndexFunc(v, unicode.IsControl); i >= 0 {
		return invalid("field %q: control character at byte %d", field, i)
	}
	return nil
}

func invalid(format string, args ...any) error {
	return classified{fmt.Errorf(format, args...), ErrInvalid}
}

func (r StartRequest) validate() error {
	return checkText("label", r.Label)
}

// entryBody tells a missing value from a reading of zero.
type entryBody struct {
	Device  string   `json:"device"`
	Value   *float64 `json:"value"`
	Unit    string   `json:"unit"`
	Confirm bool     `json:"confirm"`
}

func (b entryBody) entry() (Entry, error) {
	var errs []error
	if b.Value == nil {
		errs = append(errs, invalid(`field "value": missing; give the reading as a number`))
	} else if math.IsInf(*b.Value, 0) || math.IsNaN(*b.Value) {
		errs = append(errs, invalid(`field "value": not a finite number`))
	}
	if b.Unit == "" {
		errs = append(errs, invalid(`field "unit": missing; give the unit the dial is marked in (%s), or an ambient reading's (°C, K, °F, %%RH, hPa)`, strings.Join(units.Symbols(), ", ")))
	} else if _, err := units.Lookup(b.Unit); err != nil {
		// An ambient instrument typed in by a person reads in its own
		// quantity's units; the engine checks it is the instrument's.
		if _, ambient := readout.Quantity(b.Unit); !ambient {
			errs = append(errs, invalid(`field "unit": %v, nor a temperature (°C, K, °F) or humidity (%%RH) of an ambient instrument`, err))
		}
	}
	if len(errs) > 0 {
		return Entry{}, errors.Join(errs...)
	}
	return Entry{Device: b.Device, Value: *b.Value, Unit: b.Unit, Confirm: b.Confirm}, nil
}

func writeJSON(w http.ResponseWriter, status int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("X-Content-Type-Options", "nosniff")
	w.WriteHeader(status)
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.Encode(v) // the status line is out; a failed write means the caller left
}

func writeProblem(w http.ResponseWriter, status int, msg string) {
	writeJSON(w, status, Problem{Error: msg})
}
