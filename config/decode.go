package config

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"strconv"
	"strings"
	"time"

	"github.com/go-viper/mapstructure/v2"
)

var durationType = reflect.TypeOf(time.Duration(0))

// decodeHook converts what YAML and the environment give (ints, floats,
// strings, booleans, dates) to the field's type, and refuses in plain words
// what would otherwise be silently changed: a fraction where a count is
// expected, a duration without a unit, a number that is not finite.
func decodeHook(_ reflect.Type, to reflect.Type, data any) (any, error) {
	if data == nil {
		return nil, nil
	}
	if to == durationType {
		return toDuration(data)
	}
	switch to.Kind() {
	case reflect.Int, reflect.Int64:
		return toWhole(data)
	case reflect.Float64:
		return toNumber(data)
	case reflect.Bool:
		return toBool(data)
	case reflect.String:
		return toText(data)
	case reflect.Slice:
		if s, ok := data.(string); ok && to.Elem().Kind() == reflect.String {
			// An environment variable holds a list as comma-separated text.
			parts := strings.Split(s, ",")
			for i := range parts {
				parts[i] = strings.TrimSpace(parts[i])
			}
			return parts, nil
		}
	}
	return data, nil
}

func finite(f float64) error {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return fmt.Errorf("%v is not a finite number", f)
	}
	return nil
}

// Counts and numbers of registers or coils fit easily in this; a value
// beyond it is a typo, and converting it would lose digits.
const maxWhole = 1 << 53

func toWhole(data any) (any, error) {
	switch v := data.(type) {
	case int:
		return int64(v), nil
	case int64:
		return v, nil
	case uint64:
		if v > maxWhole {
			return nil, fmt.Errorf("%d is too large", v)
		}
		return int64(v), nil
	case float64:
		if err := finite(v); err != nil {
			return nil, err
		}
		if v != math.Trunc(v) {
			return nil, fmt.Errorf("%s is not a whole number: give a count such as %s", fmtNum(v), fmtNum(math.Round(v)))
		}
		if math.Abs(v) > maxWhole {
			return nil, fmt.Errorf("%s is too large", fmtNum(v))
		}
		return int64(v), nil
	case string:
		s := strings.TrimSpace(v)
		if n, err := strconv.ParseInt(s, 10, 64); err == nil {
			if n > maxWhole || n < -maxWhole {
				return nil, fmt.Errorf("%s is too large", s)
			}
			return n, nil
		}
		if f, err := strconv.ParseFloat(s, 64); err == nil {
			return toWhole(f)
		}
		return nil, fmt.Errorf("%q is not a whole number", v)
	}
	return nil, fmt.Errorf("expected a whole number, found %s", describe(data))
}

func toNumber(data any) (any, error) {
	switch v := data.(type) {
	case int:
		return float64(v), nil
	case int64:
		return float64(v), nil
	case uint64:
		return float64(v), nil
	case float64:
		return v, finite(v)
	case string:
		f, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
		if err != nil {
			return nil, fmt.Errorf("%q is not a number", v)
		}
		if err := finite(f); err != nil {
			return nil, fmt.Errorf("%q is not a finite number", v)
		}
		return f, nil
	}
	return nil, fmt.Errorf("expected a number, found %s", describe(data))
}

func toBool(data any) (any, error) {
	switch v := data.(type) {
	case bool:
		return v, nil
	case string:
		switch strings.ToLower(strings.TrimSpace(v)) {
		case "true", "yes", "on", "1":
			return true, nil
		case "false", "no", "off", "0":
			return false, nil
		}
		return nil, fmt.Errorf("%q is not true or false", v)
	}
	return nil, fmt.Errorf("expected true or false, found %s", describe(data))
}

// toText lets a number stand for text (serial: 12345, class: 1.6); a
// quantity given as a bare number is then refused by the quantity parser
// for its missing unit, which is the helpful message.
func toText(data any) (any, error) {
	switch v := data.(type) {
	case string:
		return v, nil
	case time.Time:
		return v.Format("2006-01-02"), nil // YAML reads an unquoted date as a timestamp
	case int:
		return strconv.Itoa(v), nil
	case int64:
		return strconv.FormatInt(v, 10), nil
	case uint64:
		return strconv.FormatUint(v, 10), nil
	case float64:
		if err := finite(v); err != nil {
			return nil, err
		}
		return fmtNum(v), nil
	case bool:
		return strconv.FormatBool(v), nil
	}
	return nil, fmt.Errorf("expected a single value, found %s", describe(data))
}

func toDuration(data any) (any, error) {
	const howto = "write it with a unit, e.g. 30s, 500ms, 5m or 2h"
	switch v := data.(type) {
	case time.Duration:
		return v, nil
	case int, int64, uint64, float64:
		f, err := toNumber(v)
		if err != nil {
			return nil, err
		}
		if f.(float64) == 0 {
			return time.Duration(0), nil // zero is zero in any unit
		}
		return nil, fmt.Errorf("%s has no unit: %s", fmtNum(f.(float64)), howto)
	case string:
		s := strings.TrimSpace(v)
		if s == "" {
			return nil, fmt.Errorf("is empty: %s", howto)
		}
		if f, err := strconv.ParseFloat(s, 64); err == nil {
			return toDuration(f)
		}
		d, err := time.ParseDuration(s)
		if err != nil {
			return nil, fmt.Errorf("%q is not a duration: %s", v, howto)
		}
		return d, nil
	}
	return nil, fmt.Errorf("expected a duration such as 30s, found %s", describe(data))
}

// fmtNum writes a number as a person would type it; huge ones in
// exponent form rather than as hundreds of digits.
func fmtNum(f float64) string {
	if math.Abs(f) >= 1e15 {
		return strconv.FormatFloat(f, 'g', -1, 64)
	}
	return strconv.FormatFloat(f, 'f', -1, 64)
}

// describe names a decoded YAML value in plain words.
func describe(data any) string {
	switch v := data.(type) {
	case map[string]any:
		return "a mapping of keys"
	case []any:
		return "a list"
	case bool:
		return strconv.FormatBool(v)
	case string:
		return strconv.Quote(v)
	case nil:
		return "nothing"
	}
	return fmt.Sprint(data)
}

// plainType names a Go type the way the configuration guide does.
func plainType(t reflect.Type) string {
	if t == durationType {
		return "a duration such as 30s"
	}
	switch t.Kind() {
	case reflect.Struct, reflect.Map:
		return "a mapping of keys"
	case reflect.Slice, reflect.Array:
		return "a list"
	case reflect.Int, reflect.Int64, reflect.Int32, reflect.Uint, reflect.Uint64:
		return "a whole number"
	case reflect.Float64, reflect.Float32:
		return "a number"
	case reflect.Bool:
		return "true or false"
	case reflect.Pointer:
		return plainType(t.Elem())
	}
	return "a single value"
}

// decodeProblems turns the decoder's errors into one problem per key, in
// plain words, each with the line (or the environment variable) of the key.
func decodeProblems(err error, p *Problems) {
	var each func(name string, err error)
	each = func(name string, err error) {
		if j, ok := err.(interface{ Unwrap() []error }); ok {
			for _, e := range j.Unwrap() {
				each(name, e)
			}
			return
		}
		var de *mapstructure.DecodeError
		if errors.As(err, &de) && de != err {
			each(name, de) // wrapped, e.g. "decoding failed due to …"
			return
		}
		if de != nil {
			inner := de.Unwrap()
			var nested *mapstructure.DecodeError
			if _, joined := inner.(interface{ Unwrap() []error }); joined || errors.As(inner, &nested) {
				each(de.Name(), inner)
				return
			}
			report(p, de.Name(), inner)
			return
		}
		report(p, name, err)
	}
	each("", err)
}

func report(p *Problems, key string, err error) {
	msg := err.Error()
	var ute *mapstructure.UnconvertibleTypeError
	var pe *mapstructure.ParseError
	switch {
	case strings.Contains(msg, "has invalid keys"):
		return // unknown keys were reported, with a suggestion, while walking the file
	case errors.As(err, &ute):
		msg = fmt.Sprintf("expected %s, found %s", plainType(ute.Expected.Type()), describe(ute.Value))
	case errors.As(err, &pe):
		msg = fmt.Sprintf("expected %s, found %s", plainType(pe.Expected.Type()), describe(pe.Value))
	case strings.HasPrefix(msg, "source data must be an array or slice"):
		msg = "expected a list"
	case strings.HasPrefix(msg, "expected a map or struct"):
		msg = "expected a mapping of keys"
	}
	p.add(Problem{Line: p.line(key), Key: key, Msg: msg})
	p.failed[strings.ToLower(key)] = true
}
