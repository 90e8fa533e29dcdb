package store

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
	"time"

	"plateau/drivers"
)

// reading makes a plausible transducer reading: a 16 bar plateau with noise,
// given by the instrument with five decimals in bar.
func reading(rng *rand.Rand, at time.Time) drivers.Reading {
	bar := math.Round((16+2e-4*rng.NormFloat64())*1e5) / 1e5
	return drivers.Reading{Time: at, Pa: bar * 1e5, Raw: bar, RawUnit: "bar", Wire: fmt.Sprintf("%+.5f", bar)}
}

func fileSize(b *testing.B, path string) int64 {
	fi, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	return fi.Size()
}

// benchStore opens a store in a fresh file (no check on cleanup: the
// benchmarks close and check it themselves) with one run.
func benchStore(b *testing.B) (*Store, string, RunID) {
	path := filepath.Join(b.TempDir(), "bench.db")
	s, err := Open(path, Options{})
	if err != nil {
		b.Fatal(err)
	}
	run, err := s.CreateRun("bench", nil)
	if err != nil {
		b.Fatal(err)
	}
	return s, path, run.ID
}

// ingest writes n samples alternating between two instruments at 20 Hz each
// and returns the time it took until everything was committed.
func ingest(b *testing.B, s *Store, run RunID, n int) time.Duration {
	rng := rand.New(rand.NewPCG(1, 2))
	start := time.Now()
	for i := range n {
		at := t0.Add(time.Duration(i/2) * 50 * time.Millisecond)
		if err := s.AddSample(run, []string{"reference", "dut"}[i%2], reading(rng, at), nil); err != nil {
			b.Fatal(err)
		}
	}
	if err := s.Flush(); err != nil {
		b.Fatal(err)
	}
	return time.Since(start)
}

// BenchmarkIngest reports samples per second through AddSample until
// committed, and bytes per sample in the file.
func BenchmarkIngest(b *testing.B) {
	s, path, run := benchStore(b)
	b.ResetTimer()
	d := ingest(b, s, run, b.N)
	b.StopTimer()
	if err := s.Close(); err != nil {
		b.Fatal(err)
	}
	checkFile(b, path)
	b.ReportMetric(float64(b.N)/d.Seconds(), "samples/s")
	if b.N >= 100_000 { // small files are mostly fixed overhead
		b.ReportMetric(float64(fileSize(b, path))/float64(b.N), "file-bytes/sample")
	}
}

// BenchmarkDayOfTwoInstruments ingests a day of two instruments at 20 Hz
// (3.456 million samples), reads it all back and reports seconds and MB.
// Target: well inside a minute, under 120 MB. Run with -benchtime=1x.
func BenchmarkDayOfTwoInstruments(b *testing.B) {
	const n = 2 * 20 * 86400
	for range b.N {
		s, path, run := benchStore(b)
		write := ingest(b, s, run, n)
		start := time.Now()
		read := 0
		for _, inst := range []string{"reference", "dut"} {
			err := s.Samples(run, inst, time.Time{}, time.Time{}, func(Sample) error { read++; return nil })
			if err != nil {
				b.Fatal(err)
			}
		}
		readBack := time.Since(start)
		if read != n {
			b.Fatalf("read back %d samples, wrote %d", read, n)
		}
		if err := s.Check(); err != nil {
			b.Fatal(err)
		}
		if err := s.Close(); err != nil {
			b.Fatal(err)
		}
		size := fileSize(b, path)
		b.ReportMetric(write.Seconds(), "ingest-s")
		b.ReportMetric(readBack.Seconds(), "readback-s")
		b.ReportMetric(float64(size)/1e6, "file-MB")
		b.ReportMetric(float64(size)/n, "file-bytes/sample")
	}
}

// BenchmarkAddPoint measures one committed point (one fsync'd Update).
func BenchmarkAddPoint(b *testing.B) {
	s, path, run := benchStore(b)
	defer func() {
		s.Close()
		checkFile(b, path)
	}()
	i := 0
	for b.Loop() {
		if _, _, err := s.AddPoint(run, point(1+i/1000, "up", "measure", i%1000, 0)); err != nil {
			b.Fatal(err)
		}
		i++
	}
}
