package elasticity

import (
	"bytes"
	"errors"
	"fmt"
	"html"
	"html/template"
	"image/color"
	"math"
	"regexp"
	"sort"
	"strings"

	xfont "golang.org/x/image/font"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"priceiv/demand"
)

// Figure is one picture of a report: an inline SVG drawn with gonum/plot,
// its title and a sentence saying what to read from it.
type Figure struct {
	// ID names the figure in the page (data-plot attribute of its SVG).
	ID      string
	Title   string
	Caption string
	SVG     template.HTML
}

// The report's palette: ink for text and axes, teal for estimates, brick
// for today's prices and least squares, ochre for weak-instrument-robust
// bands and profit-maximising prices.
var (
	colInk    = color.NRGBA{R: 0x1d, G: 0x2b, B: 0x36, A: 0xff}
	colAxis   = color.NRGBA{R: 0x5b, G: 0x66, B: 0x70, A: 0xff}
	colGrid   = color.NRGBA{R: 0xe4, G: 0xe0, B: 0xd6, A: 0xff}
	colTeal   = color.NRGBA{R: 0x2f, G: 0x6f, B: 0x73, A: 0xff}
	colBand   = color.NRGBA{R: 0x2f, G: 0x6f, B: 0x73, A: 0x38}
	colBrick  = color.NRGBA{R: 0xb8, G: 0x4a, B: 0x33, A: 0xff}
	colOchre  = color.NRGBA{R: 0xc8, G: 0x8a, B: 0x2c, A: 0xff}
	colOchreF = color.NRGBA{R: 0xc8, G: 0x8a, B: 0x2c, A: 0x40}
	colSeries = []color.Color{
		colTeal, colOchre,
		color.NRGBA{R: 0x7b, G: 0x4b, B: 0x94, A: 0xff},
		color.NRGBA{R: 0x5d, G: 0x7f, B: 0x32, A: 0xff},
		color.NRGBA{R: 0x44, G: 0x63, B: 0x8a, A: 0xff},
		colBrick,
	}
)

var (
	fontSans = font.Font{Typeface: "Liberation", Variant: "Sans"}
	fontBold = font.Font{Typeface: "Liberation", Variant: "Sans", Weight: xfont.WeightBold}
)

// newPlot returns a plot in the report's style.
func newPlot(title, xLabel, yLabel string) *plot.Plot {
	p := plot.New()
	p.BackgroundColor = color.Transparent
	p.Title.Text = title
	p.Title.TextStyle.Font = fontBold
	p.Title.TextStyle.Font.Size = vg.Points(10)
	p.Title.TextStyle.Color = colInk
	p.Title.Padding = vg.Points(6)
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = fontSans
		a.Label.TextStyle.Font.Size = vg.Points(8.5)
		a.Label.TextStyle.Color = colAxis
		a.Tick.Label.Font = fontSans
		a.Tick.Label.Font.Size = vg.Points(7.5)
		a.Tick.Label.Color = colAxis
		a.LineStyle.Color = colAxis
		a.LineStyle.Width = vg.Points(0.6)
		a.Tick.LineStyle.Color = colAxis
		a.Tick.LineStyle.Width = vg.Points(0.5)
		a.Padding = vg.Points(3)
		a.Tick.Marker = niceTicks{}
	}
	p.X.Label.Text, p.Y.Label.Text = xLabel, yLabel
	p.Legend.TextStyle.Font = fontSans
	p.Legend.TextStyle.Font.Size = vg.Points(7.5)
	p.Legend.TextStyle.Color = colInk
	p.Legend.Top = true
	p.Legend.ThumbnailWidth = vg.Points(16)
	g := plotter.NewGrid()
	g.Vertical.Color, g.Horizontal.Color = colGrid, colGrid
	g.Vertical.Width, g.Horizontal.Width = vg.Points(0.5), vg.Points(0.5)
	p.Add(g)
	return p
}

// niceTicks places ticks as gonum does and labels them with as few
// decimals as the step needs, thousands grouped and a typographic minus.
type niceTicks struct{}

// Ticks returns the ticks of [lo, hi].
func (niceTicks) Ticks(lo, hi float64) []plot.Tick {
	ts := plot.DefaultTicks{}.Ticks(lo, hi)
	var major []float64
	for _, t := range ts {
		if t.Label != "" {
			major = append(major, t.Value)
		}
	}
	d := 0
	for ; d < 6; d++ {
		ok := true
		for _, v := range major {
			r := math.Round(v*math.Pow(10, float64(d))) / math.Pow(10, float64(d))
			if math.Abs(r-v) > 1e-9*math.Max(1, math.Abs(v)) {
				ok = false
				break
			}
		}
		if ok {
			break
		}
	}
	f := numFmt{decimals: d, group: true}
	for i := range ts {
		if ts[i].Label != "" {
			ts[i].Label = f.format(ts[i].Value)
		}
	}
	return ts
}

// renderSVG draws plots on a grid of tiles (rows of equal length, nil
// for an empty tile) and returns the SVG ready to be placed in HTML.
func renderSVG(id, title string, plots [][]*plot.Plot, w, h vg.Length) (template.HTML, error) {
	c := vgsvg.New(w, h)
	dc := draw.New(c)
	if len(plots) == 1 && len(plots[0]) == 1 {
		plots[0][0].Draw(dc)
	} else {
		t := draw.Tiles{Rows: len(plots), Cols: len(plots[0]), PadX: vg.Points(14), PadY: vg.Points(10),
			PadTop: vg.Points(2), PadBottom: vg.Points(2), PadLeft: vg.Points(2), PadRight: vg.Points(6)}
		cs := plot.Align(plots, t, dc)
		for j, row := range plots {
			for i, p := range row {
				if p != nil {
					p.Draw(cs[j][i])
				}
			}
		}
	}
	var b bytes.Buffer
	if _, err := c.WriteTo(&b); err != nil {
		return "", fmt.Errorf("drawing %s: %w", id, err)
	}
	return inlineSVG(b.String(), id, title), nil
}

var svgOpen = regexp.MustCompile(`(?s)^.*?<svg width="[^"]*" height="[^"]*"`)

// inlineSVG turns a standalone SVG document into an element for an HTML
// page: no XML prologue, scalable (viewBox kept, fixed size dropped), and
// labelled for screen readers. The SVG's own text is escaped by vgsvg.
func inlineSVG(doc, id, title string) template.HTML {
	head := fmt.Sprintf(`<svg class="plot" data-plot="%s" role="img" aria-labelledby="%s-t"`, html.EscapeString(id), html.EscapeString(id))
	s := svgOpen.ReplaceAllLiteralString(doc, head)
	// The title element follows the opening tag.
	if i := strings.Index(s, ">"); i >= 0 {
		s = s[:i+1] + fmt.Sprintf(`<title id="%s-t">%s</title>`, html.EscapeString(id), html.EscapeString(title)) + s[i+1:]
	}
	return template.HTML(s)
}

// Figures draws every picture whose numbers exist. Pictures that cannot
// be drawn are left out and the second result says why, one line each.
func (r *ReportData) Figures() ([]Figure, []string) {
	var figs []Figure
	var why []string
	for _, f := range []func() (Figure, error){
		r.figElasticities, r.figDemandCurves, r.figContribution, r.figFirstStage, r.figFirstStageProducts, r.figGrouped,
	} {
		fig, err := f()
		if err != nil {
			why = append(why, err.Error())
			continue
		}
		figs = append(figs, fig)
	}
	return figs, why
}

// levelText is "95%" for the report's level.
func (r *ReportData) levelText() string {
	if r.Level > 0 && r.Level < 1 {
		return pct(r.Level)
	}
	return "95%"
}

func segment(x0, y0, x1, y1 float64, c color.Color, w vg.Length, dash ...vg.Length) *plotter.Line {
	l, _ := plotter.NewLine(plotter.XYs{{X: x0, Y: y0}, {X: x1, Y: y1}})
	l.Color, l.Width, l.Dashes = c, w, dash
	return l
}

func dots(xy plotter.XYs, c color.Color, shape draw.GlyphDrawer, radius vg.Length) *plotter.Scatter {
	s, _ := plotter.NewScatter(xy)
	s.GlyphStyle = draw.GlyphStyle{Color: c, Shape: shape, Radius: radius}
	return s
}

// figElasticities draws each product's own-price elasticity with its
// Wald band, sorted, and the Anderson-Rubin band where it differs.
func (r *ReportData) figElasticities() (Figure, error) {
	const id = "elasticities"
	var rows []ElasticityRow
	var pooled *ElasticityRow
	for i, e := range r.Elasticities {
		switch {
		case !e.Elasticity.Finite():
		case e.Model == "pooled":
			pooled = &r.Elasticities[i]
		default:
			rows = append(rows, e)
		}
	}
	if len(rows) == 0 {
		return Figure{}, errors.New("elasticity chart: no per-product elasticity was estimated")
	}
	// Most elastic at the top: the plot's y grows upwards.
	sort.SliceStable(rows, func(i, j int) bool { return rows[i].Elasticity > rows[j].Elasticity })
	truth := map[string]float64{}
	for _, t := range r.Truth {
		if t.Model() == "per product" {
			truth[string(t.Product)] = t.TrueValue.F()
		}
	}
	title := "Own-price elasticity by product"
	p := newPlot(title, "elasticity (% change in units for a 1% higher price)", "")
	names := make([]string, len(rows))
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, e := range rows {
		lo = math.Min(lo, e.WaldLow.F())
		hi = math.Max(hi, e.WaldHigh.F())
		if e.ARLow.Finite() {
			lo = math.Min(lo, e.ARLow.F())
		}
		if e.ARHigh.Finite() {
			hi = math.Max(hi, e.ARHigh.F())
		}
	}
	lo = math.Min(lo, -1)
	hi = math.Max(hi, -1)
	if pooled != nil {
		lo, hi = math.Min(lo, pooled.Elasticity.F()), math.Max(hi, pooled.Elasticity.F())
	}
	pad := 0.08 * (hi - lo)
	lo, hi = lo-pad, hi+pad
	// Room on the right for the legend.
	p.X.Min, p.X.Max = lo, hi+0.55*(hi-lo)
	p.Y.Min, p.Y.Max = -0.7, float64(len(rows))-0.3
	unit := segment(-1, -0.7, -1, float64(len(rows))-0.3, colAxis, vg.Points(0.8), vg.Points(3), vg.Points(3))
	p.Add(unit)
	p.Legend.Add("−1: unit elastic", unit)
	if pooled != nil {
		pl := segment(pooled.Elasticity.F(), -0.7, pooled.Elasticity.F(), float64(len(rows))-0.3, colInk, vg.Points(0.8), vg.Points(1), vg.Points(2))
		p.Add(pl)
		p.Legend.Add("pooled estimate", pl)
	}
	var wald, ar *plotter.Line
	var est, tru plotter.XYs
	for i, e := range rows {
		names[i] = string(e.Product)
		y := float64(i)
		wald = segment(e.WaldLow.F(), y, e.WaldHigh.F(), y, colTeal, vg.Points(3.2))
		p.Add(wald)
		est = append(est, plotter.XY{X: e.Elasticity.F(), Y: y})
		if differsAR(e) {
			a, b := e.ARLow.F(), e.ARHigh.F()
			if !e.ARLow.Finite() {
				a = lo
			}
			if !e.ARHigh.Finite() {
				b = hi
			}
			ar = segment(a, y-0.28, b, y-0.28, colOchre, vg.Points(1.6))
			p.Add(ar)
		}
		if v, ok := truth[names[i]]; ok {
			tru = append(tru, plotter.XY{X: v, Y: y})
		}
	}
	pts := dots(est, colInk, draw.CircleGlyph{}, vg.Points(3))
	p.Add(pts)
	p.Legend.Add("estimate", pts)
	p.Legend.Add(r.levelText()+" band (Wald)", wald)
	if ar != nil {
		p.Legend.Add("Anderson-Rubin band, where it differs", ar)
	}
	if len(tru) > 0 {
		t := dots(tru, colBrick, draw.RingGlyph{}, vg.Points(4))
		p.Add(t)
		p.Legend.Add("true value (demo generator)", t)
	}
	p.NominalY(names...)
	p.Y.Tick.Label.Font.Size = vg.Points(8)
	p.Legend.Top, p.Legend.Left = true, false
	h := vg.Length(1.3+0.42*float64(len(rows))) * vg.Inch
	svg, err := renderSVG(id, title, [][]*plot.Plot{{p}}, 7.2*vg.Inch, h)
	if err != nil {
		return Figure{}, err
	}
	caption := "Products further left lose more units for each 1% on the price; a bar that stays left of the dashed line at −1 means demand is elastic beyond doubt."
	if ar != nil {
		caption += " Where the weak-instrument-robust (Anderson-Rubin) band differs from the usual one, it is drawn in ochre below it."
	} else {
		caption += " The weak-instrument-robust (Anderson-Rubin) bands agree with these to two decimals, so they are not drawn separately."
	}
	return Figure{ID: id, Title: title, Caption: caption, SVG: svg}, nil
}

// differsAR reports whether the Anderson-Rubin set of a row differs from
// its Wald band by more than 0.005 at either end (or is not one interval).
func differsAR(e ElasticityRow) bool {
	if e.ARBand == "" || e.ARBand == "n/a" {
		return false
	}
	if strings.Contains(string(e.ARBand), " or ") || !e.ARLow.Finite() || !e.ARHigh.Finite() {
		return true
	}
	return math.Abs(e.ARLow.F()-e.WaldLow.F()) > 0.005 || math.Abs(e.ARHigh.F()-e.WaldHigh.F()) > 0.005
}

// Model returns "pooled" or "per product" for a truth row.
func (t TruthRow) Model() string {
	if strings.HasPrefix(string(t.What), "pooled") {
		return "pooled"
	}
	return "per product"
}

// tileGrid lays plots out in rows of cols tiles.
func tileGrid(ps []*plot.Plot, cols int) [][]*plot.Plot {
	var out [][]*plot.Plot
	for i := 0; i < len(ps); i += cols {
		row := make([]*plot.Plot, cols)
		copy(row, ps[i:min(i+cols, len(ps))])
		out = append(out, row)
	}
	return out
}

// elasticityOf returns a product's per-product elasticity row.
func (r *ReportData) elasticityOf(product string) (ElasticityRow, bool) {
	for _, e := range r.Elasticities {
		if string(e.Product) == product && e.Model == "per product" && e.Elasticity.Finite() {
			return e, true
		}
	}
	return ElasticityRow{}, false
}

// curve samples f on [a, b].
func curve(a, b float64, n int, f func(float64) float64) plotter.XYs {
	xy := make(plotter.XYs, n)
	for i := range xy {
		x := a + (b-a)*float64(i)/float64(n-1)
		xy[i] = plotter.XY{X: x, Y: f(x)}
	}
	return xy
}

// bandPolygon returns the region between two curves sampled at the same x.
func bandPolygon(a, b plotter.XYs, c color.Color) *plotter.Polygon {
	ring := make(plotter.XYs, 0, len(a)+len(b))
	for i := range a {
		ring = append(ring, plotter.XY{X: a[i].X, Y: math.Min(a[i].Y, b[i].Y)})
	}
	for i := len(b) - 1; i >= 0; i-- {
		ring = append(ring, plotter.XY{X: b[i].X, Y: math.Max(a[i].Y, b[i].Y)})
	}
	pg, _ := plotter.NewPolygon(ring)
	pg.Color = c
	pg.LineStyle.Width = 0
	return pg
}

// figDemandCurves draws each product's estimated demand curve with its
// band over the prices seen in the data.
func (r *ReportData) figDemandCurves() (Figure, error) {
	const id = "demand-curves"
	var ps []*plot.Plot
	for _, name := range r.plots.order {
		e, ok := r.elasticityOf(name)
		st, has := r.plots.stats[name]
		if !ok || !has || !(st.maxPrice > st.minPrice) {
			continue
		}
		p0, q0 := st.meanPrice, st.meanUnits
		at := func(el float64) func(float64) float64 {
			return func(p float64) float64 { return q0 * math.Pow(p/p0, el) }
		}
		mid := curve(st.minPrice, st.maxPrice, 60, at(e.Elasticity.F()))
		a := curve(st.minPrice, st.maxPrice, 60, at(e.WaldLow.F()))
		b := curve(st.minPrice, st.maxPrice, 60, at(e.WaldHigh.F()))
		p := newPlot(name, "price per unit (data currency)", "units per store-week")
		p.Add(bandPolygon(a, b, colBand))
		l, _ := plotter.NewLine(mid)
		l.Color, l.Width = colTeal, vg.Points(1.6)
		p.Add(l)
		p.Add(dots(plotter.XYs{{X: p0, Y: q0}}, colBrick, draw.CircleGlyph{}, vg.Points(2.6)))
		p.Y.Min = 0
		ps = append(ps, p)
	}
	if len(ps) == 0 {
		return Figure{}, errors.New("demand curves: no product has both an elasticity and prices in the data")
	}
	cols := min(3, len(ps))
	grid := tileGrid(ps, cols)
	title := "Estimated demand curve of each product"
	svg, err := renderSVG(id, title, grid, 7.2*vg.Inch, vg.Length(2.1*float64(len(grid)))*vg.Inch)
	if err != nil {
		return Figure{}, err
	}
	return Figure{ID: id, Title: title, SVG: svg,
		Caption: fmt.Sprintf("Units a store sells in a typical week at each price seen in the data, on the estimated constant-elasticity curve through the product's average price and units (red dot); the shading is the %s band of the elasticity, so it pinches at the average and widens away from it.", r.levelText())}, nil
}

// figContribution draws contribution against price for each product with
// a known unit cost, with the profit-maximising price and its band.
func (r *ReportData) figContribution() (Figure, error) {
	const id = "contribution"
	var ps []*plot.Plot
	per := ""
	for _, m := range r.Markups {
		if !m.UnitCost.Finite() || !m.ProfitMaxPrice.Finite() || !m.Price.Finite() || !m.Units.Finite() {
			continue
		}
		e, ok := r.elasticityOf(string(m.Product))
		if !ok {
			continue
		}
		per = string(m.UnitsPeriod)
		c, p0, q0 := m.UnitCost.F(), m.Price.F(), m.Units.F()
		star, sLo, sHi := m.ProfitMaxPrice.F(), m.ProfitMaxPriceLow.F(), m.ProfitMaxPriceHigh.F()
		xlo := math.Max(c*1.02, 0.75*math.Min(p0, star))
		xhi := math.Min(math.Max(p0, sHi)*1.12, 2.5*p0)
		if st, ok := r.plots.stats[string(m.Product)]; ok {
			xhi = math.Max(xhi, math.Min(st.maxPrice, 2.5*p0))
		}
		at := func(el float64) func(float64) float64 {
			return func(p float64) float64 { return (p - c) * q0 * math.Pow(p/p0, el) }
		}
		mid := curve(xlo, xhi, 80, at(e.Elasticity.F()))
		a := curve(xlo, xhi, 80, at(e.WaldLow.F()))
		b := curve(xlo, xhi, 80, at(e.WaldHigh.F()))
		ymax, ymin := 0.0, math.Inf(1)
		for i := range mid {
			ymax = math.Max(ymax, math.Max(a[i].Y, b[i].Y))
			ymin = math.Min(ymin, mid[i].Y)
		}
		ymin = math.Max(0, ymin-0.15*(ymax-ymin))
		p := newPlot(string(m.Product), "price per unit (data currency)", "contribution (currency)")
		p.Y.Min, p.Y.Max = ymin, ymax*1.02
		p.X.Min, p.X.Max = xlo, xhi
		if sLo < xhi {
			shade, _ := plotter.NewPolygon(plotter.XYs{{X: math.Max(sLo, xlo), Y: ymin}, {X: math.Min(sHi, xhi), Y: ymin}, {X: math.Min(sHi, xhi), Y: ymax * 1.02}, {X: math.Max(sLo, xlo), Y: ymax * 1.02}})
			shade.Color, shade.LineStyle.Width = colOchreF, 0
			p.Add(shade)
		}
		p.Add(bandPolygon(a, b, colBand))
		l, _ := plotter.NewLine(mid)
		l.Color, l.Width = colTeal, vg.Points(1.6)
		p.Add(l)
		if star <= xhi {
			p.Add(segment(star, ymin, star, ymax*1.02, colOchre, vg.Points(1.4)))
		}
		p.Add(segment(p0, ymin, p0, ymax*1.02, colBrick, vg.Points(1.2), vg.Points(3), vg.Points(2)))
		ps = append(ps, p)
	}
	if len(ps) == 0 {
		return Figure{}, errors.New("contribution curves: no product has a unit cost and an elastic estimate (give unit costs in the prices file)")
	}
	cols := min(3, len(ps))
	grid := tileGrid(ps, cols)
	title := "Contribution against price, with the profit-maximising price"
	svg, err := renderSVG(id, title, grid, 7.2*vg.Inch, vg.Length(2.1*float64(len(grid)))*vg.Inch)
	if err != nil {
		return Figure{}, err
	}
	return Figure{ID: id, Title: title, SVG: svg,
		Caption: fmt.Sprintf("Contribution, (price − unit cost) × units %s, at prices around today's (dashed red) on the estimated demand curve, with its %s band in teal; the ochre line is the price that maximises it and the ochre shading that price's band. A peak far from today's price says the elasticity and the cost do not fit today's price.", per, r.levelText())}, nil
}

// residualRows returns the rows of the combination A r of a design's
// absorbed columns.
func residualRows(d *demand.Design, comb []float64) []float64 {
	out := make([]float64, d.N)
	for j, c := range comb {
		if c == 0 {
			continue
		}
		col := d.Cols[j]
		for i := range out {
			out[i] += c * col[i]
		}
	}
	return out
}

// binnedFirstStage returns the binned scatter of the design's (log) price
// against shifter k, both net of the fixed effects, the controls and the
// other shifters (so the slope is the shifter's first-stage coefficient),
// shifted back to the raw means for readable axes, and the fitted line.
func binnedFirstStage(d *demand.Design, k int, bins int) (pts plotter.XYs, line plotter.XYs, err error) {
	m, md := d.Moments, d.Model
	if len(md.Endog) == 0 {
		return nil, nil, errors.New("no endogenous regressor")
	}
	var others []int
	others = append(others, md.Exog...)
	for _, z := range md.Instr {
		if z != k {
			others = append(others, z)
		}
	}
	x := md.Endog[0]
	_, _, rz, err := m.Regress(m.Unit(k), others)
	if err != nil {
		return nil, nil, err
	}
	_, _, rx, err := m.Regress(m.Unit(x), others)
	if err != nil {
		return nil, nil, err
	}
	zr := residualRows(d, rz)
	xr := residualRows(d, rx)
	szz, szx := 0.0, 0.0
	for i := range zr {
		szz += zr[i] * zr[i]
		szx += zr[i] * xr[i]
	}
	if !(szz > 0) {
		return nil, nil, errors.New("the shifter has no variation left after the fixed effects and other terms")
	}
	b := szx / szz
	mz, mx := meanOf(d.Raw[k]), meanOf(d.Raw[x])
	idx := make([]int, len(zr))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, c int) bool { return zr[idx[a]] < zr[idx[c]] })
	n := len(idx)
	bins = min(bins, n)
	for g := range bins {
		lo, hi := g*n/bins, (g+1)*n/bins
		if hi <= lo {
			continue
		}
		var sz, sx float64
		for _, i := range idx[lo:hi] {
			sz += zr[i]
			sx += xr[i]
		}
		c := float64(hi - lo)
		pts = append(pts, plotter.XY{X: mz + sz/c, Y: mx + sx/c})
	}
	z0, z1 := zr[idx[0]], zr[idx[n-1]]
	if len(pts) > 0 {
		z0, z1 = pts[0].X-mz, pts[len(pts)-1].X-mz
	}
	line = plotter.XYs{{X: mz + z0, Y: mx + b*z0}, {X: mz + z1, Y: mx + b*z1}}
	return pts, line, nil
}

func meanOf(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// priceAxis names the (transformed) price of a design for axis labels.
func priceAxis(d *demand.Design) string {
	name := d.Names[d.Model.Endog[0]]
	if d.Form == "log-log" {
		return "log " + name
	}
	return name
}

// figFirstStage draws the pooled model's first stage for each shifter.
func (r *ReportData) figFirstStage() (Figure, error) {
	const id = "first-stage"
	d := r.plots.pooledDesign
	if d == nil || len(d.Model.Instr) == 0 || len(d.Model.Endog) == 0 {
		return Figure{}, errors.New("first-stage picture: the pooled model has no shifters")
	}
	var ps []*plot.Plot
	for _, k := range d.Model.Instr {
		pts, line, err := binnedFirstStage(d, k, 20)
		if err != nil {
			return Figure{}, fmt.Errorf("first-stage picture of %s: %w", d.Names[k], err)
		}
		p := newPlot(d.Names[k], d.Names[k]+" (its own units, net of other terms)", priceAxis(d)+" (net of other terms)")
		l, _ := plotter.NewLine(line)
		l.Color, l.Width = colTeal, vg.Points(1.5)
		p.Add(l, dots(pts, colInk, draw.CircleGlyph{}, vg.Points(2.2)))
		ps = append(ps, p)
	}
	cols := min(3, len(ps))
	grid := tileGrid(ps, cols)
	title := "First stage: price against each cost shifter (pooled model)"
	svg, err := renderSVG(id, title, grid, 7.2*vg.Inch, vg.Length(2.4*float64(len(grid)))*vg.Inch)
	if err != nil {
		return Figure{}, err
	}
	return Figure{ID: id, Title: title, SVG: svg,
		Caption: "Each dot averages one twentieth of the rows, ordered by the shifter after the fixed effects, controls and other shifters are taken out; the line has the first-stage slope. A shifter that carries identification shows dots climbing steadily along its line."}, nil
}

// figFirstStageProducts draws each product's first stage (its model's
// first shifter).
func (r *ReportData) figFirstStageProducts() (Figure, error) {
	const id = "first-stage-products"
	t := r.plots.products
	if t == nil {
		return Figure{}, errors.New("per-product first stage: the per-product models were not estimated")
	}
	var ps []*plot.Plot
	shifter := ""
	for _, pf := range t.Fits {
		if pf == nil || len(pf.Design.Model.Instr) == 0 {
			continue
		}
		d := pf.Design
		k := d.Model.Instr[0]
		pts, line, err := binnedFirstStage(d, k, 20)
		if err != nil {
			continue
		}
		shifter = d.Names[k]
		p := newPlot(pf.Product, d.Names[k]+" (own units, net)", priceAxis(d)+" (net)")
		l, _ := plotter.NewLine(line)
		l.Color, l.Width = colTeal, vg.Points(1.5)
		p.Add(l, dots(pts, colInk, draw.CircleGlyph{}, vg.Points(2)))
		ps = append(ps, p)
	}
	if len(ps) == 0 {
		return Figure{}, errors.New("per-product first stage: no product model has a shifter")
	}
	cols := min(3, len(ps))
	grid := tileGrid(ps, cols)
	title := "First stage of each product's model"
	svg, err := renderSVG(id, title, grid, 7.2*vg.Inch, vg.Length(2.1*float64(len(grid)))*vg.Inch)
	if err != nil {
		return Figure{}, err
	}
	return Figure{ID: id, Title: title, SVG: svg,
		Caption: fmt.Sprintf("Each product's price against its own identifying shifter (%s), both net of the model's other terms, binned in twentieths with the first-stage line: a steady climb in every panel means each product's elasticity rests on its own cost movements.", shifter)}, nil
}

// groupedSplit splits the rows of a design at the median of shifter k,
// both the shifter and the model's price and outcome taken net of the
// fixed effects, the controls and the other shifters, and returns the
// mean (price, outcome) of the low and the high half. The slope between
// the two points is the grouped (Wald 1940) estimate with that shifter
// alone as the instrument.
func groupedSplit(d *demand.Design, k int) (lo, hi plotter.XY, err error) {
	m, md := d.Moments, d.Model
	var others []int
	others = append(others, md.Exog...)
	for _, z := range md.Instr {
		if z != k {
			others = append(others, z)
		}
	}
	res := func(j int) ([]float64, error) {
		_, _, r, err := m.Regress(m.Unit(j), others)
		if err != nil {
			return nil, err
		}
		return residualRows(d, r), nil
	}
	z, err := res(k)
	if err != nil {
		return lo, hi, err
	}
	x, err := res(md.Endog[0])
	if err != nil {
		return lo, hi, err
	}
	y, err := res(md.Y)
	if err != nil {
		return lo, hi, err
	}
	sorted := append([]float64(nil), z...)
	sort.Float64s(sorted)
	med := sorted[len(sorted)/2]
	var n [2]float64
	var sx, sy [2]float64
	for i, v := range z {
		g := 0
		if v > med {
			g = 1
		}
		n[g]++
		sx[g] += x[i]
		sy[g] += y[i]
	}
	if n[0] == 0 || n[1] == 0 {
		return lo, hi, errors.New("the shifter does not split the rows in two")
	}
	lo = plotter.XY{X: sx[0] / n[0], Y: sy[0] / n[0]}
	hi = plotter.XY{X: sx[1] / n[1], Y: sy[1] / n[1]}
	if hi.X == lo.X {
		return lo, hi, errors.New("the two halves have the same mean price")
	}
	return lo, hi, nil
}

// figGrouped draws the grouped picture of the pooled model: for each
// shifter, the high-cost and low-cost halves of the rows, the line
// through them, and the slopes of the model's estimate and of least
// squares beside it.
func (r *ReportData) figGrouped() (Figure, error) {
	const id = "grouped"
	d, fit := r.plots.pooledDesign, r.plots.pooledFit
	if d == nil || fit == nil || len(d.Model.Instr) == 0 || len(d.Model.Endog) == 0 {
		return Figure{}, errors.New("grouped picture: the pooled model has no shifters")
	}
	xl := priceAxis(d) + ", net of other terms"
	yl := d.Names[d.Model.Y]
	if d.Form != "linear" {
		yl = "log " + yl
	}
	yl += ", net of other terms"
	title := "The grouped picture: high-cost against low-cost rows"
	p := newPlot(title, xl, yl)
	xmin, xmax := math.Inf(1), math.Inf(-1)
	ymin, ymax := math.Inf(1), math.Inf(-1)
	drawn := 0
	for i, k := range d.Model.Instr {
		lo, hi, err := groupedSplit(d, k)
		if err != nil {
			continue
		}
		drawn++
		col := colSeries[(i+2)%len(colSeries)]
		l := segment(lo.X, lo.Y, hi.X, hi.Y, col, vg.Points(1.6))
		p.Add(l, dots(plotter.XYs{lo}, col, draw.CircleGlyph{}, vg.Points(3.4)), dots(plotter.XYs{hi}, col, draw.SquareGlyph{}, vg.Points(3.4)))
		p.Legend.Add(fmt.Sprintf("%s: slope %s", d.Names[k], numFmt{decimals: 2}.format((hi.Y-lo.Y)/(hi.X-lo.X))), l)
		xmin, xmax = math.Min(xmin, math.Min(lo.X, hi.X)), math.Max(xmax, math.Max(lo.X, hi.X))
		ymin, ymax = math.Min(ymin, math.Min(lo.Y, hi.Y)), math.Max(ymax, math.Max(lo.Y, hi.Y))
	}
	if drawn == 0 {
		return Figure{}, errors.New("grouped picture: no shifter splits the rows into halves with different prices")
	}
	w := xmax - xmin
	a, b := xmin-0.25*w, xmax+0.25*w
	// All halves are centred on zero (every column is net of the same
	// terms), so the reference slopes go through the origin.
	name := d.Names[d.Model.Endog[0]]
	bIV := fit.Coef[fit.Index(name)]
	l2 := segment(a, bIV*a, b, bIV*b, colTeal, vg.Points(1.2), vg.Points(5), vg.Points(3))
	p.Add(l2)
	p.Legend.Add(fmt.Sprintf("%s estimate: slope %s", strings.ToUpper(fit.Estimator.String()), numFmt{decimals: 2}.format(bIV)), l2)
	ymin, ymax = math.Min(ymin, math.Min(bIV*a, bIV*b)), math.Max(ymax, math.Max(bIV*a, bIV*b))
	if dg := r.plots.pooledDiag; dg != nil && dg.Endogeneity != nil && dg.Endogeneity.OLS.Finite() {
		bo := float64(dg.Endogeneity.OLS)
		lo := segment(a, bo*a, b, bo*b, colBrick, vg.Points(1.2), vg.Points(1.5), vg.Points(2.5))
		p.Add(lo)
		p.Legend.Add(fmt.Sprintf("least squares: slope %s", numFmt{decimals: 2}.format(bo)), lo)
	}
	p.X.Min, p.X.Max = a, b
	// Head room for the legend.
	p.Y.Min, p.Y.Max = ymin-0.05*(ymax-ymin), ymax+0.55*(ymax-ymin)
	p.Legend.Top, p.Legend.Left = true, false
	svg, err := renderSVG(id, title, [][]*plot.Plot{{p}}, 7.2*vg.Inch, 3.6*vg.Inch)
	if err != nil {
		return Figure{}, err
	}
	return Figure{ID: id, Title: title, SVG: svg,
		Caption: "For each shifter the rows are split at its median, everything taken net of the fixed effects, controls and other shifters: the high-cost half (square) has higher prices and sells fewer units than the low-cost half (circle), and the slope between the two is an estimate of the elasticity from that shifter alone. The dashed line has the slope of the model's estimate; the dotted one that of least squares, which mistakes prices that follow demand for a weaker response."}, nil
}
