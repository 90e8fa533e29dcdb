package report

import (
	"bytes"
	"fmt"
	"image/color"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"plateau/analysis"
)

// The report's own palette.
var (
	inkUp    = color.RGBA{R: 0x1f, G: 0x4e, B: 0x79, A: 0xff} // ascending: deep blue
	inkDown  = color.RGBA{R: 0xb3, G: 0x5c, B: 0x00, A: 0xff} // descending: burnt orange
	inkMean  = color.RGBA{R: 0x33, G: 0x33, B: 0x33, A: 0xff}
	inkLimit = color.RGBA{R: 0x8c, G: 0x1c, B: 0x3a, A: 0xff}
	fillBand = color.RGBA{R: 0xe3, G: 0xef, B: 0xe6, A: 0xff} // inside the permissible error
	fillBar  = color.RGBA{R: 0x5b, G: 0x7f, B: 0x95, A: 0xff}
)

// chart is one rendered figure.
type chart struct {
	Title, Caption string
	SVG            string
}

const chartW, chartH = 17 * vg.Centimeter, 8.5 * vg.Centimeter

// svg renders p and strips the XML prolog so it can sit inline in HTML.
func svg(p *plot.Plot) (string, error) {
	wt, err := p.WriterTo(chartW, chartH, "svg")
	if err != nil {
		return "", fmt.Errorf("render chart %q: %w", p.Title.Text, err)
	}
	var b bytes.Buffer
	if _, err := wt.WriteTo(&b); err != nil {
		return "", fmt.Errorf("render chart %q: %w", p.Title.Text, err)
	}
	s := b.String()
	if i := strings.Index(s, "<svg"); i >= 0 {
		s = s[i:]
	}
	return s, nil
}

// roomForLegend raises the top of the y axis so that the legend, drawn in
// the upper part of the plot, sits above the data instead of on it.
func roomForLegend(p *plot.Plot) {
	if p.Legend.Top && p.Y.Max > p.Y.Min {
		p.Y.Max += 0.45 * (p.Y.Max - p.Y.Min)
	}
}

func newPlot(x, y string) *plot.Plot {
	p := plot.New()
	p.X.Label.Text, p.Y.Label.Text = x, y
	p.Add(plotter.NewGrid())
	p.Legend.Top = true
	return p
}

// charts draws every figure the result has data for.
func charts(n numbers, res analysis.Result) ([]chart, error) {
	makers := []func(numbers, analysis.Result) (*chart, error){errorChart, hysteresisChart, driftChart, zeroChart}
	var out []chart
	for _, m := range makers {
		c, err := m(n, res)
		if err != nil {
			return nil, err
		}
		if c != nil {
			out = append(out, *c)
		}
	}
	return out, nil
}

// errorChart: error of indication of each direction against pressure, the
// ±MPE band, and the mean error with ±U bars.
func errorChart(n numbers, res analysis.Result) (*chart, error) {
	u := n.u
	p := newPlot("reference pressure / "+u.Symbol, "error of indication / "+u.Symbol)

	// The band is sampled finely so that a limit stepping at quarter span
	// (ASME grades) is drawn as a step.
	const steps = 200
	dev := res.Device
	band := make(plotter.XYs, 0, 2*(steps+1))
	for i := 0; i <= steps; i++ {
		x := dev.LowerPa + dev.Span()*float64(i)/steps
		band = append(band, plotter.XY{X: u.FromPa(x), Y: u.FromPa(dev.MPE(x))})
	}
	for i := steps; i >= 0; i-- {
		band = append(band, plotter.XY{X: band[i].X, Y: -band[i].Y})
	}
	poly, err := plotter.NewPolygon(band)
	if err != nil {
		return nil, err
	}
	poly.Color = fillBand
	poly.LineStyle.Color = inkLimit
	poly.LineStyle.Dashes = []vg.Length{vg.Points(4), vg.Points(2)}
	p.Add(poly)
	p.Legend.Add("± MPE", poly)

	for _, s := range []struct {
		name string
		ink  color.Color
		pick func(analysis.PointResult) *analysis.SeriesSummary
		mark draw.GlyphDrawer
	}{
		{"ascending", inkUp, func(r analysis.PointResult) *analysis.SeriesSummary { return r.Up }, draw.TriangleGlyph{}},
		{"descending", inkDown, func(r analysis.PointResult) *analysis.SeriesSummary { return r.Down }, draw.SquareGlyph{}},
	} {
		var xy plotter.XYs
		for _, pt := range res.Points {
			if sum := s.pick(pt); sum != nil {
				xy = append(xy, plotter.XY{X: u.FromPa(sum.ReferenceMeanPa), Y: u.FromPa(sum.MeanErrorPa)})
			}
		}
		if len(xy) == 0 {
			continue
		}
		l, sc, err := plotter.NewLinePoints(xy)
		if err != nil {
			return nil, err
		}
		l.Color, sc.Color, sc.Shape = s.ink, s.ink, s.mark
		p.Add(l, sc)
		p.Legend.Add(s.name, l, sc)
	}

	mean := make(errPoints, len(res.Points))
	for i, pt := range res.Points {
		mean[i] = errPoint{x: u.FromPa(pt.ReferenceMeanPa), y: u.FromPa(pt.MeanErrorPa), e: u.FromPa(pt.ExpandedUncertaintyPa)}
	}
	bars, err := plotter.NewYErrorBars(mean)
	if err != nil {
		return nil, err
	}
	bars.Color = inkMean
	dots, err := plotter.NewScatter(mean)
	if err != nil {
		return nil, err
	}
	dots.Color, dots.Shape = inkMean, draw.CircleGlyph{}
	p.Add(bars, dots)
	p.Legend.Left = true // errors usually grow with pressure: the top left stays clear
	p.Legend.Add(fmt.Sprintf("mean ± U (k = %s)", ftoa(res.CoverageFactor)), dots)

	roomForLegend(p)
	s, err := svg(p)
	if err != nil {
		return nil, err
	}
	return &chart{Title: "Error of indication", Caption: "Mean error of the ascending and descending series against the reference pressure; the shaded band is the permissible error, the bars the expanded uncertainty of the mean error.", SVG: s}, nil
}

// errPoints feeds a scatter and symmetric Y error bars.
type errPoint struct{ x, y, e float64 }
type errPoints []errPoint

func (e errPoints) Len() int                        { return len(e) }
func (e errPoints) XY(i int) (float64, float64)     { return e[i].x, e[i].y }
func (e errPoints) YError(i int) (float64, float64) { return e[i].e, e[i].e }

// hysteresisChart: hysteresis at each nominal point, as bars; points
// without both directions are left out rather than drawn as zero, and
// without any there is no chart.
func hysteresisChart(n numbers, res analysis.Result) (*chart, error) {
	p := newPlot("nominal pressure / "+n.u.Symbol, "hysteresis / "+n.u.Symbol)
	var vals plotter.Values
	var names []string
	for _, pt := range res.Points {
		if pt.HysteresisEvaluated {
			vals = append(vals, n.u.FromPa(pt.HysteresisPa))
			names = append(names, fmt.Sprintf("%.6g", n.u.FromPa(pt.NominalPa)))
		}
	}
	if len(vals) == 0 {
		return nil, nil
	}
	b, err := plotter.NewBarChart(vals, vg.Points(18))
	if err != nil {
		return nil, err
	}
	b.Color, b.LineStyle.Color = fillBar, fillBar
	p.Add(b)
	p.NominalX(names...)
	roomForLegend(p)
	s, err := svg(p)
	if err != nil {
		return nil, err
	}
	return &chart{Title: "Hysteresis", Caption: "Mean difference between the descending and ascending errors at each point.", SVG: s}, nil
}

// driftAxis places a cycle on the X axis: hours since the first timed
// value when every value is timed, else the cycle number.
type driftAxis struct {
	timed bool
	label string
}

func newDriftAxis(d *analysis.Drift) driftAxis {
	for _, pd := range d.Points {
		for _, ce := range pd.CycleErrors {
			if ce.Time.IsZero() {
				return driftAxis{label: "cycle"}
			}
		}
	}
	return driftAxis{timed: true, label: "hours since the first reading"}
}

// driftChart: each point's cycle mean error against time or cycle.
func driftChart(n numbers, res analysis.Result) (*chart, error) {
	if res.Drift == nil || len(res.Drift.Points) == 0 || len(res.Drift.Points[0].CycleErrors) == 0 {
		return nil, nil
	}
	ax := newDriftAxis(res.Drift)
	t0 := res.Drift.Points[0].CycleErrors[0].Time
	for _, pd := range res.Drift.Points {
		for _, ce := range pd.CycleErrors {
			if ce.Time.Before(t0) {
				t0 = ce.Time
			}
		}
	}
	p := newPlot(ax.label, "error of indication / "+n.u.Symbol)
	for i, pd := range res.Drift.Points {
		xy := make(plotter.XYs, len(pd.CycleErrors))
		for j, ce := range pd.CycleErrors {
			x := float64(ce.Cycle)
			if ax.timed {
				x = ce.Time.Sub(t0).Hours()
			}
			xy[j] = plotter.XY{X: x, Y: n.u.FromPa(ce.ErrorPa)}
		}
		l, sc, err := plotter.NewLinePoints(xy)
		if err != nil {
			return nil, err
		}
		ink := seriesInk(i)
		l.Color, sc.Color = ink, ink
		p.Add(l, sc)
		p.Legend.Add(n.pu(pd.NominalPa), l, sc)
	}
	p.Legend.Top, p.Legend.Left = true, false
	roomForLegend(p)
	s, err := svg(p)
	if err != nil {
		return nil, err
	}
	return &chart{Title: "Error over the run", Caption: "Mean error of each cycle at each nominal point, to show drift during the run.", SVG: s}, nil
}

// zeroChart: the zero error before and after each cycle.
func zeroChart(n numbers, res analysis.Result) (*chart, error) {
	if res.Drift == nil || len(res.Zero.Cycles) < 2 {
		return nil, nil
	}
	p := newPlot("cycle", "zero error / "+n.u.Symbol)
	for _, s := range []struct {
		name string
		ink  color.Color
		pick func(analysis.ZeroCycle) *float64
	}{
		{"before the cycle", inkUp, func(z analysis.ZeroCycle) *float64 { return z.BeforeErrorPa }},
		{"after the cycle", inkDown, func(z analysis.ZeroCycle) *float64 { return z.AfterErrorPa }},
	} {
		var xy plotter.XYs
		for _, z := range res.Zero.Cycles {
			if v := s.pick(z); v != nil {
				xy = append(xy, plotter.XY{X: float64(z.Cycle), Y: n.u.FromPa(*v)})
			}
		}
		if len(xy) == 0 {
			continue
		}
		l, sc, err := plotter.NewLinePoints(xy)
		if err != nil {
			return nil, err
		}
		l.Color, sc.Color = s.ink, s.ink
		p.Add(l, sc)
		p.Legend.Add(s.name, l, sc)
	}
	roomForLegend(p)
	s, err := svg(p)
	if err != nil {
		return nil, err
	}
	return &chart{Title: "Zero over the run", Caption: "Zero error (" + res.Zero.Source + ") at the start and end of each cycle.", SVG: s}, nil
}

// seriesInk cycles through a small set of distinguishable inks.
func seriesInk(i int) color.Color {
	inks := []color.Color{inkUp, inkDown, color.RGBA{0x2e, 0x7d, 0x32, 0xff}, color.RGBA{0x6a, 0x1b, 0x9a, 0xff},
		color.RGBA{0x00, 0x83, 0x8f, 0xff}, color.RGBA{0x8d, 0x6e, 0x63, 0xff}, inkLimit, inkMean}
	return inks[i%len(inks)]
}
