package store

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// benchBench is an invented bench for the benchmarks: a 16 bar plan of
// steps up and down (dwell 60 s, ramp 20 s), a reference transducer with
// noise of 2e-4 bar that replies with five decimals in bar, and a device
// under test quantised to its 0.01 bar resolution with a 0.003 bar offset.
// Both are read at 20 Hz on a 50 ms grid, or with a Gaussian jitter.
type benchBench struct {
	rng    *rand.Rand
	jitter time.Duration
}

var benchInstruments = [2]string{"reference", "dut"}

// sample returns sample i of the interleaved stream: instrument i%2, at
// step i/2.
func (g *benchBench) sample(i int) (string, Sample) {
	step := i / 2
	at := t0.Add(time.Duration(step) * 50 * time.Millisecond)
	if g.jitter > 0 {
		at = at.Add(time.Duration(g.rng.NormFloat64() * float64(g.jitter)))
	}
	// The plan: 0, 4, 8, 12, 16 bar up and down again, 80 s per step.
	const perStep = 80 * 20
	k := (step / perStep) % 10
	level := float64(min(k, 9-k)) * 4
	if in := step % perStep; in < 20*20 { // ramp from the previous level
		prev := float64(min((k+9)%10, 9-(k+9)%10)) * 4
		level = prev + (level-prev)*float64(in)/400
	}
	if i%2 == 0 {
		bar := math.Round((level+2e-4*g.rng.NormFloat64())*1e5) / 1e5
		return benchInstruments[0], Sample{Time: at, Raw: bar, Pa: bar * 1e5, RawUnit: "bar", Wire: fmt.Sprintf("%+.5f", bar)}
	}
	bar := math.Round((level+0.003+1e-3*g.rng.NormFloat64())*100) / 100
	return benchInstruments[1], Sample{Time: at, Raw: bar, Pa: bar * 1e5, RawUnit: "bar", Wire: fmt.Sprintf("%.2f bar", bar)}
}

func fileSize(tb testing.TB, path string) int64 {
	fi, err := os.Stat(path)
	if err != nil {
		tb.Fatal(err)
	}
	return fi.Size()
}

// benchStore opens a store in a fresh file with one run.
func benchStore(tb testing.TB) (*Store, string, RunID) {
	path := filepath.Join(tb.TempDir(), "bench.db")
	s, err := Open(path, Options{})
	if err != nil {
		tb.Fatal(err)
	}
	run, err := s.CreateRun("bench", nil)
	if err != nil {
		tb.Fatal(err)
	}
	return s, path, run.ID
}

// ingest puts n samples of the bench through Put until committed.
func ingest(tb testing.TB, s *Store, run RunID, n int, jitter time.Duration) time.Duration {
	g := &benchBench{rng: rand.New(rand.NewPCG(1, 2)), jitter: jitter}
	start := time.Now()
	for i := range n {
		inst, smp := g.sample(i)
		if err := s.Put(run, inst, smp); err != nil {
			tb.Fatal(err)
		}
	}
	if err := s.Flush(); err != nil {
		tb.Fatal(err)
	}
	return time.Since(start)
}

// bareIngest is the yardstick: the same n samples as fixed 16-byte records
// (an 8-byte big-endian time key and the 8 bytes of the value) written
// straight into bbolt, two buckets, one Update per 2000 records (the
// store's default batch), append-only fill.
func bareIngest(tb testing.TB, path string, n int) time.Duration {
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		tb.Fatal(err)
	}
	defer db.Close()
	g := &benchBench{rng: rand.New(rand.NewPCG(1, 2))}
	const batch = 2000
	start := time.Now()
	for lo := 0; lo < n; lo += batch {
		err := db.Update(func(tx *bolt.Tx) error {
			for i := lo; i < min(lo+batch, n); i++ {
				inst, smp := g.sample(i)
				b, err := tx.CreateBucketIfNotExists([]byte(inst))
				if err != nil {
					return err
				}
				b.FillPercent = 1
				if err := b.Put(u64(uint64(smp.Time.UnixNano())), u64(math.Float64bits(smp.Pa))); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			tb.Fatal(err)
		}
	}
	return time.Since(start)
}

// readBackExact reads both streams and compares every sample with the
// generator's, bit for bit; it returns the time the reading took.
func readBackExact(tb testing.TB, s *Store, run RunID, n int, jitter time.Duration) time.Duration {
	g := &benchBench{rng: rand.New(rand.NewPCG(1, 2)), jitter: jitter}
	want := map[string][]Sample{}
	for i := range n {
		inst, smp := g.sample(i)
		want[inst] = append(want[inst], smp)
	}
	var took time.Duration
	for _, inst := range benchInstruments {
		i := 0
		start := time.Now()
		err := s.Samples(run, inst, time.Time{}, time.Time{}, func(got Sample) error {
			if i >= len(want[inst]) {
				return fmt.Errorf("more than %d samples", len(want[inst]))
			}
			w := want[inst][i]
			if !got.Time.Equal(w.Time) || !same(got.Pa, w.Pa) || !same(got.Raw, w.Raw) || got.RawUnit != w.RawUnit || got.Failed ||
				(got.Wire != "" && got.Wire != w.Wire) {
				return fmt.Errorf("sample %d:\n got %+v\nwant %+v", i, got, w)
			}
			i++
			return nil
		})
		took += time.Since(start)
		if err != nil {
			tb.Fatalf("%s: %v", inst, err)
		}
		if i != len(want[inst]) {
			tb.Fatalf("%s: %d samples back, wrote %d", inst, i, len(want[inst]))
		}
	}
	return took
}

// dayAgainstBare ingests n samples through the store and the same n into
// bare bbolt, in this order, and reports both and their ratio.
type dayFigures struct {
	store, bare, readBack time.Duration
	bytesPerSample        float64 // the file's size (bbolt grows it in steps)
	blockBytesPerSample   float64 // the sample blocks' own bytes
}

// storedBlockBytes sums the stored sample blocks of a run.
func storedBlockBytes(tb testing.TB, s *Store, run RunID) int {
	n := 0
	err := s.view("sum blocks", func(tx *bolt.Tx) error {
		rb, err := runBucket(tx, run)
		if err != nil {
			return err
		}
		smp := rb.Bucket(bucketSamples)
		return smp.ForEachBucket(func(inst []byte) error {
			return smp.Bucket(inst).ForEach(func(_, v []byte) error { n += len(v); return nil })
		})
	})
	if err != nil {
		tb.Fatal(err)
	}
	return n
}

func dayAgainstBare(tb testing.TB, n int, jitter time.Duration) dayFigures {
	s, path, run := benchStore(tb)
	var f dayFigures
	f.store = ingest(tb, s, run, n, jitter)
	f.readBack = readBackExact(tb, s, run, n, jitter)
	if err := s.Check(); err != nil {
		tb.Fatal(err)
	}
	f.blockBytesPerSample = float64(storedBlockBytes(tb, s, run)) / float64(n)
	if err := s.Close(); err != nil {
		tb.Fatal(err)
	}
	f.bytesPerSample = float64(fileSize(tb, path)) / float64(n)
	checkFile(tb, path)
	barePath := filepath.Join(tb.TempDir(), "bare.db")
	f.bare = bareIngest(tb, barePath, n)
	return f
}

const dayOfTwo = 2 * 20 * 86400 // samples in a day of two instruments at 20 Hz

// BenchmarkDayOfTwoInstruments ingests a day of two instruments at 20 Hz
// (3 456 000 samples) on a 50 ms grid, reads it back bit-exactly and, in
// the same run, ingests the same samples as bare 16-byte bbolt records.
// Targets: at most 4 file bytes per sample, ingest at least 0.8 times as
// fast as the bare records. Run with -benchtime=1x.
func BenchmarkDayOfTwoInstruments(b *testing.B) { benchDay(b, dayOfTwo, 0) }

// BenchmarkDayJittered is the same day with timestamps jittered by 20 µs
// (standard deviation), as a poller on a busy machine stamps them.
func BenchmarkDayJittered(b *testing.B) { benchDay(b, dayOfTwo, 20*time.Microsecond) }

func benchDay(b *testing.B, n int, jitter time.Duration) {
	for range b.N {
		f := dayAgainstBare(b, n, jitter)
		b.ReportMetric(f.store.Seconds(), "ingest-s")
		b.ReportMetric(f.bare.Seconds(), "bare-bbolt-s")
		b.ReportMetric(f.bare.Seconds()/f.store.Seconds(), "speed-vs-bare")
		b.ReportMetric(f.readBack.Seconds(), "readback-s")
		b.ReportMetric(f.bytesPerSample, "file-bytes/sample")
		b.ReportMetric(f.blockBytesPerSample, "block-bytes/sample")
	}
}

// dayStore writes a day of the bench (n samples) into a closed store file.
func dayStore(tb testing.TB, n int) (string, RunID) {
	s, path, run := benchStore(tb)
	ingest(tb, s, run, n, 0)
	if err := s.Close(); err != nil {
		tb.Fatal(err)
	}
	return path, run
}

// BenchmarkDownsampleDay asks for the reference of a day of two
// instruments at 20 Hz in 1000 buckets (min, max, mean each).
func BenchmarkDownsampleDay(b *testing.B) { benchDownsample(b, dayOfTwo) }

func benchDownsample(b *testing.B, n int) {
	path, run := dayStore(b, n)
	s, err := Open(path, Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer func() {
		s.Close()
		checkFile(b, path)
	}()
	for b.Loop() {
		bs, err := s.Downsample(run, benchInstruments[0], time.Time{}, time.Time{}, 1000)
		if err != nil || len(bs) != 1000 {
			b.Fatalf("%d buckets, %v", len(bs), err)
		}
	}
}

// BenchmarkOpenCheckDay opens the day's store with the bounded check the
// daemon runs at start, and reports the full check (what verify reads).
func BenchmarkOpenCheckDay(b *testing.B) { benchOpenCheck(b, dayOfTwo) }

func benchOpenCheck(b *testing.B, n int) {
	path, _ := dayStore(b, n)
	var full time.Duration
	for b.Loop() {
		s, err := Open(path, Options{})
		if err != nil {
			b.Fatal(err)
		}
		b.StopTimer()
		start := time.Now()
		if err := s.Check(); err != nil {
			b.Fatal(err)
		}
		full += time.Since(start)
		s.Close()
		b.StartTimer()
	}
	b.ReportMetric(full.Seconds()/float64(b.N), "full-check-s")
	checkFile(b, path)
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

// The benchmark bodies run briefly as tests, so they cannot rot; the
// figures of a short run mean nothing and are not checked.
func TestBenchmarkBodies(t *testing.T) {
	for _, jitter := range []time.Duration{0, 20 * time.Microsecond} {
		f := dayAgainstBare(t, 20_000, jitter)
		t.Logf("jitter %v: %.2f file bytes/sample (small files are mostly fixed overhead), %.2f block bytes/sample, %.2f × bare speed",
			jitter, f.bytesPerSample, f.blockBytesPerSample, f.bare.Seconds()/f.store.Seconds())
	}
	for name, body := range map[string]func(*testing.B, int){"downsample": benchDownsample, "open check": benchOpenCheck} {
		if r := testing.Benchmark(func(b *testing.B) { body(b, 20_000) }); r.N == 0 {
			t.Errorf("%s: the benchmark body did not run", name)
		}
	}
}

// BenchmarkLastTime asks for the latest stored time of a store holding a
// day of two instruments and 100 000 events (read errors, say).
func BenchmarkLastTime(b *testing.B) {
	path, run := dayStore(b, dayOfTwo/24)
	s, err := Open(path, Options{})
	if err != nil {
		b.Fatal(err)
	}
	for i := range 100_000 {
		if err := s.QueueEvent(Event{Run: run, Time: t0.Add(time.Duration(i) * time.Second), Type: "read_error", Message: "no reply within 500 ms"}, nil); err != nil {
			b.Fatal(err)
		}
	}
	if err := s.Flush(); err != nil {
		b.Fatal(err)
	}
	defer func() {
		s.Close()
		checkFile(b, path)
	}()
	for b.Loop() {
		if _, err := s.LastTime(); err != nil {
			b.Fatal(err)
		}
	}
}
