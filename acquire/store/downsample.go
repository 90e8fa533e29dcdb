package store

import (
	"encoding/binary"
	"fmt"
	"math"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Bucket summarises the samples of one instrument in [Start, End): the
// pressure's extremes and mean over the good readings, and how many reads
// failed. Min, Max and Mean are NaN when Count is 0.
type Bucket struct {
	Start, End time.Time
	Count      int
	Failed     int
	Min, Max   float64 // Pa
	Mean       float64 // Pa
}

// MaxBuckets bounds a Downsample request.
const MaxBuckets = 100_000

// Downsample splits [from, to] into buckets of equal length and returns,
// per bucket, the minimum, maximum and mean of the committed good samples
// and their count, so a whole night can be drawn without loading millions
// of samples. A zero from or to is the instrument's first or last sample.
// No samples in the range gives no buckets.
func (s *Store) Downsample(run RunID, instrument string, from, to time.Time, buckets int) ([]Bucket, error) {
	if buckets < 1 || buckets > MaxBuckets {
		return nil, fmt.Errorf("downsample %s of run %s: %d buckets, want 1 to %d (%w)", instrument, run, buckets, MaxBuckets, ErrBadInput)
	}
	if from.IsZero() || to.IsZero() {
		first, last, ok, err := s.streamSpan(run, instrument)
		if err != nil || !ok {
			return nil, err
		}
		if from.IsZero() {
			from = first
		}
		if to.IsZero() {
			to = last
		}
	}
	if to.Before(from) || to.Sub(from) == math.MaxInt64 {
		return nil, fmt.Errorf("downsample %s of run %s: from %v to %v is not a range of at most 292 years (%w)", instrument, run, from, to, ErrBadInput)
	}
	span := to.Sub(from) + 1 // [from, to] inclusive, in ns
	width := (span + time.Duration(buckets) - 1) / time.Duration(buckets)
	out := make([]Bucket, buckets)
	for i := range out {
		out[i] = Bucket{Start: from.Add(time.Duration(i) * width), End: from.Add(time.Duration(i+1) * width),
			Min: math.Inf(1), Max: math.Inf(-1)}
	}
	sums := make([]float64, buckets)
	err := s.Samples(run, instrument, from, to, func(x Sample) error {
		b := &out[int(x.Time.Sub(from)/width)]
		if x.Failed {
			b.Failed++
			return nil
		}
		b.Count++
		sums[int(x.Time.Sub(from)/width)] += x.Pa
		b.Min = math.Min(b.Min, x.Pa)
		b.Max = math.Max(b.Max, x.Pa)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("downsample: %w", err)
	}
	for i := range out {
		if out[i].Count == 0 {
			out[i].Min, out[i].Max, out[i].Mean = math.NaN(), math.NaN(), math.NaN()
			continue
		}
		out[i].Mean = sums[i] / float64(out[i].Count)
	}
	return out, nil
}

// streamSpan returns the times of the first and the last committed sample
// of an instrument in a run (ok false when there is none).
func (s *Store) streamSpan(run RunID, instrument string) (first, last time.Time, ok bool, err error) {
	err = s.view("sample span", func(tx *bolt.Tx) error {
		b, err := sampleStream(tx, run, instrument)
		if b == nil {
			return err
		}
		c := b.Cursor()
		k, v := c.First()
		if k == nil {
			return nil
		}
		ok = true
		err = decodeBlock(int64(binary.BigEndian.Uint64(k)), v, func(x Sample) error {
			if first.IsZero() || x.Time.Before(first) {
				first = x.Time
			}
			return nil
		})
		if err != nil {
			return err
		}
		k, v = c.Last()
		return decodeBlock(int64(binary.BigEndian.Uint64(k)), v, func(x Sample) error {
			if x.Time.After(last) {
				last = x.Time
			}
			return nil
		})
	})
	if err != nil {
		err = fmt.Errorf("samples of %s in run %s: %w", instrument, run, err)
	}
	return first, last, ok, err
}
