package settle

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"

	"plateau/analysis/units"
)

// t0 is an arbitrary wall time; large absolute times are part of the test.
var t0 = time.Date(2026, 3, 14, 22, 0, 0, 0, time.UTC)

func mustNew(t testing.TB, r Rules) *Detector {
	t.Helper()
	d, err := New(r)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func baseRules() Rules {
	return Rules{Window: 30 * time.Second, MinSamples: 10, MaxDrift: 0.05, MaxSpread: 2, Band: 0}
}

func TestRulesValidate(t *testing.T) {
	for _, tc := range []struct {
		name string
		edit func(*Rules)
		want string // substring of the error; empty = valid
	}{
		{"defaults", func(*Rules) {}, ""},
		{"range and band on", func(r *Rules) { r.MaxRange, r.Band = 10, 5 }, ""},
		{"zero window", func(r *Rules) { r.Window = 0 }, "settle window"},
		{"two samples", func(r *Rules) { r.MinSamples = 2 }, "min samples 2"},
		{"zero drift", func(r *Rules) { r.MaxDrift = 0 }, "max drift"},
		{"NaN spread", func(r *Rules) { r.MaxSpread = math.NaN() }, "max spread"},
		{"negative range", func(r *Rules) { r.MaxRange = -1 }, "max range"},
		{"infinite band", func(r *Rules) { r.Band = math.Inf(1) }, "band"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := baseRules()
			tc.edit(&r)
			_, err := New(r)
			switch {
			case tc.want == "" && err != nil:
				t.Fatalf("unexpected error: %v", err)
			case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
				t.Fatalf("error %v, want one mentioning %q", err, tc.want)
			}
		})
	}
	// Every problem is listed, not only the first.
	_, err := New(Rules{})
	for _, w := range []string{"window", "min samples", "max drift", "max spread"} {
		if err == nil || !strings.Contains(err.Error(), w) {
			t.Errorf("error %v does not mention %q", err, w)
		}
	}
}

func TestAddRefusesBadSamples(t *testing.T) {
	d := mustNew(t, baseRules())
	if err := d.Add(t0, 100); err != nil {
		t.Fatal(err)
	}
	if err := d.Add(t0.Add(time.Second), math.NaN()); !errors.Is(err, ErrNotFinite) {
		t.Errorf("NaN: %v", err)
	}
	if err := d.Add(t0.Add(-time.Second), 100); !errors.Is(err, ErrOutOfOrder) {
		t.Errorf("older sample: %v", err)
	}
	if err := d.Add(t0, 101); err != nil {
		t.Errorf("equal time must be accepted: %v", err)
	}
	if n := d.Status().Window.Count; n != 2 {
		t.Errorf("count %d after refused samples, want 2", n)
	}
	d.Reset()
	st := d.Status()
	if st.Settled || st.Window.Count != 0 || st.Why == "" {
		t.Errorf("after reset: %+v", st)
	}
	// After a reset an earlier time is a fresh start, not out of order.
	if err := d.Add(t0.Add(-time.Hour), 5); err != nil {
		t.Errorf("add after reset: %v", err)
	}
}

// feed adds samples p(t) every dt from start for the duration and returns the
// time of the first settled status (zero if never) and the last status.
func feed(t testing.TB, d *Detector, start time.Time, dt, dur time.Duration, p func(s float64) float64) (time.Time, Status) {
	t.Helper()
	var first time.Time
	var st Status
	for at := time.Duration(0); at <= dur; at += dt {
		if err := d.Add(start.Add(at), p(at.Seconds())); err != nil {
			t.Fatal(err)
		}
		st = d.Status()
		if st.Settled && first.IsZero() {
			first = start.Add(at)
		}
	}
	return first, st
}

func TestDriftFasterThanLimitNeverSettles(t *testing.T) {
	r := baseRules()
	for _, tc := range []struct {
		name  string
		slope float64 // Pa/s
		noise float64 // Pa, SD
	}{
		{"1.2x limit rising, clean", 1.2 * r.MaxDrift, 0},
		{"1.5x limit falling, noisy", -1.5 * r.MaxDrift, 0.3},
		{"10x limit rising, noisy", 10 * r.MaxDrift, 1},
		{"fast leak", -50, 0.5},
	} {
		t.Run(tc.name, func(t *testing.T) {
			d := mustNew(t, r)
			rng := rand.New(rand.NewPCG(1, 2))
			first, st := feed(t, d, t0, 100*time.Millisecond, 10*time.Minute, func(s float64) float64 {
				return 1.6e6 + tc.slope*s + tc.noise*rng.NormFloat64()
			})
			if !first.IsZero() {
				t.Fatalf("settled at %v while drifting at %v Pa/s", first.Sub(t0), tc.slope)
			}
			if !strings.HasPrefix(st.Why, "drifting") {
				t.Errorf("why %q, want drifting", st.Why)
			}
			if math.Abs(st.Window.Slope-tc.slope) > 0.1*math.Abs(tc.slope) {
				t.Errorf("slope %v, want about %v", st.Window.Slope, tc.slope)
			}
		})
	}
}

// On a step to a clean plateau the capture must come no later than one window
// plus two poll intervals after the signal truly settled.
func TestStepSettlesWithinWindowPlusTwoPolls(t *testing.T) {
	for _, tc := range []struct {
		name   string
		window time.Duration
		dt     time.Duration
		jitter float64 // fraction of dt
		noise  float64 // SD, Pa
	}{
		{"30s at 10 Hz", 30 * time.Second, 100 * time.Millisecond, 0, 0},
		{"30s at 1 Hz jittered", 30 * time.Second, time.Second, 0.3, 0.2},
		{"10s at 20 Hz noisy", 10 * time.Second, 50 * time.Millisecond, 0.2, 0.5},
		{"60s at 0.5 Hz", time.Minute, 2 * time.Second, 0.1, 0.1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := Rules{Window: tc.window, MinSamples: 3, MaxDrift: 0.5, MaxSpread: 2}
			d := mustNew(t, r)
			rng := rand.New(rand.NewPCG(3, 4))
			settledAt := t0.Add(45 * time.Second) // pressure ramps at 1 kPa/s until then
			var captured time.Time
			at := t0
			for captured.IsZero() && at.Before(settledAt.Add(10*tc.window)) {
				p := 200e3 + tc.noise*rng.NormFloat64()
				if at.Before(settledAt) {
					p = 200e3 - 1000*settledAt.Sub(at).Seconds()
				}
				if err := d.Add(at, p); err != nil {
					t.Fatal(err)
				}
				if d.Status().Settled {
					captured = at
				}
				step := time.Duration(float64(tc.dt) * (1 + tc.jitter*(2*rng.Float64()-1)))
				at = at.Add(step)
			}
			if captured.IsZero() {
				t.Fatalf("never settled: %s", d.Status().Why)
			}
			deadline := settledAt.Add(tc.window + 2*time.Duration(float64(tc.dt)*(1+tc.jitter)))
			if captured.After(deadline) {
				t.Errorf("settled %v after the plateau began, limit %v", captured.Sub(settledAt), deadline.Sub(settledAt))
			}
			if captured.Before(settledAt.Add(tc.window - tc.dt)) {
				t.Errorf("settled %v after the plateau began: the window still held the ramp", captured.Sub(settledAt))
			}
		})
	}
}

func TestNoiseUnderLimitSettles(t *testing.T) {
	r := baseRules()
	for seed := uint64(1); seed <= 20; seed++ {
		d := mustNew(t, r)
		rng := rand.New(rand.NewPCG(seed, 99))
		sd := 0.6 * r.MaxSpread
		first, st := feed(t, d, t0, 100*time.Millisecond, 2*r.Window, func(float64) float64 {
			return 1.6e6 + sd*rng.NormFloat64()
		})
		if first.IsZero() || first.After(t0.Add(r.Window+200*time.Millisecond)) {
			t.Fatalf("seed %d: noise SD %.2f Pa (limit %.2f) first settled at %v; last: %s", seed, sd, r.MaxSpread, first.Sub(t0), st.Why)
		}
		if math.Abs(st.Window.StdDev-sd) > 0.15*sd {
			t.Errorf("seed %d: SD %v, want about %v", seed, st.Window.StdDev, sd)
		}
	}
}

func TestNoiseOverLimitFails(t *testing.T) {
	r := baseRules()
	d := mustNew(t, r)
	rng := rand.New(rand.NewPCG(5, 6))
	first, st := feed(t, d, t0, 100*time.Millisecond, 3*r.Window, func(float64) float64 {
		return 1e5 + 1.5*r.MaxSpread*rng.NormFloat64()
	})
	if !first.IsZero() || !strings.HasPrefix(st.Why, "scatter") {
		t.Fatalf("settled at %v with noise over the limit; why %q", first, st.Why)
	}
}

func TestSpikes(t *testing.T) {
	for _, tc := range []struct {
		name     string
		maxRange float64
		spike    float64
		why      string
	}{
		{"big spike fails scatter", 0, 500, "scatter"},
		{"small spike diluted, range catches it", 10, 20, "range"},
		{"small spike without range check passes", 0, 20, ""},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := baseRules()
			r.MaxRange = tc.maxRange
			d := mustNew(t, r)
			rng := rand.New(rand.NewPCG(7, 8))
			spikeAt := 40.0 // s
			var whyAfterSpike string
			var settledAgain bool
			feed(t, d, t0, 100*time.Millisecond, 90*time.Second, func(s float64) float64 {
				if s == spikeAt+r.Window.Seconds()/2 { // spike mid-window: no leverage on the slope
					whyAfterSpike = d.Status().Why
				}
				if s > spikeAt+r.Window.Seconds()+1 && d.Status().Settled {
					settledAgain = true
				}
				if math.Abs(s-spikeAt) < 1e-9 {
					return 5e5 + tc.spike
				}
				return 5e5 + 0.2*rng.NormFloat64()
			})
			if tc.why == "" {
				if whyAfterSpike != "" {
					t.Errorf("not settled after spike: %s", whyAfterSpike)
				}
			} else if !strings.HasPrefix(whyAfterSpike, tc.why) {
				t.Errorf("after spike why %q, want %s", whyAfterSpike, tc.why)
			}
			if !settledAgain {
				t.Error("did not settle again once the spike left the window")
			}
		})
	}
}

func TestTargetBand(t *testing.T) {
	r := baseRules()
	r.Band = 50
	for _, tc := range []struct {
		name    string
		target  *float64
		level   float64
		settled bool
	}{
		{"no target", nil, 1000, true},
		{"inside band", ptr(1040.0), 1000, true},
		{"outside band above", ptr(1051.0), 1000, false},
		{"outside band below", ptr(940.0), 1000, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			d := mustNew(t, r)
			if tc.target != nil {
				d.SetTarget(*tc.target)
			}
			_, st := feed(t, d, t0, time.Second, time.Minute, func(float64) float64 { return tc.level })
			if st.Settled != tc.settled {
				t.Fatalf("settled %v, want %v (%s)", st.Settled, tc.settled, st.Why)
			}
			if !tc.settled && !strings.HasPrefix(st.Why, "off target") {
				t.Errorf("why %q", st.Why)
			}
			d.ClearTarget()
			if !d.Status().Settled {
				t.Error("still not settled after ClearTarget")
			}
		})
	}
	// Band 0 means no target check even when a target is set.
	r.Band = 0
	d := mustNew(t, r)
	d.SetTarget(0)
	if _, st := feed(t, d, t0, time.Second, time.Minute, func(float64) float64 { return 1e6 }); !st.Settled {
		t.Errorf("band 0 should not check the target: %s", st.Why)
	}
}

func ptr[T any](v T) *T { return &v }

func TestMinSamplesAndGaps(t *testing.T) {
	r := baseRules()
	r.MinSamples = 20
	d := mustNew(t, r)
	// One sample every 5 s: the window spans 30 s with only 7 samples.
	_, st := feed(t, d, t0, 5*time.Second, 2*time.Minute, func(float64) float64 { return 1e5 })
	if st.Settled || !strings.HasPrefix(st.Why, "too few samples") {
		t.Fatalf("sparse window: %+v", st)
	}
}

func TestBoth(t *testing.T) {
	settled := func(start, end time.Duration) Status {
		var s Status
		s.Settled = true
		s.Window.Start, s.Window.End = t0.Add(start), t0.Add(end)
		return s
	}
	notSettled := settled(0, 30*time.Second)
	notSettled.Settled = false
	for _, tc := range []struct {
		name string
		a, b Status
		want bool
	}{
		{"same window", settled(0, 30*time.Second), settled(0, 30*time.Second), true},
		{"offset by a poll", settled(0, 30*time.Second), settled(time.Second, 31*time.Second), true},
		{"half overlap", settled(0, 30*time.Second), settled(15*time.Second, 45*time.Second), true},
		{"stale reference", settled(0, 30*time.Second), settled(20*time.Second, 50*time.Second), false},
		{"disjoint", settled(0, 30*time.Second), settled(40*time.Second, 70*time.Second), false},
		{"one not settled", notSettled, settled(0, 30*time.Second), false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := Both(tc.a, tc.b); got != tc.want {
				t.Errorf("Both = %v, want %v", got, tc.want)
			}
			if got := Both(tc.b, tc.a); got != tc.want {
				t.Errorf("Both swapped = %v, want %v", got, tc.want)
			}
		})
	}
}

// oracle recomputes a window's statistics directly with gonum, an
// independent general-purpose reference library.
type oracle struct {
	mean, sd, slope, resSD, rng float64
}

func computeOracle(ts []time.Time, ps []float64) oracle {
	x := make([]float64, len(ts))
	for i, t := range ts {
		x[i] = t.Sub(ts[0]).Seconds()
	}
	var o oracle
	o.mean, o.sd = stat.MeanStdDev(ps, nil)
	alpha, beta := stat.LinearRegression(x, ps, nil, false)
	o.slope = beta
	var ss float64
	lo, hi := ps[0], ps[0]
	for i := range ps {
		e := ps[i] - (alpha + beta*x[i])
		ss += e * e
		lo, hi = min(lo, ps[i]), max(hi, ps[i])
	}
	o.resSD = math.Sqrt(ss / float64(len(ps)-2))
	o.rng = hi - lo
	return o
}

// windowOf returns the samples the rules keep: the shortest tail spanning
// at least the window.
func windowOf(ts []time.Time, w time.Duration) int {
	last := ts[len(ts)-1]
	i := len(ts) - 1
	for i > 0 && last.Sub(ts[i]) < w {
		i--
	}
	return i
}

func near(got, want, tol float64) bool { return math.Abs(got-want) <= tol }

// A night of samples at large absolute times and pressures: the running sums
// must agree with a direct recomputation of the same window.
func TestLongRunAgainstDirectRecomputation(t *testing.T) {
	const n = 1_000_000
	for _, tc := range []struct {
		name   string
		window time.Duration
	}{
		{"300-sample window", 30 * time.Second},
		{"20000-sample window", 2000 * time.Second},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := Rules{Window: tc.window, MinSamples: 3, MaxDrift: 1, MaxSpread: 1}
			d := mustNew(t, r)
			rng := rand.New(rand.NewPCG(11, 12))
			keep := int(tc.window/(100*time.Millisecond)) + 10
			ts := make([]time.Time, 0, 2*keep)
			ps := make([]float64, 0, 2*keep)
			for i := range n {
				at := t0.Add(time.Duration(i)*100*time.Millisecond + time.Duration(rng.IntN(1000))*time.Microsecond)
				// 1.6 MPa, slow sinusoidal drift, steps every ~3 h, noise.
				s := at.Sub(t0).Seconds()
				p := 1.6e6 + 3*math.Sin(s/700) + 1e4*float64(i/100_000) + 0.05*rng.NormFloat64()
				if err := d.Add(at, p); err != nil {
					t.Fatal(err)
				}
				ts, ps = append(ts, at), append(ps, p)
				if len(ts) > 2*keep {
					ts, ps = append(ts[:0], ts[len(ts)-keep:]...), append(ps[:0], ps[len(ps)-keep:]...)
				}
				if i%99_991 != 99_990 && i != n-1 {
					continue
				}
				j := windowOf(ts, tc.window)
				o := computeOracle(ts[j:], ps[j:])
				st := d.Status()
				if st.Window.Count != len(ts)-j || !st.Window.Start.Equal(ts[j]) || !st.Window.End.Equal(at) {
					t.Fatalf("sample %d: window %d samples %v..%v, want %d %v..%v", i, st.Window.Count, st.Window.Start, st.Window.End, len(ts)-j, ts[j], at)
				}
				if !near(st.Window.Mean, o.mean, 1e-9*1.6e6) || !near(st.Window.StdDev, o.sd, 1e-7) ||
					!near(st.Window.Slope, o.slope, 1e-9) || !near(st.ResidualSD, o.resSD, 1e-7) || st.Range != o.rng {
					t.Fatalf("sample %d: got mean %.12g sd %.9g slope %.9g res %.9g range %.9g\n want mean %.12g sd %.9g slope %.9g res %.9g range %.9g",
						i, st.Window.Mean, st.Window.StdDev, st.Window.Slope, st.ResidualSD, st.Range, o.mean, o.sd, o.slope, o.resSD, o.rng)
				}
			}
		})
	}
}

// Property: on random signals and rules, the verdict matches the rules applied
// to a direct recomputation of the same window (away from the limits, where
// rounding could legitimately flip a decision).
func TestVerdictMatchesDirectRules(t *testing.T) {
	for seed := uint64(1); seed <= 40; seed++ {
		rng := rand.New(rand.NewPCG(seed, 77))
		r := Rules{
			Window:     time.Duration(2+rng.IntN(40)) * time.Second,
			MinSamples: 3 + rng.IntN(30),
			MaxDrift:   0.01 + rng.Float64(),
			MaxSpread:  0.1 + 3*rng.Float64(),
		}
		if rng.IntN(2) == 0 {
			r.MaxRange = 1 + 20*rng.Float64()
		}
		if rng.IntN(2) == 0 {
			r.Band = 1 + 10*rng.Float64()
		}
		target := 1e5 + 10*rng.NormFloat64()
		d := mustNew(t, r)
		d.SetTarget(target)
		var ts []time.Time
		var ps []float64
		at := t0
		level, slope, noise := 1e5, 0.0, 0.5
		for i := range 3000 {
			if rng.IntN(200) == 0 { // change regime
				level += 20 * rng.NormFloat64()
				slope = []float64{0, 0, 0.005, -0.3, 2}[rng.IntN(5)]
				noise = []float64{0, 0.05, 0.5, 3}[rng.IntN(4)]
			}
			at = at.Add(time.Duration(50+rng.IntN(950)) * time.Millisecond)
			level += slope * 0.5
			p := level + noise*rng.NormFloat64()
			if rng.IntN(500) == 0 {
				p += 50 // spike
			}
			if err := d.Add(at, p); err != nil {
				t.Fatal(err)
			}
			ts, ps = append(ts, at), append(ps, p)
			st := d.Status()
			j := windowOf(ts, r.Window)
			cnt := len(ts) - j
			if cnt < 3 {
				continue
			}
			o := computeOracle(ts[j:], ps[j:])
			close := func(v, limit float64) bool { return math.Abs(v-limit) <= 1e-6*max(limit, 1) }
			if close(math.Abs(o.slope), r.MaxDrift) || close(o.resSD, r.MaxSpread) || close(o.rng, r.MaxRange) || close(math.Abs(o.mean-target), r.Band) {
				continue
			}
			want := ts[len(ts)-1].Sub(ts[j]) >= r.Window && cnt >= r.MinSamples &&
				math.Abs(o.slope) <= r.MaxDrift && o.resSD <= r.MaxSpread &&
				(r.MaxRange == 0 || o.rng <= r.MaxRange) &&
				(r.Band == 0 || math.Abs(o.mean-target) <= r.Band)
			if st.Settled != want {
				t.Fatalf("seed %d sample %d: settled %v, direct %v (why %q; direct slope %g res %g range %g mean %g; rules %+v)",
					seed, i, st.Settled, want, st.Why, o.slope, o.resSD, o.rng, o.mean, r)
			}
		}
	}
}

// Why is read by people: the device's unit, drift per minute as the limit
// is configured, fixed notation with the digits the resolution supports (one
// more, for figures of a window), never Pa/s or scientific notation.
func TestWhyInTheUnitPeopleRead(t *testing.T) {
	bar := units.Bar
	res := 1e3 // 0.01 bar
	perMin := func(barPerMin float64) float64 { return barPerMin * 1e5 / 60 }
	for _, tc := range []struct {
		name  string
		rules func(*Rules)
		p     func(s float64) float64
		want  string
	}{
		{"drift per minute", func(r *Rules) { r.MaxDrift = perMin(0.002) },
			func(s float64) float64 { return 4e5 + perMin(0.004)*s }, "drifting 0.004 bar/min, limit 0.002 bar/min"},
		{"scatter", func(r *Rules) { r.MaxSpread = 100 },
			func(s float64) float64 { return 4e5 + 500*math.Sin(7*s) }, "scattered 0.004 bar about the trend, limit 0.001 bar"},
		{"range", func(r *Rules) { r.MaxRange = 200 },
			func(s float64) float64 { return 4e5 + 300*float64(int(s)%2) }, "range 0.003 bar from lowest to highest, limit 0.002 bar"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := Rules{Window: 10 * time.Second, MinSamples: 5, MaxDrift: perMin(1), MaxSpread: 1e4, Show: Display{Unit: bar, ResolutionPa: res}}
			tc.rules(&r)
			d := mustNew(t, r)
			_, st := feed(t, d, t0, 100*time.Millisecond, 2*r.Window, tc.p)
			if st.Why != tc.want {
				t.Errorf("why %q, want %q", st.Why, tc.want)
			}
		})
	}
	// A target far off, with no display set: pascal, still fixed notation.
	d := mustNew(t, Rules{Window: time.Second, MinSamples: 3, MaxDrift: 1, MaxSpread: 1, Band: 5e-7})
	d.SetTarget(1e-6)
	feed(t, d, t0, 100*time.Millisecond, 2*time.Second, func(float64) float64 { return 3e-6 })
	if why := d.Status().Why; strings.Contains(why, "e-") || !strings.HasPrefix(why, "off target: mean 0.000003") {
		t.Errorf("why %q: want the target rule in fixed notation", why)
	}
}
