package report

import (
	"bytes"
	"fmt"
	"image/color"
	"math"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

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

const chartW, chartH = 17 * vg.Centimeter, 8 * vg.Centimeter

// The charts' own look, the same in all four: a sans-serif face metric-
// compatible with the page's, quiet axes and grid, fixed-notation tick
// labels, and the legend in a column right of the plot, never on the data.
var (
	chartFace = font.Font{Typeface: "Liberation", Variant: "Sans"}
	inkAxis   = color.RGBA{R: 0x4a, G: 0x58, B: 0x68, A: 0xff}
	inkGrid   = color.RGBA{R: 0xdd, G: 0xe3, B: 0xe9, A: 0xff}
	inkText   = color.RGBA{R: 0x1b, G: 0x24, B: 0x30, A: 0xff}
)

// svgFamily is what the SVG names the face; browsers without it take a
// face of the same metrics, then any sans-serif.
const svgFamily = "font-family:Liberation Sans;"

// figure is a plot and its legend, which is drawn beside the plot.
type figure struct {
	p       *plot.Plot
	legend  plot.Legend
	entries int
}

func newFigure(x, y string) *figure {
	p := plot.New()
	p.X.Label.Text, p.Y.Label.Text = x, y
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		// Only face and ink: the axis keeps its own alignment of labels.
		a.Label.TextStyle.Font, a.Label.TextStyle.Color = font.From(chartFace, 8.5), inkText
		a.Label.Padding = vg.Points(4)
		a.Tick.Label.Font, a.Tick.Label.Color = font.From(chartFace, 7.5), inkText
		a.LineStyle.Color, a.Tick.LineStyle.Color = inkAxis, inkAxis
		a.LineStyle.Width, a.Tick.LineStyle.Width = vg.Points(0.6), vg.Points(0.6)
		a.Tick.Length = vg.Points(3)
		a.Padding = vg.Points(4)
	}
	p.X.Tick.Marker, p.Y.Tick.Marker = fixedTicks{}, fixedTicks{pad: true}
	g := plotter.NewGrid()
	g.Vertical.Color, g.Horizontal.Color = inkGrid, inkGrid
	g.Vertical.Width, g.Horizontal.Width = vg.Points(0.4), vg.Points(0.4)
	p.Add(g)
	l := plot.NewLegend()
	l.TextStyle.Font, l.TextStyle.Color = font.From(chartFace, 8), inkText
	l.Left, l.Top = true, true
	l.ThumbnailWidth = vg.Points(16)
	l.Padding = vg.Points(4.5)
	return &figure{p: p, legend: l}
}

func (f *figure) add(name string, thumbs ...plot.Thumbnailer) {
	f.legend.Add(name, thumbs...)
	f.entries++
}

// cycleAxis makes an axis count cycles: a tick at each whole cycle (or
// every few when there are many), half a cycle of room at either end.
func cycleAxis(a *plot.Axis, first, last int) {
	a.Tick.Marker = wholeTicks{}
	a.Min, a.Max = float64(first)-0.5, float64(last)+0.5
}

// svg renders the figure: the plot on the left, the legend in a column
// on its right, and returns the <svg> element to sit inline in HTML.
func (f *figure) svg(title string) (string, error) {
	c := vgsvg.New(chartW, chartH)
	dc := draw.New(c)
	var lw vg.Length
	if f.entries > 0 {
		lw = f.legend.Rectangle(dc).Size().X + vg.Points(12)
	}
	f.p.Draw(draw.Crop(dc, 0, -lw, 0, -vg.Points(4)))
	if f.entries > 0 {
		f.legend.Draw(draw.Crop(dc, chartW-lw+vg.Points(12), 0, 0, -vg.Points(4)))
	}
	var b bytes.Buffer
	if _, err := c.WriteTo(&b); err != nil {
		return "", fmt.Errorf("render chart %q: %w", title, err)
	}
	s := b.String()
	if i := strings.Index(s, "<svg"); i >= 0 {
		s = s[i:]
	}
	return strings.ReplaceAll(s, svgFamily, "font-family:'Liberation Sans',Arial,Helvetica,sans-serif;"), nil
}

// fixedTicks are the library's tick positions labelled in fixed notation
// with the digits the tick step needs (never 1e-05); pad leaves room
// between a vertical axis's labels and its tick marks.
type fixedTicks struct{ pad bool }

func (t fixedTicks) Ticks(lo, hi float64) []plot.Tick {
	ts := plot.DefaultTicks{}.Ticks(lo, hi)
	step := math.Inf(1)
	prev := math.NaN()
	for _, k := range ts {
		if k.IsMinor() {
			continue
		}
		if !math.IsNaN(prev) {
			step = min(step, k.Value-prev)
		}
		prev = k.Value
	}
	d := 0
	if step > 0 && !math.IsInf(step, 0) {
		d = min(max(int(math.Ceil(-math.Log10(step)-1e-9)), 0), 9)
	}
	for i, k := range ts {
		if k.IsMinor() {
			continue
		}
		s := strconv.FormatFloat(k.Value, 'f', d, 64)
		if strings.Trim(s, "-0.") == "" {
			s = strings.TrimPrefix(s, "-")
		}
		if t.pad {
			s += " "
		}
		ts[i].Label = s
	}
	return ts
}

// wholeTicks mark whole numbers only: every one, or every second, fifth…
// so that at most about ten are labelled.
type wholeTicks struct{}

func (wholeTicks) Ticks(lo, hi float64) []plot.Tick {
	first, last := int(math.Ceil(lo)), int(math.Floor(hi))
	step := 1
	for _, s := range []int{1, 2, 5, 10, 20, 50, 100, 200, 500, 1000} {
		step = s
		if (last-first)/s <= 10 {
			break
		}
	}
	var ts []plot.Tick
	for v := first; v <= last; v++ {
		if v%step == 0 || step == 1 {
			ts = append(ts, plot.Tick{Value: float64(v), Label: itoa(v)})
		}
	}
	return ts
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
	f := newFigure("reference pressure / "+u.Symbol, "error of indication / "+u.Symbol)
	p := f.p

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
	f.add("± MPE", poly)

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
		f.add(s.name, l, sc)
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
	f.add(fmt.Sprintf("mean ± U (k = %s)", ftoa(res.CoverageFactor)), dots)

	s, err := f.svg("error")
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
	f := newFigure("nominal pressure / "+n.u.Symbol, "hysteresis / "+n.u.Symbol)
	p := f.p
	var vals plotter.Values
	var names []string
	for _, pt := range res.Points {
		if pt.HysteresisEvaluated {
			vals = append(vals, n.u.FromPa(pt.HysteresisPa))
			names = append(names, strconv.FormatFloat(n.u.FromPa(pt.NominalPa), 'f', max(n.decimals-1, 0), 64))
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
	// Half a bar slot of room at either end, so the end bars are whole.
	p.X.Min, p.X.Max = -0.5, float64(len(vals))-0.5
	p.Y.Min = 0
	p.Y.Max *= 1.08 // the tallest bar stays clear of the top edge
	s, err := f.svg("hysteresis")
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
	f := newFigure(ax.label, "error of indication / "+n.u.Symbol)
	p := f.p
	first, last := math.MaxInt, math.MinInt
	for i, pd := range res.Drift.Points {
		xy := make(plotter.XYs, len(pd.CycleErrors))
		for j, ce := range pd.CycleErrors {
			x := float64(ce.Cycle)
			first, last = min(first, ce.Cycle), max(last, ce.Cycle)
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
		f.add(n.pu(pd.NominalPa), l, sc)
	}
	if !ax.timed {
		cycleAxis(&p.X, first, last)
	}
	s, err := f.svg("drift")
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
	f := newFigure("cycle", "zero error / "+n.u.Symbol)
	p := f.p
	first, last := math.MaxInt, math.MinInt
	for _, z := range res.Zero.Cycles {
		first, last = min(first, z.Cycle), max(last, z.Cycle)
	}
	cycleAxis(&p.X, first, last)
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
		f.add(s.name, l, sc)
	}
	s, err := f.svg("zero")
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
