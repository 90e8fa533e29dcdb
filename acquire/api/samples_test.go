package api

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"net/http/httptest"
	"net/url"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
	"plateau/drivers"
)

// samples asks the daemon for a run's samples in buckets.
func (c *Client) samples(ctx context.Context, run string, q url.Values) (Samples, error) {
	var out Samples
	return out, c.call(ctx, "GET", "/api/v1/runs/"+run+"/samples?"+q.Encode(), nil, &out)
}

// putSamples stores n readings of instrument in run 1, every step, with
// failed reads where fail says, and returns what it stored.
func putSamples(t testing.TB, st *store.Store, instrument string, start time.Time, step time.Duration, pa []float64, fail func(int) bool) []store.Sample {
	t.Helper()
	out := make([]store.Sample, len(pa))
	for i, v := range pa {
		at := start.Add(time.Duration(i) * step)
		smp := store.SampleOf(drivers.Reading{Time: at, Pa: v, Raw: v / 1e5, RawUnit: "bar"}, nil)
		if fail != nil && fail(i) {
			smp = store.SampleOf(drivers.Reading{Time: at}, &drivers.ReadError{Kind: drivers.KindTimeout, Err: errors.New("no reply")})
		}
		if err := st.Put(1, instrument, smp); err != nil {
			t.Fatal(err)
		}
		out[i] = smp
	}
	if err := st.Flush(); err != nil {
		t.Fatal(err)
	}
	return out
}

// TestSamplesContainEverySample is the property the page relies on to draw
// a whole night faithfully: over random runs, ranges and bucket counts,
// every good sample in the range lies inside its bucket's min and max, the
// bucket's mean lies between them, and the counts add up to the samples
// in the range, good and failed.
func TestSamplesContainEverySample(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	ctx := context.Background()
	if _, err := h.http.Start(ctx, StartRequest{}); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(17, 4))
	start := time.Date(2026, 3, 1, 22, 0, 0, 0, time.UTC)
	const n = 5000
	pa := make([]float64, n)
	level := 0.0
	for i := range pa {
		if i%700 == 0 {
			level = rng.Float64() * 1.6e6 // a new step of the plan
		}
		pa[i] = level + rng.NormFloat64()*30
	}
	stored := putSamples(t, h.st, "ref", start, 50*time.Millisecond, pa, func(i int) bool { return i%97 == 13 })
	last := stored[n-1].Time

	for trial := range 60 {
		q := url.Values{"instrument": {"ref"}}
		from, to := start, last
		if trial%3 != 0 { // a third ask for the whole run with no bounds
			a, b := rng.IntN(n), rng.IntN(n)
			from, to = stored[min(a, b)].Time.Add(-time.Duration(rng.IntN(40))*time.Millisecond), stored[max(a, b)].Time
			q.Set("from", from.Format(time.RFC3339Nano))
			q.Set("to", to.Format(time.RFC3339Nano))
		}
		buckets := 1 + rng.IntN(400)
		q.Set("buckets", fmt.Sprint(buckets))
		got, err := h.http.samples(ctx, "r000001", q)
		if err != nil {
			t.Fatalf("trial %d (%v): %v", trial, q, err)
		}
		if len(got.Buckets) != buckets {
			t.Fatalf("trial %d: %d buckets, asked for %d", trial, len(got.Buckets), buckets)
		}
		good, failed := map[int]int{}, map[int]int{}
		for _, smp := range stored {
			if smp.Time.Before(from) || smp.Time.After(to) {
				continue
			}
			i := bucketOf(got.Buckets, smp.Time)
			if i < 0 {
				t.Fatalf("trial %d: sample at %v lies in no bucket", trial, smp.Time)
			}
			if smp.Failed {
				failed[i]++
				continue
			}
			good[i]++
			b := got.Buckets[i]
			if b.MinPa == nil || b.MaxPa == nil || smp.Pa < *b.MinPa || smp.Pa > *b.MaxPa {
				t.Fatalf("trial %d: sample %g Pa at %v outside its bucket %+v", trial, smp.Pa, smp.Time, b)
			}
		}
		for i, b := range got.Buckets {
			if b.Count != good[i] || b.Failed != failed[i] {
				t.Fatalf("trial %d bucket %d: count %d failed %d, want %d and %d", trial, i, b.Count, b.Failed, good[i], failed[i])
			}
			if b.Count > 0 && (*b.MeanPa < *b.MinPa-1e-9 || *b.MeanPa > *b.MaxPa+1e-9) {
				t.Fatalf("trial %d bucket %d: mean %g outside [%g, %g]", trial, i, *b.MeanPa, *b.MinPa, *b.MaxPa)
			}
			if b.Count == 0 && (b.MinPa != nil || b.MaxPa != nil || b.MeanPa != nil) {
				t.Fatalf("trial %d bucket %d: an empty bucket carries pressures: %+v", trial, i, b)
			}
		}
	}
}

// bucketOf finds the bucket [Start, End) holding at, or -1.
func bucketOf(bs []SampleBucket, at time.Time) int {
	for i, b := range bs {
		if !at.Before(b.Start) && at.Before(b.End) {
			return i
		}
	}
	return -1
}

// TestSamplesRefusals checks that every bad request says what and where.
func TestSamplesRefusals(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	ctx := context.Background()
	if _, err := h.http.Start(ctx, StartRequest{}); err != nil {
		t.Fatal(err)
	}
	putSamples(t, h.st, "ref", time.Date(2026, 3, 1, 22, 0, 0, 0, time.UTC), time.Second, []float64{1, 2, 3}, nil)
	for _, c := range []struct {
		name, path string
		code       int
		want       []string
	}{
		{"no instrument", "/api/v1/runs/r1/samples", 400, []string{"instrument: missing"}},
		{"unknown instrument", "/api/v1/runs/r1/samples?instrument=dut", 404, []string{`"dut"`, "it has: ref"}},
		{"bad buckets", "/api/v1/runs/r1/samples?instrument=ref&buckets=0", 400, []string{"buckets=\"0\"", "1 to 100000"}},
		{"too many buckets", "/api/v1/runs/r1/samples?instrument=ref&buckets=100001", 400, []string{"buckets="}},
		{"bad time", "/api/v1/runs/r1/samples?instrument=ref&from=yesterday", 400, []string{`from="yesterday"`, "2026-03-01T22:00:00Z"}},
		{"reversed range", "/api/v1/runs/r1/samples?instrument=ref&from=2026-03-02T00:00:00Z&to=2026-03-01T00:00:00Z", 400, []string{"is before from"}},
		{"every mistake at once", "/api/v1/runs/r1/samples?buckets=x&to=soon", 400, []string{"instrument: missing", `to="soon"`, `buckets="x"`}},
		{"unknown run", "/api/v1/runs/r9/samples?instrument=ref", 404, []string{"r000009"}},
		{"malformed run", "/api/v1/runs/tuesday/samples?instrument=ref", 400, []string{"tuesday"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			code, _, body := raw(t, h.http, "GET", c.path, "", "", "")
			if code != c.code {
				t.Fatalf("status %d, want %d: %s", code, c.code, body)
			}
			var p Problem
			if err := json.Unmarshal([]byte(body), &p); err != nil {
				t.Fatalf("refusal is not JSON: %q", body)
			}
			for _, w := range c.want {
				if !strings.Contains(p.Error, w) {
					t.Errorf("message %q lacks %q", p.Error, w)
				}
			}
		})
	}
}

// BenchmarkSamplesDay asks over loopback TCP for the reference of a run of
// a day with two instruments at 20 Hz (3 456 000 samples) in 600 buckets,
// the whole-run chart of the live page: the store's read, the bucketing
// and the JSON reply.
func BenchmarkSamplesDay(b *testing.B) {
	h := newHarness(b, harnessOptions{})
	ctx := context.Background()
	if _, err := h.http.Start(ctx, StartRequest{}); err != nil {
		b.Fatal(err)
	}
	const perDay = 20 * 86400
	start := time.Date(2026, 3, 1, 18, 0, 0, 0, time.UTC)
	pa := make([]float64, perDay)
	for i := range pa {
		pa[i] = 1e5*float64(i/36000%17) + 20*math.Sin(float64(i)/7) // steps of 30 min with noise
	}
	for _, name := range []string{"ref", "dut"} {
		putSamples(b, h.st, name, start, 50*time.Millisecond, pa, nil)
	}
	q := url.Values{"instrument": {"ref"}, "buckets": {"600"}}
	b.ResetTimer()
	for b.Loop() {
		got, err := h.http.samples(ctx, "r000001", q)
		if err != nil || len(got.Buckets) != 600 || got.Buckets[0].Count == 0 {
			b.Fatalf("%d buckets, %v", len(got.Buckets), err)
		}
	}
}

// FuzzSampleQuery feeds the samples call's query parser any query string:
// it never panics, and what it accepts is a usable request.
func FuzzSampleQuery(f *testing.F) {
	for _, seed := range []string{
		"instrument=ref&buckets=600",
		"instrument=ref&from=2026-03-01T22:00:00Z&to=2026-03-02T06:00:00.5Z",
		"instrument=&buckets=-1&from=x",
		"instrument=dut&buckets=99999999999999999999",
		"buckets=1e3&to=2026-03-01T22:00:00+01:00",
	} {
		f.Add(seed)
	}
	f.Fuzz(func(t *testing.T, raw string) {
		r := httptest.NewRequest("GET", "/api/v1/runs/r1/samples", nil)
		r.URL.RawQuery = raw
		q, err := parseSampleQuery(r)
		if err != nil {
			if !errors.Is(err, ErrInvalid) {
				t.Fatalf("%q: refusal %v is not marked invalid (400)", raw, err)
			}
			return
		}
		if q.instrument == "" || q.buckets < 1 || q.buckets > store.MaxBuckets {
			t.Fatalf("%q accepted as %+v", raw, q)
		}
		if !q.from.IsZero() && !q.to.IsZero() && q.to.Before(q.from) {
			t.Fatalf("%q accepted with to before from: %+v", raw, q)
		}
	})
}
