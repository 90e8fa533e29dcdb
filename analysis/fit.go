package analysis

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"
)

// Line is y = Intercept + Slope·x.
type Line struct {
	Intercept float64 `json:"intercept_pa"`
	Slope     float64 `json:"slope"`
}

// At evaluates the line at x.
func (l Line) At(x float64) float64 { return l.Intercept + l.Slope*x }

// maxAbsDeviation returns the largest |y − line(x)|.
func (l Line) maxAbsDeviation(x, y []float64) float64 {
	m := 0.0
	for i := range x {
		m = math.Max(m, math.Abs(y[i]-l.At(x[i])))
	}
	return m
}

// LeastSquares is an ordinary least-squares straight line with the usual
// statistics. The standard deviations and the residual standard deviation
// need n ≥ 3 and are 0 otherwise.
type LeastSquares struct {
	Line
	InterceptSD float64 `json:"intercept_sd_pa"`
	SlopeSD     float64 `json:"slope_sd"`
	ResidualSD  float64 `json:"residual_sd_pa"`
	RSquared    float64 `json:"r_squared"`
	N           int     `json:"n"`
}

func checkXY(x, y []float64, min int) error {
	if len(x) != len(y) {
		return fmt.Errorf("%d x values but %d y values", len(x), len(y))
	}
	if len(x) < min {
		return fmt.Errorf("%d points: need at least %d", len(x), min)
	}
	for i := range x {
		if !finite(x[i]) || !finite(y[i]) {
			return fmt.Errorf("point %d (x %g, y %g) is not a finite number", i+1, x[i], y[i])
		}
	}
	return nil
}

// FitLeastSquares fits y = a + b·x by ordinary least squares, computing on
// deviations from the means (two passes) so that data far from the origin,
// such as NIST StRD Norris, keep their digits.
func FitLeastSquares(x, y []float64) (LeastSquares, error) {
	if err := checkXY(x, y, 2); err != nil {
		return LeastSquares{}, fmt.Errorf("least-squares line: %w", err)
	}
	n := float64(len(x))
	mx, my := mean(x), mean(y)
	var sxx, sxy, syy float64
	for i := range x {
		dx, dy := x[i]-mx, y[i]-my
		sxx += dx * dx
		sxy += dx * dy
		syy += dy * dy
	}
	if sxx == 0 {
		return LeastSquares{}, errors.New("least-squares line: all x values are equal")
	}
	f := LeastSquares{N: len(x)}
	f.Slope = sxy / sxx
	f.Intercept = my - f.Slope*mx
	var sse float64
	for i := range x {
		r := y[i] - f.At(x[i])
		sse += r * r
	}
	if syy > 0 {
		f.RSquared = 1 - sse/syy
	} else {
		f.RSquared = 1
	}
	if len(x) > 2 {
		s := math.Sqrt(sse / (n - 2))
		f.ResidualSD = s
		f.SlopeSD = s / math.Sqrt(sxx)
		f.InterceptSD = s * math.Sqrt(1/n+mx*mx/sxx)
	}
	return f, nil
}

// TerminalLine is the line through the first and the last point (lowest and
// highest x): the terminal-based line of ISA-51.1.
func TerminalLine(x, y []float64) (Line, error) {
	if err := checkXY(x, y, 2); err != nil {
		return Line{}, fmt.Errorf("terminal line: %w", err)
	}
	lo, hi := extremes(x)
	if x[lo] == x[hi] {
		return Line{}, errors.New("terminal line: all x values are equal")
	}
	b := (y[hi] - y[lo]) / (x[hi] - x[lo])
	return Line{Intercept: y[lo] - b*x[lo], Slope: b}, nil
}

// ZeroBasedLine is the line through the point with the lowest x, tilted to
// minimise the largest |deviation| (zero-based linearity of ISA-51.1). The
// largest deviation is a convex, piecewise-linear function of the slope whose
// corners lie where two deviations are equal in size; the minimum is at one
// of those corners, so checking them all is exact, not an approximation.
func ZeroBasedLine(x, y []float64) (Line, error) {
	if err := checkXY(x, y, 2); err != nil {
		return Line{}, fmt.Errorf("zero-based line: %w", err)
	}
	lo, hi := extremes(x)
	if x[lo] == x[hi] {
		return Line{}, errors.New("zero-based line: all x values are equal")
	}
	x0, y0 := x[lo], y[lo]
	var cand []float64
	for i := range x {
		ti, ri := x[i]-x0, y[i]-y0
		for j := i; j < len(x); j++ {
			tj, rj := x[j]-x0, y[j]-y0
			if ti+tj != 0 { // ri − b·ti = −(rj − b·tj)
				cand = append(cand, (ri+rj)/(ti+tj))
			}
			if ti != tj { // ri − b·ti = rj − b·tj
				cand = append(cand, (ri-rj)/(ti-tj))
			}
		}
	}
	best, bestDev := Line{}, math.Inf(1)
	for _, b := range cand {
		l := Line{Intercept: y0 - b*x0, Slope: b}
		if d := l.maxAbsDeviation(x, y); d < bestDev {
			best, bestDev = l, d
		}
	}
	return best, nil
}

// IndependentLine is the minimax (Chebyshev) straight line: positioned to
// equalise and minimise the largest positive and negative deviations
// (independent linearity, ISA-51.1). It is the centre line of the narrowest
// strip, measured along y, that holds every point. One edge of that strip
// passes through two of the points with all others on one side, so trying
// every pair is exact.
func IndependentLine(x, y []float64) (Line, error) {
	if err := checkXY(x, y, 2); err != nil {
		return Line{}, fmt.Errorf("independent line: %w", err)
	}
	best, bestHalf := Line{}, math.Inf(1)
	for i := range x {
		for k := i + 1; k < len(x); k++ {
			if x[i] == x[k] {
				continue
			}
			l := Line{Slope: (y[k] - y[i]) / (x[k] - x[i])}
			l.Intercept = y[i] - l.Slope*x[i]
			lo, hi := 0.0, 0.0
			for j := range x {
				d := y[j] - l.At(x[j])
				lo, hi = math.Min(lo, d), math.Max(hi, d)
			}
			// With all points on one side, the strip's width along y is
			// hi − lo; the best line runs through the strip's middle.
			half := (hi - lo) / 2
			if half < bestHalf {
				best, bestHalf = Line{Intercept: l.Intercept + (hi+lo)/2, Slope: l.Slope}, half
			}
		}
	}
	if math.IsInf(bestHalf, 1) {
		return Line{}, errors.New("independent line: all x values are equal")
	}
	return best, nil
}

func extremes(x []float64) (lo, hi int) {
	for i := range x {
		if x[i] < x[lo] {
			lo = i
		}
		if x[i] > x[hi] {
			hi = i
		}
	}
	return lo, hi
}

// LinearCalibration is a straight calibration line y = A + B·x with the
// standard uncertainties of A and B and their correlation coefficient.
type LinearCalibration struct {
	A, B   float64
	UA, UB float64
	R      float64 // correlation coefficient of A and B
}

// EndPointLine fits the two-point line through the first and the last
// observation (B = (y_n − y_0)/(x_n − x_0), A = y_n − B·x_n) and propagates
// the standard uncertainties ux, uy of those four inputs to first order
// (GUM), the inputs being uncorrelated. This is the range-calibration line of
// Kessel, Kacker & Sommer (2012).
func EndPointLine(x, y, ux, uy []float64) (LinearCalibration, error) {
	if err := checkXY(x, y, 2); err != nil {
		return LinearCalibration{}, fmt.Errorf("end-point line: %w", err)
	}
	if len(ux) != len(x) || len(uy) != len(y) {
		return LinearCalibration{}, fmt.Errorf("end-point line: %d points but %d u(x) and %d u(y)", len(x), len(ux), len(uy))
	}
	n := len(x) - 1
	dx := x[n] - x[0]
	if dx == 0 {
		return LinearCalibration{}, errors.New("end-point line: first and last x are equal")
	}
	b := (y[n] - y[0]) / dx
	a := y[n] - b*x[n]
	// Sensitivities of (a, b) to (y0, yn, x0, xn).
	db := [4]float64{-1 / dx, 1 / dx, b / dx, -b / dx}
	da := [4]float64{-x[n] * db[0], 1 - x[n]*db[1], -x[n] * db[2], -b - x[n]*db[3]}
	u := [4]float64{uy[0], uy[n], ux[0], ux[n]}
	var va, vb, cab float64
	for i := range u {
		va += da[i] * da[i] * u[i] * u[i]
		vb += db[i] * db[i] * u[i] * u[i]
		cab += da[i] * db[i] * u[i] * u[i]
	}
	c := LinearCalibration{A: a, B: b, UA: math.Sqrt(va), UB: math.Sqrt(vb)}
	if c.UA > 0 && c.UB > 0 {
		c.R = cab / (c.UA * c.UB)
	}
	return c, nil
}

// StdUncertainty is the standard uncertainty of y = A + B·(x + e_x) + e_other
// at x, where e_x has standard uncertainty ux (e.g. the sensor resolution)
// and e_other collects uncorrelated terms such as non-linearity:
// u² = u_A² + x²·u_B² + 2·x·r·u_A·u_B + B²·u_x² + u_other².
func (c LinearCalibration) StdUncertainty(x, ux, uOther float64) float64 {
	v := c.UA*c.UA + x*x*c.UB*c.UB + 2*x*c.R*c.UA*c.UB + c.B*c.B*ux*ux + uOther*uOther
	return math.Sqrt(v)
}

// Polynomial is a least-squares polynomial in x, evaluated on the scaled
// variable t = (2x − (XMin + XMax))/(XMax − XMin), which lies in [−1, 1] over
// the fitted data; the scaling keeps the Vandermonde matrix well conditioned.
type Polynomial struct {
	Degree       int       `json:"degree"`
	XMinPa       float64   `json:"x_min_pa"`
	XMaxPa       float64   `json:"x_max_pa"`
	Coefficients []float64 `json:"coefficients_scaled"` // c_0 … c_degree of t^0 … t^degree, Pa
}

// At evaluates the polynomial at x (Horner's scheme).
func (p Polynomial) At(x float64) float64 {
	t := (2*x - (p.XMinPa + p.XMaxPa)) / (p.XMaxPa - p.XMinPa)
	v := 0.0
	for k := len(p.Coefficients) - 1; k >= 0; k-- {
		v = v*t + p.Coefficients[k]
	}
	return v
}

// FitPolynomial fits y as a polynomial of the given degree in x by least
// squares: Vandermonde matrix on the scaled variable, solved by QR (gonum).
// It needs at least degree+1 distinct x values.
func FitPolynomial(x, y []float64, degree int) (Polynomial, error) {
	if degree < 1 || degree > 3 {
		return Polynomial{}, fmt.Errorf("polynomial degree %d: must be 1, 2 or 3", degree)
	}
	if err := checkXY(x, y, degree+1); err != nil {
		return Polynomial{}, fmt.Errorf("degree-%d polynomial: %w", degree, err)
	}
	distinct := append([]float64(nil), x...)
	sort.Float64s(distinct)
	nd := 1
	for i := 1; i < len(distinct); i++ {
		if distinct[i] != distinct[i-1] {
			nd++
		}
	}
	if nd < degree+1 {
		return Polynomial{}, fmt.Errorf("degree-%d polynomial: %d distinct x values, need at least %d", degree, nd, degree+1)
	}
	p := Polynomial{Degree: degree, XMinPa: distinct[0], XMaxPa: distinct[len(distinct)-1]}
	a := mat.NewDense(len(x), degree+1, nil)
	for i, xi := range x {
		t := (2*xi - (p.XMinPa + p.XMaxPa)) / (p.XMaxPa - p.XMinPa)
		v := 1.0
		for k := 0; k <= degree; k++ {
			a.Set(i, k, v)
			v *= t
		}
	}
	var qr mat.QR
	qr.Factorize(a)
	var c mat.Dense
	if err := qr.SolveTo(&c, false, mat.NewDense(len(y), 1, append([]float64(nil), y...))); err != nil {
		return Polynomial{}, fmt.Errorf("degree-%d polynomial: %w", degree, err)
	}
	p.Coefficients = make([]float64, degree+1)
	for k := range p.Coefficients {
		p.Coefficients[k] = c.At(k, 0)
	}
	return p, nil
}

func mean(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// sampleSD is the sample (n − 1) standard deviation, computed about the mean;
// 0 for fewer than two values.
func sampleSD(v []float64) float64 {
	if len(v) < 2 {
		return 0
	}
	m := mean(v)
	s := 0.0
	for _, x := range v {
		s += (x - m) * (x - m)
	}
	return math.Sqrt(s / float64(len(v)-1))
}

// scale returns α, β of t = α·x + β.
func (p Polynomial) scale() (alpha, beta float64) {
	w := p.XMaxPa - p.XMinPa
	return 2 / w, -(p.XMinPa + p.XMaxPa) / w
}

// toPower is the matrix T with a = T·c: it turns the coefficients c_k of
// t^k into the coefficients a_j of x^j, t^k = Σ_j C(k, j)·α^j·β^(k−j)·x^j.
func (p Polynomial) toPower() *mat.Dense {
	alpha, beta := p.scale()
	n := len(p.Coefficients)
	t := mat.NewDense(n, n, nil)
	for k := 0; k < n; k++ {
		binom := 1.0
		for j := 0; j <= k; j++ {
			t.Set(j, k, binom*math.Pow(alpha, float64(j))*math.Pow(beta, float64(k-j)))
			binom = binom * float64(k-j) / float64(j+1)
		}
	}
	return t
}

// PowerSeries returns a_0 … a_degree of p(x) = Σ a_j·x^j.
func (p Polynomial) PowerSeries() []float64 {
	var a mat.VecDense
	a.MulVec(p.toPower(), mat.NewVecDense(len(p.Coefficients), append([]float64(nil), p.Coefficients...)))
	return append([]float64(nil), a.RawVector().Data...)
}

// coefficientCovariance returns the standard deviations of the power-series
// coefficients and their correlation matrix: Cov(c) = s²·(AᵀA)⁻¹ on the
// scaled variable (ordinary least squares, s the residual standard
// deviation), then Cov(a) = T·Cov(c)·Tᵀ. Nil when AᵀA is singular.
func (p Polynomial) coefficientCovariance(x []float64, s float64) ([]float64, [][]float64) {
	n := len(p.Coefficients)
	alpha, beta := p.scale()
	a := mat.NewDense(len(x), n, nil)
	for i, xi := range x {
		t, v := alpha*xi+beta, 1.0
		for k := 0; k < n; k++ {
			a.Set(i, k, v)
			v *= t
		}
	}
	var ata, inv mat.Dense
	ata.Mul(a.T(), a)
	if err := inv.Inverse(&ata); err != nil {
		return nil, nil
	}
	inv.Scale(s*s, &inv)
	tm := p.toPower()
	var tmp, cov mat.Dense
	tmp.Mul(tm, &inv)
	cov.Mul(&tmp, tm.T())
	sd := make([]float64, n)
	for j := range sd {
		sd[j] = math.Sqrt(math.Max(cov.At(j, j), 0))
	}
	corr := make([][]float64, n)
	for i := range corr {
		corr[i] = make([]float64, n)
		for j := range corr[i] {
			if sd[i] > 0 && sd[j] > 0 {
				corr[i][j] = cov.At(i, j) / (sd[i] * sd[j])
			}
		}
	}
	return sd, corr
}
