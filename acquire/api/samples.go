package api

import (
	"errors"
	"fmt"
	"math"
	"net/http"
	"slices"
	"strconv"
	"strings"
	"time"

	"plateau/acquire/store"
)

// DefaultBuckets is how many buckets a samples call gets when it asks for
// no number: enough for a chart as wide as a screen.
const DefaultBuckets = 600

// sampleSource is what the samples call needs from the records; *store.Store
// has it. It is asked for by type, so Records stays as small as it is.
type sampleSource interface {
	Downsample(run store.RunID, instrument string, from, to time.Time, buckets int) ([]store.Bucket, error)
	Instruments(run store.RunID) ([]string, error)
}

// SampleBucket is one bucket of a samples reply. The pressures are absent
// when no good reading fell in the bucket.
type SampleBucket struct {
	Start  time.Time `json:"start"`
	End    time.Time `json:"end"`
	Count  int       `json:"count"`
	Failed int       `json:"failed,omitempty"`
	MinPa  *float64  `json:"min_pa,omitempty"`
	MaxPa  *float64  `json:"max_pa,omitempty"`
	MeanPa *float64  `json:"mean_pa,omitempty"`
}

// Samples is the reply to a samples call.
type Samples struct {
	Run        string         `json:"run"`
	Instrument string         `json:"instrument"`
	Buckets    []SampleBucket `json:"buckets"`
}

// handleSamples answers GET /api/v1/runs/{id}/samples?instrument=…&from=…&to=…&buckets=N
// with the instrument's committed samples summarised per bucket (min, max,
// mean, count), so a chart of a whole night costs a few hundred rows.
func (s *Server) handleSamples(w http.ResponseWriter, r *http.Request) {
	src, ok := s.o.Records.(sampleSource)
	if !ok {
		writeProblem(w, http.StatusNotImplemented, "samples are not available from this daemon")
		return
	}
	q, err := parseSampleQuery(r)
	if err != nil {
		s.fail(w, err)
		return
	}
	id, err := s.runID(r)
	if err != nil {
		s.fail(w, err)
		return
	}
	if _, err := s.o.Records.Run(id); err != nil {
		s.fail(w, err)
		return
	}
	names, err := src.Instruments(id)
	if err != nil {
		s.fail(w, fmt.Errorf("samples of run %s: %w", id, err))
		return
	}
	if !slices.Contains(names, q.instrument) {
		s.fail(w, fmt.Errorf("run %s has no samples of instrument %q (it has: %s): %w", id, q.instrument, listOrNone(names), ErrNotFound))
		return
	}
	bs, err := src.Downsample(id, q.instrument, q.from, q.to, q.buckets)
	if err != nil {
		s.fail(w, err)
		return
	}
	out := Samples{Run: id.String(), Instrument: q.instrument, Buckets: make([]SampleBucket, len(bs))}
	for i, b := range bs {
		sb := SampleBucket{Start: b.Start, End: b.End, Count: b.Count, Failed: b.Failed}
		if b.Count > 0 {
			sb.MinPa, sb.MaxPa, sb.MeanPa = finite(b.Min), finite(b.Max), finite(b.Mean)
		}
		out.Buckets[i] = sb
	}
	writeJSON(w, http.StatusOK, out)
}

type sampleQuery struct {
	instrument string
	from, to   time.Time
	buckets    int
}

// parseSampleQuery reads the samples call's parameters; every mistake is
// named in one error.
func parseSampleQuery(r *http.Request) (sampleQuery, error) {
	v := r.URL.Query()
	q := sampleQuery{instrument: v.Get("instrument"), buckets: DefaultBuckets}
	var errs []error
	if q.instrument == "" {
		errs = append(errs, invalid("query parameter instrument: missing; name the instrument, e.g. instrument=ref"))
	}
	for _, p := range []struct {
		name string
		dst  *time.Time
	}{{"from", &q.from}, {"to", &q.to}} {
		raw := v.Get(p.name)
		if raw == "" {
			continue // the first or last sample
		}
		t, err := time.Parse(time.RFC3339Nano, raw)
		if err != nil {
			errs = append(errs, invalid("query parameter %s=%q: want a time such as 2026-03-01T22:00:00Z", p.name, raw))
			continue
		}
		*p.dst = t
	}
	if raw := v.Get("buckets"); raw != "" {
		n, err := strconv.Atoi(raw)
		if err != nil || n < 1 || n > store.MaxBuckets {
			errs = append(errs, invalid("query parameter buckets=%q: want a whole number from 1 to %d", raw, store.MaxBuckets))
		} else {
			q.buckets = n
		}
	}
	if !q.from.IsZero() && !q.to.IsZero() && q.to.Before(q.from) {
		errs = append(errs, invalid("query parameters from and to: to (%s) is before from (%s)", q.to.Format(time.RFC3339Nano), q.from.Format(time.RFC3339Nano)))
	}
	return q, errors.Join(errs...)
}

func finite(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func listOrNone(names []string) string {
	if len(names) == 0 {
		return "none"
	}
	return strings.Join(names, ", ")
}
