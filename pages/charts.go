package pages

import (
	"bytes"
	"fmt"
	"html"
	"html/template"
	"image/color"
	"math"
	"regexp"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"discrimen/recovery"
)

// Charts for every page, drawn with gonum/plot and written as inline SVG.
// Nothing here reads the network or the file system: fonts are referred to
// by name (Liberation Sans, metrically equal to Arial, with fallbacks) and
// the browser supplies them.

// ink is the colour of text, axes and rules in every chart.
var ink = color.RGBA{R: 0x23, G: 0x2e, B: 0x33, A: 0xff}

// muted is used for reference lines (identity, target rate).
var muted = color.RGBA{R: 0x8a, G: 0x93, B: 0x96, A: 0xff}

// hypothesisColours is our qualitative set for up to 12 hypotheses (the
// study maximum), ordered so that neighbours differ in hue and lightness.
var hypothesisColours = [12]color.RGBA{
	{0x1b, 0x6f, 0x8a, 0xff}, // deep lake blue
	{0xd0, 0x57, 0x2f, 0xff}, // brick orange
	{0x5a, 0x8f, 0x29, 0xff}, // moss
	{0x7b, 0x4f, 0xa0, 0xff}, // heather violet
	{0xc9, 0x9a, 0x1d, 0xff}, // mustard
	{0xb8, 0x33, 0x6a, 0xff}, // raspberry
	{0x3d, 0x4d, 0xb7, 0xff}, // indigo
	{0x2e, 0x9c, 0x8f, 0xff}, // sea green
	{0x8a, 0x5a, 0x2b, 0xff}, // umber
	{0xe0, 0x7f, 0xa8, 0xff}, // rose
	{0x5f, 0x6b, 0x73, 0xff}, // slate
	{0x93, 0xa8, 0x2e, 0xff}, // olive lime
}

// hypColour returns hypothesis i's colour.
func hypColour(i int) color.RGBA { return hypothesisColours[i%len(hypothesisColours)] }

// hexColour writes c as #rrggbb.
func hexColour(c color.RGBA) string { return fmt.Sprintf("#%02x%02x%02x", c.R, c.G, c.B) }

// heatStops is our sequential scale from sand (0) to deep teal (1).
var heatStops = []struct {
	at float64
	c  color.RGBA
}{
	{0.00, color.RGBA{0xf6, 0xef, 0xdc, 0xff}},
	{0.20, color.RGBA{0xe6, 0xd9, 0xae, 0xff}},
	{0.40, color.RGBA{0xb5, 0xcd, 0xa3, 0xff}},
	{0.60, color.RGBA{0x6f, 0xaa, 0x98, 0xff}},
	{0.80, color.RGBA{0x2f, 0x7a, 0x7c, 0xff}},
	{1.00, color.RGBA{0x0d, 0x3f, 0x4c, 0xff}},
}

// heatColour maps v in [0, 1] onto the sequential scale by linear
// interpolation between stops (values outside are clamped).
func heatColour(v float64) color.RGBA {
	if math.IsNaN(v) {
		return color.RGBA{0xdd, 0xdd, 0xdd, 0xff}
	}
	v = math.Max(0, math.Min(1, v))
	for i := 1; i < len(heatStops); i++ {
		a, b := heatStops[i-1], heatStops[i]
		if v <= b.at {
			t := (v - a.at) / (b.at - a.at)
			mix := func(x, y uint8) uint8 { return uint8(math.Round(float64(x) + t*(float64(y)-float64(x)))) }
			return color.RGBA{mix(a.c.R, b.c.R), mix(a.c.G, b.c.G), mix(a.c.B, b.c.B), 0xff}
		}
	}
	return heatStops[len(heatStops)-1].c
}

// heatPalette is heatColour sampled at n evenly spaced points, as the
// palette.Palette that plotter.HeatMap needs.
type heatPalette int

func (n heatPalette) Colors() []color.Color {
	out := make([]color.Color, int(n))
	for i := range out {
		out[i] = heatColour(float64(i) / float64(int(n)-1))
	}
	return out
}

// relativeLuminance is the WCAG 2.1 relative luminance of an sRGB colour:
//
//	L = 0.2126 R + 0.7152 G + 0.0722 B, each channel linearised as
//	c/12.92 if c ≤ 0.04045 else ((c+0.055)/1.055)^2.4
//
// (W3C, Web Content Accessibility Guidelines 2.1, definition of relative luminance).
func relativeLuminance(c color.RGBA) float64 {
	lin := func(v uint8) float64 {
		x := float64(v) / 255
		if x <= 0.04045 {
			return x / 12.92
		}
		return math.Pow((x+0.055)/1.055, 2.4)
	}
	return 0.2126*lin(c.R) + 0.7152*lin(c.G) + 0.0722*lin(c.B)
}

// contrastRatio is the WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05)
// with L1 the lighter of the two colours.
func contrastRatio(a, b color.RGBA) float64 {
	la, lb := relativeLuminance(a), relativeLuminance(b)
	if la < lb {
		la, lb = lb, la
	}
	return (la + 0.05) / (lb + 0.05)
}

// Cell text is black or white: with pure black, one of the two clears the
// WCAG AA ratio of 4.5 on any background (the worst case, where both tie,
// is sqrt(1.05/0.05) ≈ 4.58); a softer dark grey would not.
var (
	textDark  = color.RGBA{0x00, 0x00, 0x00, 0xff}
	textLight = color.RGBA{0xff, 0xff, 0xff, 0xff}
)

// textOn picks dark or white text for a background, whichever has the
// higher contrast ratio.
func textOn(bg color.RGBA) color.RGBA {
	if contrastRatio(bg, textDark) >= contrastRatio(bg, textLight) {
		return textDark
	}
	return textLight
}

// chartFont is the sans face gonum/plot measures text with; the SVG names
// it with browser fallbacks of the same metrics.
func chartFont(size float64) font.Font {
	return font.Font{Typeface: "Liberation", Variant: "Sans", Size: vg.Points(size)}
}

// newPlot returns a plot with our fonts and colours.
func newPlot() *plot.Plot {
	p := plot.New()
	p.BackgroundColor = color.White
	p.Title.TextStyle.Font = chartFont(10)
	p.Title.TextStyle.Color = ink
	p.Legend.TextStyle.Font = chartFont(8)
	p.Legend.TextStyle.Color = ink
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = chartFont(9)
		a.Label.TextStyle.Color = ink
		a.Tick.Label.Font = chartFont(8)
		a.Tick.Label.Color = ink
		a.Color = ink
		a.Tick.Color = ink
		a.Width = vg.Points(0.6)
		a.Tick.Width = vg.Points(0.6)
		a.Padding = vg.Points(4)
		a.Tick.Marker = niceTicks{}
	}
	return p
}

var (
	svgProlog   = regexp.MustCompile(`(?s)^.*?<svg `)
	svgSize     = regexp.MustCompile(`^<svg width="([0-9.]+)pt" height="([0-9.]+)pt"`)
	svgXlinkNS  = regexp.MustCompile(`\s*xmlns:xlink="[^"]*"`)
	svgFontName = regexp.MustCompile(`font-family:Liberation Sans;`)
)

// renderSVG draws p on a w×h point canvas and returns the SVG element for
// inline use: the XML prolog and generator comment dropped (an HTML parser
// would read them as bogus comments), the unused xlink namespace removed,
// the size given in CSS pixels, the font given fallbacks, and an
// accessible label added. Text in the SVG is escaped by vgsvg.
func renderSVG(p *plot.Plot, w, h vg.Length, label string) (out template.HTML, err error) {
	defer func() {
		// gonum/plot panics on some degenerate data (for example an
		// empty range); report it as a failed chart, not a crash.
		if r := recover(); r != nil {
			err = fmt.Errorf("pages: drawing chart %q: %v", label, r)
		}
	}()
	c := vgsvg.New(w, h)
	p.Draw(draw.New(c))
	var buf bytes.Buffer
	if _, err := c.WriteTo(&buf); err != nil {
		return "", fmt.Errorf("pages: writing chart %q: %w", label, err)
	}
	s := svgProlog.ReplaceAllString(buf.String(), "<svg ")
	s = svgXlinkNS.ReplaceAllString(s, "")
	s = svgFontName.ReplaceAllString(s, "font-family:'Liberation Sans',Arial,Helvetica,sans-serif;")
	m := svgSize.FindStringSubmatch(s)
	if m == nil {
		return "", fmt.Errorf("pages: chart %q: unexpected SVG header", label)
	}
	pw, _ := strconv.ParseFloat(m[1], 64)
	ph, _ := strconv.ParseFloat(m[2], 64)
	// 1 pt = 4/3 CSS px.
	head := fmt.Sprintf(`<svg class="chart" role="img" aria-label="%s" width="%.0f" height="%.0f"`,
		html.EscapeString(label), pw*4/3, ph*4/3)
	s = head + s[len(m[0]):]
	return template.HTML(strings.TrimSpace(s)), nil
}

// shortName trims a label for a chart axis; tables keep full names.
func shortName(s string, n int) string {
	r := []rune(s)
	if len(r) <= n {
		return s
	}
	return string(r[:n-1]) + "…"
}

// matrixGrid presents a square matrix (rows = generators) as a heat map
// grid with row 0 at the top.
type matrixGrid [][]float64

func (g matrixGrid) Dims() (c, r int)   { return len(g[0]), len(g) }
func (g matrixGrid) Z(c, r int) float64 { return g[len(g)-1-r][c] }
func (g matrixGrid) X(c int) float64    { return float64(c) }
func (g matrixGrid) Y(r int) float64    { return float64(r) }

// heatmapSpec describes one matrix chart.
type heatmapSpec struct {
	Label  string
	Names  []string
	P      [][]recovery.NullFloat // the probabilities shown
	Counts [][]recovery.NullFloat // optional: wins per cell
	N      []int                  // optional: datasets per row
	Lo, Hi [][]recovery.NullFloat // optional: 95% interval per cell
	XLabel string
	YLabel string
}

// heatmapChart draws a probability matrix with its value in each cell and,
// when given, the count and 95% interval in small text beneath.
func heatmapChart(s heatmapSpec) (template.HTML, error) {
	k := len(s.Names)
	if k == 0 || len(s.P) != k {
		return "", fmt.Errorf("pages: chart %q: matrix has %d rows for %d hypotheses", s.Label, len(s.P), k)
	}
	z := make(matrixGrid, k)
	for i := range z {
		if len(s.P[i]) != k {
			return "", fmt.Errorf("pages: chart %q: row %d has %d columns, want %d", s.Label, i, len(s.P[i]), k)
		}
		z[i] = make([]float64, k)
		for j := range z[i] {
			z[i][j] = float64(s.P[i][j])
		}
	}
	// Cells shrink from 72 to 50 points as hypotheses are added.
	cell := math.Max(50, math.Min(72, 300/float64(k)))
	p := newPlot()
	hm := plotter.NewHeatMap(z, heatPalette(256))
	hm.Min, hm.Max = 0, 1
	hm.NaN = color.RGBA{0xdd, 0xdd, 0xdd, 0xff}
	p.Add(hm)

	big, small := math.Min(12, cell*0.22), math.Min(7.5, cell*0.135)
	var pts plotter.XYs
	var labels []string
	var styles []plotStyle
	detail := s.Counts != nil || s.Lo != nil
	for i := 0; i < k; i++ {
		for j := 0; j < k; j++ {
			v := z[i][j]
			bg := heatColour(v)
			tc := textOn(bg)
			y := float64(k - 1 - i)
			top := y
			if detail {
				top = y + 0.14
			}
			pts = append(pts, plotter.XY{X: float64(j), Y: top})
			labels = append(labels, fmtProb(v))
			styles = append(styles, plotStyle{size: big, c: tc})
			if s.Counts != nil && s.N != nil && i < len(s.N) {
				pts = append(pts, plotter.XY{X: float64(j), Y: y - 0.11})
				labels = append(labels, fmtCount(float64(s.Counts[i][j]))+"/"+strconv.Itoa(s.N[i]))
				styles = append(styles, plotStyle{size: small, c: tc})
			}
			if s.Lo != nil && s.Hi != nil {
				pts = append(pts, plotter.XY{X: float64(j), Y: y - 0.30})
				labels = append(labels, fmtProb(float64(s.Lo[i][j]))+"–"+fmtProb(float64(s.Hi[i][j])))
				styles = append(styles, plotStyle{size: small, c: tc})
			}
		}
	}
	lab, err := plotter.NewLabels(plotter.XYLabels{XYs: pts, Labels: labels})
	if err != nil {
		return "", fmt.Errorf("pages: chart %q: %w", s.Label, err)
	}
	for i := range lab.TextStyle {
		lab.TextStyle[i].Font = chartFont(styles[i].size)
		lab.TextStyle[i].Color = styles[i].c
		lab.TextStyle[i].XAlign = draw.XCenter
		lab.TextStyle[i].YAlign = draw.YCenter
	}
	p.Add(lab)

	var xt, yt plot.ConstantTicks
	maxW := vg.Length(0)
	for i, n := range s.Names {
		short := shortName(n, 22)
		xt = append(xt, plot.Tick{Value: float64(i), Label: short})
		yt = append(yt, plot.Tick{Value: float64(k - 1 - i), Label: short})
		maxW = max(maxW, p.X.Tick.Label.Width(short))
	}
	p.X.Tick.Marker, p.Y.Tick.Marker = xt, yt
	p.X.Label.Text, p.Y.Label.Text = s.XLabel, s.YLabel
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		// Padding keeps the names clear of the cells.
		a.Padding = vg.Points(4)
		a.Width = 0
		a.Tick.Length = 0
		a.Tick.Width = 0
		a.Min, a.Max = -0.5, float64(k)-0.5
	}
	// Column names turn a quarter when they would not fit under a cell.
	extraH := vg.Length(0)
	if maxW > vg.Points(cell*0.95) {
		p.X.Tick.Label.Rotation = math.Pi / 2
		p.X.Tick.Label.XAlign = draw.XRight
		p.X.Tick.Label.YAlign = draw.YCenter
		extraH = maxW
	}
	w := vg.Points(cell*float64(k)) + maxW + vg.Points(34)
	h := vg.Points(cell*float64(k)) + vg.Points(30) + extraH
	return renderSVG(p, w, h, s.Label)
}

type plotStyle struct {
	size float64
	c    color.RGBA
}

// niceLogTicks labels 1-2-5 steps on a log axis, adding the ends when the
// range holds fewer than three such steps.
type niceLogTicks struct{}

func (niceLogTicks) Ticks(lo, hi float64) []plot.Tick {
	var out []plot.Tick
	for e := math.Floor(math.Log10(lo)) - 1; e <= math.Ceil(math.Log10(hi))+1; e++ {
		for _, m := range []float64{1, 2, 3, 4, 5, 6, 7, 8, 9} {
			v := m * math.Pow(10, e)
			if v < lo*(1-1e-9) || v > hi*(1+1e-9) {
				continue
			}
			t := plot.Tick{Value: v}
			if m == 1 || m == 2 || m == 5 {
				t.Label = strconv.FormatFloat(v, 'g', 3, 64)
			}
			out = append(out, t)
		}
	}
	labelled := 0
	for _, t := range out {
		if t.Label != "" {
			labelled++
		}
	}
	if labelled < 3 {
		for i := range out {
			out[i].Label = strconv.FormatFloat(out[i].Value, 'g', 3, 64)
		}
		if len(out) > 6 {
			for i := range out {
				if i%2 == 1 {
					out[i].Label = ""
				}
			}
		}
	}
	return out
}

// niceTicks labels about five round values (steps of 1, 2, 2.5 or 5 times
// a power of ten) on a linear axis, with unlabelled minor ticks between.
type niceTicks struct{}

func (niceTicks) Ticks(lo, hi float64) []plot.Tick {
	if !(hi > lo) || !finite(lo) || !finite(hi) {
		return nil
	}
	raw := (hi - lo) / 5
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := mag
	for _, m := range []float64{1, 2, 2.5, 5, 10} {
		if m*mag >= raw {
			step = m * mag
			break
		}
	}
	decimals := 0
	if step < 1 {
		decimals = int(math.Ceil(-math.Log10(step) - 1e-9))
		if math.Abs(step/math.Pow(10, -float64(decimals))-2.5) < 1e-9 {
			decimals++
		}
	}
	var out []plot.Tick
	minor := step / 2
	for i := math.Ceil(lo/minor - 1e-9); i*minor <= hi+1e-9*step; i++ {
		v := i * minor
		t := plot.Tick{Value: v}
		if math.Mod(math.Abs(i), 2) < 0.5 {
			if math.Abs(v) < 1e-12*step {
				v = 0
			}
			t.Label = strings.Replace(strconv.FormatFloat(v, 'f', decimals, 64), "-", "−", 1)
		}
		out = append(out, t)
	}
	return out
}

// scatterSpec is one parameter's true-versus-estimated chart.
type scatterSpec struct {
	Label    string
	Title    string
	Truth    []recovery.NullFloat
	Estimate []recovery.NullFloat
	Min, Max float64
	Log      bool
	Flat     bool
	Colour   color.RGBA
}

// scatterChart plots estimates against true values with the identity line
// over the parameter's range. Missing estimates (failed fits) are skipped.
func scatterChart(s scatterSpec) (template.HTML, error) {
	var pts plotter.XYs
	for i := range s.Truth {
		if i >= len(s.Estimate) {
			break
		}
		x, y := float64(s.Truth[i]), float64(s.Estimate[i])
		if !finite(x) || !finite(y) || (s.Log && (x <= 0 || y <= 0)) {
			continue
		}
		pts = append(pts, plotter.XY{X: x, Y: y})
	}
	lo, hi := s.Min, s.Max
	for _, q := range pts {
		lo, hi = math.Min(lo, math.Min(q.X, q.Y)), math.Max(hi, math.Max(q.X, q.Y))
	}
	if !finite(lo) || !finite(hi) || hi <= lo {
		return "", fmt.Errorf("pages: chart %q: empty parameter range [%g, %g]", s.Label, lo, hi)
	}
	log := s.Log && lo > 0
	// A margin of 4% of the range (in the axis's own scale) keeps points
	// off the frame.
	if log {
		r := math.Log(hi / lo)
		lo, hi = lo*math.Exp(-0.04*r), hi*math.Exp(0.04*r)
	} else {
		r := hi - lo
		lo, hi = lo-0.04*r, hi+0.04*r
	}
	p := newPlot()
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = lo, hi, lo, hi
	if log {
		p.X.Scale, p.Y.Scale = plot.LogScale{}, plot.LogScale{}
		p.X.Tick.Marker, p.Y.Tick.Marker = niceLogTicks{}, niceLogTicks{}
	}
	id, err := plotter.NewLine(plotter.XYs{{X: lo, Y: lo}, {X: hi, Y: hi}})
	if err != nil {
		return "", err
	}
	id.Color = muted
	id.Width = vg.Points(0.8)
	id.Dashes = []vg.Length{vg.Points(3), vg.Points(2)}
	p.Add(id)
	if len(pts) > 0 {
		sc, err := plotter.NewScatter(pts)
		if err != nil {
			return "", fmt.Errorf("pages: chart %q: %w", s.Label, err)
		}
		sc.Shape = draw.CircleGlyph{}
		sc.Radius = vg.Points(2.2)
		sc.Color = withAlpha(s.Colour, 0xc8)
		if s.Flat {
			sc.Shape = draw.RingGlyph{}
			sc.Color = s.Colour
		}
		p.Add(sc)
	}
	p.Title.Text = s.Title
	p.X.Label.Text, p.Y.Label.Text = "true", "estimated"
	return renderSVG(p, vg.Points(196), vg.Points(188), s.Label)
}

// addScatter adds markers of one colour, radius (points) and shape.
func addScatter(p *plot.Plot, pts plotter.XYs, c color.Color, radius float64, shape draw.GlyphDrawer) error {
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return err
	}
	sc.Color, sc.Radius, sc.Shape = c, vg.Points(radius), shape
	p.Add(sc)
	return nil
}

func withAlpha(c color.RGBA, a uint8) color.RGBA {
	// color.RGBA is alpha-premultiplied.
	f := float64(a) / 255
	return color.RGBA{uint8(float64(c.R) * f), uint8(float64(c.G) * f), uint8(float64(c.B) * f), a}
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// lineSeries is one curve of a line chart.
type lineSeries struct {
	X, Y    []float64
	Hollow  []bool // optional: points drawn as rings (censored)
	Colour  color.RGBA
	Dashed  bool
	Markers bool
	Glyph   draw.GlyphDrawer
	// Lo and Hi, when set, draw vertical interval bars.
	Lo, Hi []float64
}

// lineSpec is a chart of several curves on shared axes.
type lineSpec struct {
	Label          string
	Title          string
	XLabel, YLabel string
	Series         []lineSeries
	YMin, YMax     *float64 // fixed y range when set
	XMin, XMax     *float64 // fixed x range when set
	XTicks         []float64
	XTickLabels    []string // optional labels of XTicks (default: the value)
	HLine          *float64 // a dashed reference level
	VLine          *float64 // a dotted reference time (for example target onset)
	W, H           float64  // points
}

// lineChart draws curves with optional markers, hollow points, interval
// bars and a horizontal reference line. Non-finite points are skipped.
func lineChart(s lineSpec) (template.HTML, error) {
	p := newPlot()
	grid := plotter.NewGrid()
	grid.Vertical.Color = color.RGBA{0xe4, 0xe8, 0xe9, 0xff}
	grid.Horizontal.Color = grid.Vertical.Color
	grid.Vertical.Width, grid.Horizontal.Width = vg.Points(0.5), vg.Points(0.5)
	p.Add(grid)
	drawn := false
	for _, sr := range s.Series {
		var pts plotter.XYs
		var hollow plotter.XYs
		var bars plotter.XYs
		var errs plotter.YErrors
		for i := range sr.X {
			if i >= len(sr.Y) || !finite(sr.X[i]) || !finite(sr.Y[i]) {
				continue
			}
			q := plotter.XY{X: sr.X[i], Y: sr.Y[i]}
			pts = append(pts, q)
			if sr.Hollow != nil && i < len(sr.Hollow) && sr.Hollow[i] {
				hollow = append(hollow, q)
			}
			if sr.Lo != nil && i < len(sr.Lo) && i < len(sr.Hi) && finite(sr.Lo[i]) && finite(sr.Hi[i]) {
				bars = append(bars, q)
				errs = append(errs, struct{ Low, High float64 }{q.Y - sr.Lo[i], sr.Hi[i] - q.Y})
			}
		}
		if len(pts) == 0 {
			continue
		}
		drawn = true
		ln, err := plotter.NewLine(pts)
		if err != nil {
			return "", fmt.Errorf("pages: chart %q: %w", s.Label, err)
		}
		ln.Color = sr.Colour
		ln.Width = vg.Points(1.5)
		if sr.Dashed {
			ln.Dashes = []vg.Length{vg.Points(4), vg.Points(2.5)}
		}
		p.Add(ln)
		if len(bars) > 0 {
			eb := &plotter.YErrorBars{XYs: bars, YErrors: errs, CapWidth: vg.Points(4)}
			eb.LineStyle = draw.LineStyle{Color: sr.Colour, Width: vg.Points(0.9)}
			p.Add(eb)
		}
		if sr.Markers {
			var shape draw.GlyphDrawer = draw.CircleGlyph{}
			if sr.Glyph != nil {
				shape = sr.Glyph
			}
			if err := addScatter(p, pts, sr.Colour, 2.3, shape); err != nil {
				return "", err
			}
		}
		if len(hollow) > 0 {
			// A white disc under a coloured ring: a hollow marker.
			if err := addScatter(p, hollow, color.White, 3.6, draw.CircleGlyph{}); err != nil {
				return "", err
			}
			if err := addScatter(p, hollow, sr.Colour, 3.6, draw.RingGlyph{}); err != nil {
				return "", err
			}
		}
	}
	if !drawn {
		return "", nil
	}
	if s.YMin != nil {
		p.Y.Min = *s.YMin
	}
	if s.YMax != nil {
		p.Y.Max = *s.YMax
	}
	if s.XMin != nil {
		p.X.Min = *s.XMin
	}
	if s.XMax != nil {
		p.X.Max = *s.XMax
	}
	if p.Y.Max <= p.Y.Min {
		// A flat curve (for example a constant hypothesis's neural
		// signal) still needs an axis range.
		p.Y.Min, p.Y.Max = p.Y.Min-1, p.Y.Max+1
	}
	if p.X.Max <= p.X.Min {
		p.X.Min, p.X.Max = p.X.Min-1, p.X.Max+1
	}
	if len(s.XTicks) > 0 {
		var t plot.ConstantTicks
		for i, v := range s.XTicks {
			label := strconv.FormatFloat(v, 'g', -1, 64)
			if i < len(s.XTickLabels) {
				label = s.XTickLabels[i]
			}
			t = append(t, plot.Tick{Value: v, Label: label})
		}
		p.X.Tick.Marker = t
		span := p.X.Max - p.X.Min
		p.X.Min, p.X.Max = p.X.Min-0.05*span, p.X.Max+0.05*span
	}
	if s.HLine != nil {
		// Add keeps the axis range, already wide enough for the line.
		ref, err := plotter.NewLine(plotter.XYs{{X: p.X.Min, Y: *s.HLine}, {X: p.X.Max, Y: *s.HLine}})
		if err == nil {
			ref.Color = muted
			ref.Width = vg.Points(0.8)
			ref.Dashes = []vg.Length{vg.Points(2), vg.Points(2)}
			p.Add(ref)
		}
	}
	if s.VLine != nil {
		ref, err := plotter.NewLine(plotter.XYs{{X: *s.VLine, Y: p.Y.Min}, {X: *s.VLine, Y: p.Y.Max}})
		if err == nil {
			ref.Color = muted
			ref.Width = vg.Points(0.8)
			ref.Dashes = []vg.Length{vg.Points(1), vg.Points(2)}
			p.Add(ref)
		}
	}
	p.Title.Text = s.Title
	p.X.Label.Text, p.Y.Label.Text = s.XLabel, s.YLabel
	w, h := s.W, s.H
	if w == 0 {
		// Three fit side by side in the page's width.
		w, h = 262, 200
	}
	return renderSVG(p, vg.Points(w), vg.Points(h), s.Label)
}
