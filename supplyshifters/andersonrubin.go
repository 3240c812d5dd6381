package supplyshifters

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"priceiv/ivcore"
)

// Shapes of an Anderson-Rubin set.
const (
	ShapeBounded   = "bounded interval"
	ShapeTwoRays   = "union of two rays"
	ShapeWholeLine = "whole line"
	ShapeRay       = "half-line"
	ShapeEmpty     = "empty"
	ShapeSeveral   = "several pieces"
	ShapeNone      = "not computed"
)

// Interval is one piece of a set of coefficients; a nil end is unbounded
// (−∞ for Low, +∞ for High).
type Interval struct {
	Low  *float64 `json:"low"`
	High *float64 `json:"high"`
}

// ARTest is the Anderson-Rubin test of one hypothesised coefficient.
type ARTest struct {
	// Null is the hypothesised coefficient b₀.
	Null float64 `json:"null"`
	// Rejected is true when the p-value is below 1 - level.
	Rejected bool `json:"rejected"`
	Stat
}

// ARBand is the Anderson-Rubin confidence set for the coefficient of one
// endogenous regressor: every b₀ that the Anderson-Rubin test does not
// reject. It is valid however weak the shifters are, and it can be a
// bounded interval, a half-line, the union of two rays, the whole line, or
// empty (the shifters contradict each other).
type ARBand struct {
	// Available is false with several endogenous regressors; Reason says
	// why.
	Available  bool    `json:"available"`
	Reason     string  `json:"reason,omitempty"`
	Endogenous string  `json:"endogenous"`
	Level      float64 `json:"level"`
	// Method is "closed form" (iid errors: a quadratic inequality in b₀)
	// or "numerical inversion" (robust or clustered errors: a grid
	// widening outward from the estimate, each crossing refined by
	// bisection).
	Method string `json:"method"`
	// Shape says in words what the set looks like (Shape* constants).
	Shape string `json:"shape"`
	// CILow and CIHigh are the lowest and highest points of the set; null
	// when it is unbounded on that side, or empty. Pieces lists the set's
	// intervals in order: two rays have a gap between CILow and CIHigh.
	CILow  *float64   `json:"ci_low"`
	CIHigh *float64   `json:"ci_high"`
	Pieces []Interval `json:"pieces"`
	// Critical is the critical value of the F statistic, Dist its
	// reference distribution.
	Critical Num    `json:"critical_value"`
	Dist     string `json:"distribution"`
	// Estimate, WaldLow and WaldHigh are the estimate diagnosed and its
	// Wald band, for comparison.
	Estimate Num `json:"estimate"`
	WaldLow  Num `json:"wald_ci_low"`
	WaldHigh Num `json:"wald_ci_high"`
	// SearchLow and SearchHigh bound the numerical search; an end open at
	// the bound is reported as unbounded.
	SearchLow  *float64 `json:"search_low,omitempty"`
	SearchHigh *float64 `json:"search_high,omitempty"`
	// Tests holds the Anderson-Rubin tests of Options.ARNulls.
	Tests   []ARTest `json:"tests"`
	Meaning string   `json:"meaning"`
}

// ARStat evaluates the Anderson-Rubin statistic of one endogenous
// regressor x for any hypothesised coefficient b₀, from the moments:
//
//	ỹ(b₀) = y - b₀x = Z γ(b₀) + e(b₀),   AR(b₀) = γ̂_eᵀ V̂(γ̂_e)⁻¹ γ̂_e / L
//
// γ̂_e are the L shifter coefficients and V̂ their covariance of the
// model's kind. Because ỹ is a combination of the columns,
// γ̂(b₀) = γ̂_y - b₀π̂ and e(b₀) = e_y - b₀v̂, so with the meat blocks of
// the outcome's and x's residuals on Z,
//
//	V̂(b₀) = V_yy - b₀(V_yx + V_xy) + b₀² V_xx
//
// and the statistic for every b₀ needs no further pass over the rows.
// Under iid errors V̂(b₀) = σ̂²(b₀)[(ZᵀZ)⁻¹]_ee and AR(b₀) ~ F(L, n - k)
// exactly with normal errors. Anderson & Rubin (1949), Annals of
// Mathematical Statistics 20(1), 46-63; the robust form as in Andrews,
// Stock & Sun (2019), Annual Review of Economics 11, 727-753, section 5.
type ARStat struct {
	iid           bool
	l, df         int
	dfRes         float64
	a, c          []float64
	zz            *mat.SymDense
	dyy, dyx, dxx float64
	vyy, vyx, vxx *mat.Dense
	// Info describes the covariance used.
	Info ivcore.VcovInfo
}

// NewARStat prepares the Anderson-Rubin statistic of the single
// endogenous regressor of md on the moments m with covariance kind vk (HC1
// makes one pass over the rows). It returns an error when md does not have
// exactly one endogenous regressor or cannot be estimated.
func NewARStat(m *ivcore.Moments, md ivcore.Model, vk ivcore.VcovKind) (*ARStat, error) {
	if len(md.Endog) != 1 {
		return nil, errors.New("supplyshifters: the Anderson-Rubin statistic here covers one endogenous regressor")
	}
	// The iid 2SLS fit only places the context; it needs no pass.
	f, err := ivcore.Estimate(m, md, ivcore.TSLS, ivcore.IID)
	if err != nil {
		return nil, err
	}
	c, err := newCtx(m, md, vk, f, Options{Parts: PartAndersonRubin})
	if err != nil {
		return nil, err
	}
	c.bank = &scoreBank{m: c.m, z: c.z, vk: c.vk, k: c.kParZ}
	c.bV = c.bank.add(c.vres[0])
	c.bY = c.bank.add(c.ry)
	if err := c.bank.compute(); err != nil {
		return nil, err
	}
	return c.arStat(), nil
}

// arStat builds the statistic from the context's bank.
func (c *ctx) arStat() *ARStat {
	a := &ARStat{iid: c.vk == ivcore.IID, l: c.nl, df: c.bank.info.DF, dfRes: float64(c.m.N - c.kParZ), Info: c.bank.info}
	a.a = c.excluded(c.gy)
	a.c = c.excluded(c.piZ[0])
	a.zz = c.zzt
	a.dyy = c.m.Cross(c.ry, c.ry)
	a.dyx = c.m.Cross(c.ry, c.vres[0])
	a.dxx = c.m.Cross(c.vres[0], c.vres[0])
	a.vyy = c.exclCov(c.bY, c.bY, false)
	a.vyx = c.exclCov(c.bY, c.bV, false)
	a.vxx = c.exclCov(c.bV, c.bV, false)
	return a
}

// F returns AR(b₀).
func (a *ARStat) F(b0 float64) float64 {
	g := make([]float64, a.l)
	for i := range g {
		g[i] = a.a[i] - b0*a.c[i]
	}
	if a.iid {
		num := quadForm(g, a.zz, g) / float64(a.l)
		den := (a.dyy - 2*b0*a.dyx + b0*b0*a.dxx) / a.dfRes
		return num / den
	}
	v := mat.NewSymDense(a.l, nil)
	for i := 0; i < a.l; i++ {
		for j := i; j < a.l; j++ {
			x := a.vyy.At(i, j) - b0*(a.vyx.At(i, j)+a.vyx.At(j, i)) + b0*b0*a.vxx.At(i, j)
			v.SetSym(i, j, x)
		}
	}
	return quadInv(v, g) / float64(a.l)
}

// Test returns AR(b₀) and its p-value from F(L, df) (the covariance's
// degrees of freedom; χ²(L)/L when df <= 0).
func (a *ARStat) Test(b0 float64) (f, p float64) {
	f = a.F(b0)
	return f, ivcore.FSurvival(f, a.l, a.df)
}

// Critical returns the critical value of AR at the confidence level.
func (a *ARStat) Critical(level float64) float64 {
	if a.df <= 0 {
		return distuv.ChiSquared{K: float64(a.l)}.Quantile(level) / float64(a.l)
	}
	return distuv.F{D1: float64(a.l), D2: float64(a.df)}.Quantile(level)
}

// Limit returns AR(b₀) as |b₀| → ∞: the Wald F of the shifters in the
// first stage (with the same covariance kind). The set is unbounded when
// this limit is below the critical value.
func (a *ARStat) Limit() float64 {
	if a.iid {
		return quadForm(a.c, a.zz, a.c) / float64(a.l) / (a.dxx / a.dfRes)
	}
	return quadInv(symOf(a.vxx), a.c) / float64(a.l)
}

// Band inverts the test at the confidence level. center and step place
// the search (the estimate and its standard error); the iid case is
// solved in closed form unless s.Numeric is set. The result has no
// endogenous-regressor name, Wald band or tests filled in.
func (a *ARStat) Band(level, center, step float64, s ARSearch) *ARBand {
	crit := a.Critical(level)
	b := &ARBand{Available: true, Level: level, Critical: Num(crit), Pieces: []Interval{}, Tests: []ARTest{}}
	if a.df <= 0 {
		b.Dist = fmt.Sprintf("χ²(%d)/%d", a.l, a.l)
	} else {
		b.Dist = fmt.Sprintf("F(%d, %d)", a.l, a.df)
	}
	if a.iid && !s.Numeric {
		b.Method = "closed form"
		b.Pieces = a.closedForm(crit)
	} else {
		b.Method = "numerical inversion"
		tol, reach := s.Tol, s.Reach
		if !(tol > 0) {
			tol = 1e-6
		}
		if !(reach > 0) || math.IsInf(reach, 0) {
			reach = 1e6
		}
		if math.IsNaN(center) || math.IsInf(center, 0) {
			center = 0
		}
		if !(step > 0) || math.IsInf(step, 0) {
			step = 0.1 * math.Max(math.Abs(center), 1)
		}
		r := reach * math.Max(math.Max(math.Abs(center), step), 1)
		accept := func(x float64) bool { return a.F(x) <= crit }
		b.Pieces = invertNumeric(accept, center, step, r, tol)
		b.SearchLow, b.SearchHigh = ptr(center-r), ptr(center+r)
	}
	b.Shape = shapeOf(b.Pieces)
	if len(b.Pieces) > 0 {
		b.CILow = b.Pieces[0].Low
		b.CIHigh = b.Pieces[len(b.Pieces)-1].High
	}
	return b
}

// closedForm solves AR(b) ≤ crit under iid errors. With N(b) the
// numerator quadratic form and D(b) the residual sum of squares of
// y - b x on Z, the set is {b : N(b) - κ D(b) ≤ 0}, κ = crit·L/(n - k):
//
//	A b² - 2B b + C ≤ 0,  A = cᵀMc - κD_xx,  B = aᵀMc - κD_yx,  C = aᵀMa - κD_yy
//
// A > 0 (first-stage F above the critical value) gives a bounded interval
// or the empty set; A < 0 gives two rays or the whole line.
func (a *ARStat) closedForm(crit float64) []Interval {
	kappa := crit * float64(a.l) / a.dfRes
	n0 := quadForm(a.a, a.zz, a.a)
	n1 := quadForm(a.a, a.zz, a.c)
	n2 := quadForm(a.c, a.zz, a.c)
	A := n2 - kappa*a.dxx
	B := n1 - kappa*a.dyx
	C := n0 - kappa*a.dyy
	scale := n2 + kappa*a.dxx
	disc := B*B - A*C
	if math.Abs(A) <= 1e-13*scale {
		// Linear: -2B b + C ≤ 0.
		switch {
		case B > 0:
			return []Interval{{Low: ptr(C / (2 * B))}}
		case B < 0:
			return []Interval{{High: ptr(C / (2 * B))}}
		case C <= 0:
			return []Interval{{}}
		}
		return nil
	}
	if disc < 0 {
		if A > 0 {
			return nil
		}
		return []Interval{{}}
	}
	sq := math.Sqrt(disc)
	// Numerically stable roots of A b² - 2B b + C.
	q := B + math.Copysign(sq, B)
	r1, r2 := q/A, C/q
	if q == 0 {
		r1, r2 = 0, 0
	}
	lo, hi := math.Min(r1, r2), math.Max(r1, r2)
	if A > 0 {
		return []Interval{{Low: ptr(lo), High: ptr(hi)}}
	}
	return []Interval{{High: ptr(lo)}, {Low: ptr(hi)}}
}

// invertNumeric finds {b : accept(b)} on a grid around center: 200 points
// out to 10 steps on each side, then spacing growing by 5% per point out
// to ±reach. Each change between neighbouring points is refined by
// bisection until the bracket is narrower than tol·max(1, |b|) (at most
// 200 halvings); a set still accepted at ±reach is reported unbounded on
// that side. Pieces narrower than the grid spacing can be missed. The
// number of evaluations is bounded, so the search always ends.
func invertNumeric(accept func(float64) bool, center, step, reach, tol float64) []Interval {
	var offs []float64
	for i := 1; i <= 200; i++ {
		if o := step * float64(i) / 20; o < reach {
			offs = append(offs, o)
		}
	}
	for d := 10 * step; d < reach; {
		d = math.Min(d*1.05, reach)
		offs = append(offs, d)
	}
	if len(offs) == 0 || offs[len(offs)-1] < reach {
		offs = append(offs, reach)
	}
	pts := make([]float64, 0, 2*len(offs)+1)
	for i := len(offs) - 1; i >= 0; i-- {
		pts = append(pts, center-offs[i])
	}
	pts = append(pts, center)
	for _, o := range offs {
		pts = append(pts, center+o)
	}
	acc := make([]bool, len(pts))
	for i, x := range pts {
		acc[i] = accept(x)
	}
	bisect := func(rej, ok float64) float64 {
		for it := 0; it < 200; it++ {
			if math.Abs(ok-rej) <= tol*math.Max(1, math.Max(math.Abs(ok), math.Abs(rej))) {
				break
			}
			mid := rej + (ok-rej)/2
			if mid == rej || mid == ok {
				break
			}
			if accept(mid) {
				ok = mid
			} else {
				rej = mid
			}
		}
		return rej + (ok-rej)/2
	}
	var out []Interval
	var cur Interval
	last := len(pts) - 1
	for i := range pts {
		if !acc[i] {
			continue
		}
		if i == 0 || !acc[i-1] {
			cur = Interval{}
			if i > 0 {
				cur.Low = ptr(bisect(pts[i-1], pts[i]))
			}
		}
		if i == last || !acc[i+1] {
			if i < last {
				cur.High = ptr(bisect(pts[i+1], pts[i]))
			}
			out = append(out, cur)
		}
	}
	return out
}

// shapeOf names the shape of a set given as ordered pieces.
func shapeOf(p []Interval) string {
	switch {
	case len(p) == 0:
		return ShapeEmpty
	case len(p) == 1 && p[0].Low == nil && p[0].High == nil:
		return ShapeWholeLine
	case len(p) == 1 && p[0].Low != nil && p[0].High != nil:
		return ShapeBounded
	case len(p) == 1:
		return ShapeRay
	case len(p) == 2 && p[0].Low == nil && p[1].High == nil:
		return ShapeTwoRays
	}
	return ShapeSeveral
}

// fmtInterval writes one piece as [a, b], (−∞, b], [a, +∞).
func fmtInterval(iv Interval) string {
	lo, hi := "(−∞", "+∞)"
	if iv.Low != nil {
		lo = "[" + fmtG(*iv.Low)
	}
	if iv.High != nil {
		hi = fmtG(*iv.High) + "]"
	}
	return lo + ", " + hi
}

// fmtSet writes the pieces joined by ∪ (∅ when empty).
func fmtSet(p []Interval) string {
	if len(p) == 0 {
		return "∅"
	}
	s := make([]string, len(p))
	for i, iv := range p {
		s[i] = fmtInterval(iv)
	}
	return strings.Join(s, " ∪ ")
}

// andersonRubin fills Diagnostics.AndersonRubin.
func (c *ctx) andersonRubin() {
	if c.p != 1 {
		nan := Num(math.NaN())
		c.dg.AndersonRubin = &ARBand{Shape: ShapeNone, Pieces: []Interval{}, Tests: []ARTest{}, Level: c.level,
			Critical: nan, Estimate: nan, WaldLow: nan, WaldHigh: nan,
			Reason: fmt.Sprintf("The Anderson-Rubin band is computed for one endogenous regressor; this model has %d. A joint Anderson-Rubin set would need a search over %d dimensions.", c.p, c.p)}
		return
	}
	a := c.arStat()
	b := a.Band(c.level, c.estimate, c.estSE, c.opts.AR)
	b.Endogenous = c.endogNames[0]
	b.Estimate, b.WaldLow, b.WaldHigh = Num(c.estimate), Num(c.waldLow), Num(c.waldHigh)
	nulls := c.opts.ARNulls
	if nulls == nil {
		nulls = []float64{0}
	}
	for _, b0 := range nulls {
		f, p := a.Test(b0)
		t := ARTest{Null: b0, Rejected: p < c.alpha(), Stat: Stat{Name: "Anderson-Rubin", Value: Num(f), Dist: b.Dist, DF1: a.l, DF2: a.df, P: Num(p)}}
		verdict := "not rejected"
		if t.Rejected {
			verdict = "rejected"
		}
		t.Meaning = fmt.Sprintf("H0: coefficient of %s = %s is %s (AR = %s, %s); this verdict holds however weak the shifters are.", b.Endogenous, fmtG(b0), verdict, fmtG(f), fmtP(p))
		b.Tests = append(b.Tests, t)
	}
	b.Meaning = c.arSentence(b, a)
	c.dg.AndersonRubin = b
}

// arSentence reads the band and compares it with the Wald band.
func (c *ctx) arSentence(b *ARBand, a *ARStat) string {
	lvl := pct(c.level)
	x := b.Endogenous
	set := fmtSet(b.Pieces)
	wald := fmt.Sprintf("[%s, %s]", fmtG(c.waldLow), fmtG(c.waldHigh))
	edge := ""
	if b.Method == "numerical inversion" && b.SearchLow != nil && (b.CILow == nil || b.CIHigh == nil) && len(b.Pieces) > 0 {
		edge = fmt.Sprintf(" (the search reached %s and %s with the set still open; with |b| → ∞ the statistic tends to the first-stage F %s, against the critical value %s)", fmtG(*b.SearchLow), fmtG(*b.SearchHigh), fmtG(a.Limit()), fmtG(float64(b.Critical)))
	}
	switch b.Shape {
	case ShapeBounded:
		lo, hi := *b.CILow, *b.CIHigh
		w := c.waldHigh - c.waldLow
		s := fmt.Sprintf("The %s Anderson-Rubin set for the coefficient of %s is %s: the values that a test valid however weak the shifters are does not reject. ", lvl, x, set)
		if math.Abs(lo-c.waldLow) <= 0.1*w && math.Abs(hi-c.waldHigh) <= 0.1*w {
			return s + fmt.Sprintf("It is close to the Wald band %s, so weak shifters do not distort the usual band.", wald)
		}
		return s + fmt.Sprintf("It differs from the Wald band %s: where they disagree, trust the Anderson-Rubin set.", wald)
	case ShapeTwoRays:
		c.warn("The Anderson-Rubin set for %s is %s, two rays: the shifters are too weak to bound the coefficient, and the Wald band %s gives a false sense of precision.", x, set, wald)
		return fmt.Sprintf("The %s Anderson-Rubin set for %s is %s%s: the data exclude only the values between %s and %s. The shifters are too weak to bound the coefficient; the Wald band %s is misleading.", lvl, x, set, edge, fmtG(*b.Pieces[0].High), fmtG(*b.Pieces[1].Low), wald)
	case ShapeWholeLine:
		c.warn("The Anderson-Rubin set for %s is the whole line: the shifters carry no usable information about the coefficient.", x)
		return fmt.Sprintf("The %s Anderson-Rubin set for %s is the whole line%s: every value is consistent with the data, so the shifters carry no usable information about the coefficient, whatever the Wald band %s suggests.", lvl, x, edge, wald)
	case ShapeEmpty:
		c.warn("The Anderson-Rubin set for %s is empty: no coefficient reconciles the shifters, so they contradict each other (some shifter is invalid) or the model is misspecified.", x)
		return fmt.Sprintf("The %s Anderson-Rubin set for %s is empty: no value of the coefficient reconciles the shifters with the data. They contradict each other (an invalid shifter) or the model is misspecified.", lvl, x)
	case ShapeRay:
		c.warn("The Anderson-Rubin set for %s is %s, bounded on one side only: the shifters are weak.", x, set)
		return fmt.Sprintf("The %s Anderson-Rubin set for %s is %s%s: bounded on one side only. The shifters are weak; the Wald band %s is misleading.", lvl, x, set, edge, wald)
	}
	c.warn("The Anderson-Rubin set for %s has %d separate pieces (%s): the shifters are weak or disagree.", x, len(b.Pieces), set)
	return fmt.Sprintf("The %s Anderson-Rubin set for %s is %s%s: several separate pieces, a sign of weak or disagreeing shifters. The Wald band is %s.", lvl, x, set, edge, wald)
}
