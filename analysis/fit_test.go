package analysis

import (
	"encoding/csv"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/stat"
)

func readNorris(t *testing.T) (x, y []float64) {
	t.Helper()
	f, err := os.Open("testdata/norris.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	rows, err := r.ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	for _, row := range rows[1:] {
		yv, err1 := strconv.ParseFloat(row[0], 64)
		xv, err2 := strconv.ParseFloat(row[1], 64)
		if err1 != nil || err2 != nil {
			t.Fatalf("bad row %v", row)
		}
		x, y = append(x, xv), append(y, yv)
	}
	if len(x) != 36 {
		t.Fatalf("Norris has 36 observations, read %d", len(x))
	}
	return x, y
}

// sigDigits reports how many significant digits got agrees with want.
func sigDigits(got, want float64) float64 {
	if got == want {
		return 17
	}
	return -math.Log10(math.Abs(got-want) / math.Abs(want))
}

// Source: NIST StRD linear regression dataset Norris, certified values
// (REFERENCES.md §8.1, [C]).
func TestLeastSquaresNorris(t *testing.T) {
	x, y := readNorris(t)
	f, err := FitLeastSquares(x, y)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"B0", f.Intercept, -0.262323073774029},
		{"sd(B0)", f.InterceptSD, 0.232818234301152},
		{"B1", f.Slope, 1.00211681802045},
		{"sd(B1)", f.SlopeSD, 0.429796848199937e-03},
		{"residual SD", f.ResidualSD, 0.884796396144373},
		{"R²", f.RSquared, 0.999993745883712},
	} {
		if d := sigDigits(c.got, c.want); d < 9 {
			t.Errorf("Norris %s = %.15g, certified %.15g: only %.1f significant digits", c.name, c.got, c.want, d)
		}
	}
	// Independent computation: gonum's stat package on the same data.
	alpha, beta := stat.LinearRegression(x, y, nil, false)
	if sigDigits(f.Intercept, alpha) < 11 || sigDigits(f.Slope, beta) < 12 {
		t.Errorf("gonum gives a=%.15g b=%.15g, we give a=%.15g b=%.15g", alpha, beta, f.Intercept, f.Slope)
	}
	if r2 := stat.RSquared(x, y, nil, alpha, beta); sigDigits(f.RSquared, r2) < 12 {
		t.Errorf("gonum R² %.15g, ours %.15g", r2, f.RSquared)
	}
}

// Source: Kessel, Kacker & Sommer, Measurement 45 (2012) 1661–1669, Tables 4
// and 7, as reproduced in the MSLNZ/GTC documentation (REFERENCES.md §1.5(a), [C]).
func TestEndPointLineKessel(t *testing.T) {
	xs := []float64{0.0000, 0.2039, 0.4080, 0.6120, 0.8160, 1.0201, 1.2242, 1.4283, 1.6325, 1.8367, 2.0410}
	ys := make([]float64, len(xs))
	ux := make([]float64, len(xs))
	uy := make([]float64, len(xs))
	uRes := 0.00005 / math.Sqrt(3)
	for i := range xs {
		ys[i] = float64(2 * i)
		ux[i] = uRes
		uy[i] = 0.000115 * ys[i]
	}
	c, err := EndPointLine(xs, ys, ux, uy)
	if err != nil {
		t.Fatal(err)
	}
	near := func(name string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.10g, published %.10g (±%g)", name, got, want, tol)
		}
	}
	near("a", c.A, 0, 1e-12)
	near("u(a)", c.UA, 0.000282876, 0.5e-9)
	near("b", c.B, 9.799118079, 0.5e-9)
	near("u(b)", c.UB, 0.001143818, 0.5e-9)
	near("r(a,b)", c.R, -0.12117, 0.5e-5)
	residuals := []float64{0.00196, 0.00196, 0.00294, 0.00392, 0.0039, 0.0039, 0.0039, 0.0029, 0.0020}
	for i, want := range residuals {
		got := ys[i+1] - (c.A + c.B*xs[i+1])
		tol := 0.5e-5
		if want == math.Round(want*1e4)/1e4 { // printed to four decimals
			tol = 0.5e-4
		}
		near("residual "+strconv.Itoa(i+1), got, want, tol)
	}
	// Table 7 uses the rounded line a = 0.0 (0.00028), b = 9.79912 (0.00114),
	// r = −0.1212, u_res = 0.00005/√3 and a worst-case non-linearity 0.005 (rectangular).
	rounded := LinearCalibration{A: 0, B: 9.79912, UA: 0.00028, UB: 0.00114, R: -0.1212}
	table := []struct{ x, p, U float64 }{
		{0, 0, 0.00582812}, {0.2039, 1.99804, 0.00584124}, {0.4080, 3.99804, 0.00589119},
		{0.6120, 5.99706, 0.00597701}, {0.8160, 7.99608, 0.00609720}, {1.0201, 9.99608, 0.00624986},
		{1.2242, 11.9961, 0.00643263}, {1.4283, 13.9961, 0.00664303}, {1.6325, 15.9971, 0.00687865},
		{1.8367, 17.9980, 0.00713689}, {2.0410, 20.0000, 0.00741554},
	}
	for _, row := range table {
		p := rounded.A + rounded.B*row.x
		ptol := 0.5e-5
		if row.p >= 10 {
			ptol = 0.5e-4
		}
		near("p", p, row.p, ptol)
		near("U(p) at x="+strconv.FormatFloat(row.x, 'f', 4, 64), 2*rounded.StdUncertainty(row.x, uRes, 0.005/math.Sqrt(3)), row.U, 0.5e-8)
	}
}

// maxDev is the largest |y − line| — an independent brute-force helper.
func maxDev(l Line, x, y []float64) float64 { return l.maxAbsDeviation(x, y) }

// The minimax line must be at least as good as any other line: check
// against a dense grid of slopes with the best intercept for each, and check
// the Chebyshev alternation (three points at ±max with alternating signs).
func TestIndependentLineIsMinimax(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := 0; trial < 200; trial++ {
		n := 3 + rng.IntN(10)
		x, y := make([]float64, n), make([]float64, n)
		for i := range x {
			x[i] = float64(i) + rng.Float64()*0.5
			y[i] = 1.3*x[i] + rng.NormFloat64()
		}
		l, err := IndependentLine(x, y)
		if err != nil {
			t.Fatal(err)
		}
		best := maxDev(l, x, y)
		ls, _ := FitLeastSquares(x, y)
		for k := -400; k <= 400; k++ {
			b := ls.Slope + float64(k)*0.002
			lo, hi := math.Inf(1), math.Inf(-1)
			for i := range x {
				lo, hi = math.Min(lo, y[i]-b*x[i]), math.Max(hi, y[i]-b*x[i])
			}
			if (hi-lo)/2 < best-1e-12 {
				t.Fatalf("trial %d: slope %g gives max deviation %g below the minimax %g", trial, b, (hi-lo)/2, best)
			}
		}
		// Alternation: sorted by x, the deviations reaching ±best change sign at least twice.
		signs := 0
		last := 0.0
		for i := range x {
			d := y[i] - l.At(x[i])
			if math.Abs(math.Abs(d)-best) < 1e-9 {
				if last == 0 || math.Signbit(d) != math.Signbit(last) {
					signs++
					last = d
				}
			}
		}
		if signs < 3 {
			t.Fatalf("trial %d: minimax line shows %d alternations, want ≥ 3", trial, signs)
		}
	}
}

func TestZeroBasedLineIsMinimaxThroughFirstPoint(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := 0; trial < 200; trial++ {
		n := 2 + rng.IntN(10)
		x, y := make([]float64, n), make([]float64, n)
		for i := range x {
			x[i] = float64(n-i) + rng.Float64()*0.5 // descending order on purpose
			y[i] = 0.7*x[i] + rng.NormFloat64()
		}
		l, err := ZeroBasedLine(x, y)
		if err != nil {
			t.Fatal(err)
		}
		lo, _ := extremes(x)
		if math.Abs(l.At(x[lo])-y[lo]) > 1e-9 {
			t.Fatalf("trial %d: zero-based line misses the lowest point by %g", trial, l.At(x[lo])-y[lo])
		}
		best := maxDev(l, x, y)
		for k := -2000; k <= 2000; k++ {
			b := l.Slope + float64(k)*0.0005
			cand := Line{Intercept: y[lo] - b*x[lo], Slope: b}
			if d := maxDev(cand, x, y); d < best-1e-12 {
				t.Fatalf("trial %d: slope %g beats the zero-based line: %g < %g", trial, b, d, best)
			}
		}
		ind, _ := IndependentLine(x, y)
		if maxDev(ind, x, y) > best+1e-12 {
			t.Fatalf("trial %d: independent line worse than zero-based", trial)
		}
	}
}

func TestPolynomialFit(t *testing.T) {
	// A cubic is recovered exactly by a degree-3 fit; evaluation away from
	// the origin checks the x scaling.
	f := func(x float64) float64 { return 3 + 2e-5*x - 4e-12*x*x + 1e-18*x*x*x }
	var x, y []float64
	for p := 0.0; p <= 1e6; p += 1e5 {
		x, y = append(x, p), append(y, f(p))
	}
	p, err := FitPolynomial(x, y, 3)
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range []float64{0, 123456, 5e5, 1e6} {
		if math.Abs(p.At(v)-f(v)) > 1e-9 {
			t.Errorf("cubic at %g: %g, want %g", v, p.At(v), f(v))
		}
	}
	// Degree 1 is the least-squares line (independent computation: gonum stat).
	ys := []float64{0.1, 2.3, 3.9, 6.2, 7.8}
	xs := []float64{0, 2, 4, 6, 8}
	p1, err := FitPolynomial(xs, ys, 1)
	if err != nil {
		t.Fatal(err)
	}
	a, b := stat.LinearRegression(xs, ys, nil, false)
	for _, v := range xs {
		if math.Abs(p1.At(v)-(a+b*v)) > 1e-12 {
			t.Errorf("degree 1 at %g: %g, gonum line %g", v, p1.At(v), a+b*v)
		}
	}
	for _, c := range []struct {
		name   string
		x, y   []float64
		degree int
	}{
		{"degree 0", xs, ys, 0},
		{"degree 4", xs, ys, 4},
		{"too few points", []float64{1, 2}, []float64{1, 2}, 2},
		{"repeated x", []float64{1, 1, 1, 2}, []float64{1, 2, 3, 4}, 2},
		{"length mismatch", []float64{1, 2, 3}, []float64{1, 2}, 1},
		{"NaN", []float64{1, 2, math.NaN()}, []float64{1, 2, 3}, 1},
	} {
		if _, err := FitPolynomial(c.x, c.y, c.degree); err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
}

func TestFitErrors(t *testing.T) {
	for _, c := range []struct {
		name string
		x, y []float64
	}{
		{"one point", []float64{1}, []float64{1}},
		{"mismatch", []float64{1, 2}, []float64{1}},
		{"equal x", []float64{1, 1, 1}, []float64{1, 2, 3}},
		{"Inf", []float64{1, math.Inf(1)}, []float64{1, 2}},
	} {
		if _, err := FitLeastSquares(c.x, c.y); err == nil {
			t.Errorf("least squares %s: no error", c.name)
		}
		if _, err := TerminalLine(c.x, c.y); err == nil {
			t.Errorf("terminal %s: no error", c.name)
		}
		if _, err := ZeroBasedLine(c.x, c.y); err == nil {
			t.Errorf("zero-based %s: no error", c.name)
		}
		if _, err := IndependentLine(c.x, c.y); err == nil {
			t.Errorf("independent %s: no error", c.name)
		}
	}
}
