package supplyshifters

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/demand"
	"priceiv/ivcore"
)

// Part selects groups of statistics for Options.Parts.
type Part uint

const (
	// PartFirstStage: shifter coefficients, signs, partial R², Shea and
	// Sanderson-Windmeijer.
	PartFirstStage Part = 1 << iota
	// PartWeakIV: Cragg-Donald with Stock-Yogo, Kleibergen-Paap, effective F.
	PartWeakIV
	// PartOverid: Sargan, Hansen J, m·F, difference-in-J.
	PartOverid
	// PartEndogeneity: the control-function Durbin-Wu-Hausman test.
	PartEndogeneity
	// PartAndersonRubin: Anderson-Rubin tests and band.
	PartAndersonRubin
	// PartGrouped: the grouped (Wald) estimator (Diagnose only; it needs
	// the rows).
	PartGrouped
	// PartReducedForm: the outcome on the shifters.
	PartReducedForm

	// PartAll selects everything; it is what a zero Options.Parts means.
	PartAll = PartFirstStage | PartWeakIV | PartOverid | PartEndogeneity | PartAndersonRubin | PartGrouped | PartReducedForm
)

// Options tunes Diagnose. The zero value gives the defaults.
type Options struct {
	// ExpectSign maps a shifter to the sign its first-stage coefficient
	// should have: +1 (it raises the endogenous regressor; the default for
	// every shifter, as a cost shifter should raise price), -1 (it lowers
	// it) or 0 (no expectation, no check). A key "shifter@regressor"
	// applies to one endogenous regressor only and wins over the plain
	// key. Names must be columns of the moments; columns that are not
	// shifters of the model at hand are ignored (one map serves every
	// subset of candidates).
	ExpectSign map[string]int
	// Subsets are groups of shifters for difference-in-J (C) tests, run
	// beside the one-shifter tests that are always made.
	Subsets [][]string
	// ARNulls are hypothesised coefficients of the endogenous regressor to
	// test with Anderson-Rubin. Nil means 0, and also -1 (unit elastic)
	// when Diagnose sees a log-log demand design.
	ARNulls []float64
	// AR tunes the numerical inversion of the Anderson-Rubin test.
	AR ARSearch
	// Level is the confidence level of bands, and 1 - Level the size of
	// tests. Zero means the design's level (Diagnose) or 0.95.
	Level float64
	// Parts selects the statistics to compute; zero means PartAll.
	Parts Part
}

// ARSearch tunes the numerical inversion of the Anderson-Rubin test
// (robust and cluster-robust errors; iid errors use the closed form).
type ARSearch struct {
	// Tol is the bisection tolerance for each end point: the bracket is
	// narrower than Tol·max(1, |b|). Zero means 1e-6.
	Tol float64
	// Reach bounds the search: |b - b̂| ≤ Reach·max(|b̂|, se(b̂), 1), with
	// b̂ the estimate being diagnosed. Zero means 1e6. A set still open at
	// the bound is reported as unbounded on that side.
	Reach float64
	// Numeric uses the numerical inversion under iid errors too (a cross-
	// check of the closed form).
	Numeric bool
}

// Diagnostics is the evidence on the shifters of one model. Parts not
// computed are nil (JSON null) or empty.
type Diagnostics struct {
	// Estimator and VcovKind describe the fit being diagnosed; Vcov says
	// in words which covariance the statistics use.
	Estimator string  `json:"estimator"`
	VcovKind  string  `json:"vcov"`
	Vcov      string  `json:"vcov_detail"`
	Level     float64 `json:"level"`
	N         int     `json:"n"`
	// Outcome, Endogenous and Shifters name the model's columns.
	Outcome    string   `json:"outcome"`
	Endogenous []string `json:"endogenous"`
	Shifters   []string `json:"shifters"`
	// Estimate and StdError are the fit's coefficient of the first
	// endogenous regressor and its standard error.
	Estimate Num `json:"estimate"`
	StdError Num `json:"std_error"`

	FirstStage    []FirstStageDetail `json:"first_stage"`
	WeakIV        *WeakIV            `json:"weak_iv"`
	Overid        *Overid            `json:"overid"`
	Endogeneity   *Endogeneity       `json:"endogeneity"`
	AndersonRubin *ARBand            `json:"anderson_rubin"`
	Grouped       []Grouped          `json:"grouped"`
	ReducedForm   *ReducedForm       `json:"reduced_form"`

	// Warnings are the findings an analyst must not miss (a wrong sign,
	// weak shifters, a rejected validity test); Notes explain choices.
	Warnings []string `json:"warnings"`
	Notes    []string `json:"notes"`
}

// Stat is one test statistic with its reference distribution.
type Stat struct {
	// Name names the statistic ("Sargan", "Hansen J").
	Name  string `json:"name"`
	Value Num    `json:"value"`
	// Dist is the reference distribution ("F(2, 45)", "χ²(1)"), empty
	// when the statistic is read against critical values instead.
	Dist string `json:"distribution,omitempty"`
	DF1  int    `json:"df1,omitempty"`
	DF2  int    `json:"df2,omitempty"`
	// P is the p-value (null when the statistic has none).
	P Num `json:"p_value"`
	// Meaning says in words what the value means for the estimate.
	Meaning string `json:"meaning"`
}

// Coef is one estimated coefficient.
type Coef struct {
	Name     string `json:"name"`
	Estimate Num    `json:"estimate"`
	StdError Num    `json:"std_error"`
	T        Num    `json:"t"`
	P        Num    `json:"p_value"`
}

// Diagnose computes the evidence on the shifters of a demand design for
// its fit: fit.Model (or d.Model when fit is an OLS fit) on d.Moments,
// with fit's covariance kind, and the grouped estimator from the design's
// rows. Options.Level defaults to the design's level. See DiagnoseModel.
func Diagnose(d *demand.Design, fit *ivcore.Fit, opts Options) (*Diagnostics, error) {
	if d == nil || fit == nil {
		panic("supplyshifters: Diagnose needs a design and a fit")
	}
	md := fit.Model
	if fit.Estimator == ivcore.OLS || len(md.Instr) == 0 {
		md = d.Model
		fit = nil
	}
	vk := ivcore.HC1
	if fit != nil {
		vk = fit.Vcov.Kind
	} else if _, v, err := d.Defaults(); err == nil {
		vk = v
	}
	if opts.Level == 0 {
		opts.Level = d.Level
	}
	if opts.ARNulls == nil && d.Form == "log-log" {
		opts.ARNulls = []float64{0, -1}
	}
	dg, err := DiagnoseModel(d.Moments, md, vk, fit, opts)
	if err != nil {
		return nil, err
	}
	parts := opts.Parts
	if parts == 0 {
		parts = PartAll
	}
	if parts&PartGrouped != 0 {
		switch {
		case len(md.Endog) != 1:
			dg.Notes = append(dg.Notes, "The grouped (Wald) estimator is shown for one endogenous regressor only.")
		case d.Cols == nil:
			dg.Notes = append(dg.Notes, "The grouped (Wald) estimator sorts rows by shifter, so it is left out when only moment sums are at hand (database or moments file).")
		default:
			dg.Grouped = groupedAll(d, md, vk, dg)
		}
	}
	return dg, nil
}

// DiagnoseModel computes the evidence on the excluded instruments
// (shifters) of model md from the moments m alone, with covariance kind
// vk. fit is the fit being diagnosed: any estimator of md on m, normally
// with covariance kind vk (its estimate and Wald band are shown beside
// the Anderson-Rubin band); nil means a 2SLS fit computed here. The
// grouped estimator needs rows and is left out (see Diagnose).
//
// DiagnoseModel returns an error when the model has no endogenous
// regressor or no shifter, when the model cannot be estimated (ivcore's
// errors name the column: a shifter constant within the fixed effects, a
// collinear shifter, too few shifters), or when Options name unknown
// shifters.
func DiagnoseModel(m *ivcore.Moments, md ivcore.Model, vk ivcore.VcovKind, fit *ivcore.Fit, opts Options) (*Diagnostics, error) {
	if len(md.Endog) == 0 {
		return nil, errors.New("supplyshifters: the model has no endogenous regressor, so there is nothing for the shifters to identify: name the price column as endogenous")
	}
	if len(md.Instr) == 0 {
		return nil, errors.New("supplyshifters: the model has no shifters (excluded instruments) to diagnose: add cost shifters")
	}
	c, err := newCtx(m, md, vk, fit, opts)
	if err != nil {
		return nil, err
	}
	if err := c.run(); err != nil {
		return nil, err
	}
	return c.dg, nil
}

// ctx holds what every part of the diagnostics shares.
type ctx struct {
	m     *ivcore.Moments
	md    ivcore.Model
	vk    ivcore.VcovKind
	opts  Options
	parts Part
	level float64

	fit  *ivcore.Fit // the fit diagnosed
	tsls *ivcore.Fit // 2SLS with iid covariance (coefficients, residual)

	z      []int // all instruments: exogenous then excluded
	nw, nl int   // counts of exogenous regressors and shifters
	p      int   // endogenous regressors
	kParZ  int   // parameters of a regression on Z: |Z| + absorbed levels
	zinv   *mat.SymDense
	exIdx  []int         // positions of the shifters in z
	be     *mat.Dense    // rows of (ZᵀZ)⁻¹ for the shifters, L×|Z|
	zzt    *mat.SymDense // Z̃ᵀZ̃ = ([(ZᵀZ)⁻¹]_ee)⁻¹, shifters net of the exogenous

	piZ  [][]float64 // per endogenous regressor: coefficients on z
	vres [][]float64 // first-stage residual combinations
	gy   []float64   // outcome on z
	ry   []float64   // reduced-form residual combination

	bank                               *scoreBank
	bV, bY, bU                         int         // bank indices: first-stage (first of p), reduced form, 2SLS
	bX, bSW                            []int       // null residuals (rk LM), Sanderson-Windmeijer residuals
	swCoef                             [][]float64 // Sanderson-Windmeijer residuals on z
	crit                               float64     // two-sided t critical value at the level
	dg                                 *Diagnostics
	shifterNames, endogNames           []string
	outcomeName                        string
	estimate, estSE, waldLow, waldHigh float64
}

func newCtx(m *ivcore.Moments, md ivcore.Model, vk ivcore.VcovKind, fit *ivcore.Fit, opts Options) (*ctx, error) {
	c := &ctx{m: m, md: md, vk: vk, opts: opts, parts: opts.Parts, level: opts.Level}
	if c.parts == 0 {
		c.parts = PartAll
	}
	if c.level == 0 {
		c.level = 0.95
	}
	if !(c.level > 0 && c.level < 1) {
		return nil, fmt.Errorf("supplyshifters: confidence level %v outside (0, 1): give for example 0.95", c.level)
	}
	var err error
	// The 2SLS fit runs ivcore's checks of the design: order condition,
	// variation after fixed effects and rank, each naming the column.
	c.tsls, err = ivcore.Estimate(m, md, ivcore.TSLS, ivcore.IID)
	if err != nil {
		return nil, err
	}
	if fit == nil {
		if vk == ivcore.IID {
			fit = c.tsls
		} else if fit, err = ivcore.Estimate(m, md, ivcore.TSLS, vk); err != nil {
			return nil, err
		}
	}
	c.fit = fit
	c.z = md.Z()
	c.nw, c.nl, c.p = len(md.Exog), len(md.Instr), len(md.Endog)
	c.kParZ = len(c.z) + m.AbsorbedDoF
	for _, j := range md.Instr {
		c.shifterNames = append(c.shifterNames, m.Names[j])
	}
	for _, j := range md.Endog {
		c.endogNames = append(c.endogNames, m.Names[j])
	}
	c.outcomeName = m.Names[md.Y]
	if err := c.checkOptions(); err != nil {
		return nil, err
	}

	// Regressions on all instruments, from the Gram matrix.
	c.gy, c.zinv, c.ry, err = m.Regress(m.Unit(md.Y), c.z)
	if err != nil {
		return nil, fmt.Errorf("supplyshifters: %w", err)
	}
	for _, e := range md.Endog {
		pi, _, v, err := m.Regress(m.Unit(e), c.z)
		if err != nil {
			return nil, fmt.Errorf("supplyshifters: %w", err)
		}
		c.piZ = append(c.piZ, pi)
		c.vres = append(c.vres, v)
	}
	for i := range md.Instr {
		c.exIdx = append(c.exIdx, c.nw+i)
	}
	c.be = mat.NewDense(c.nl, len(c.z), nil)
	for a, i := range c.exIdx {
		for b := range c.z {
			c.be.Set(a, b, c.zinv.At(i, b))
		}
	}
	var ok bool
	c.zzt, ok = scaledInverse(subSym(c.zinv, c.exIdx))
	if !ok {
		return nil, fmt.Errorf("supplyshifters: %w: the shifters are collinear with the controls", ivcore.ErrCollinear)
	}

	j := 0
	if jj := fit.Index(m.Names[md.Endog[0]]); jj >= 0 {
		j = jj
	}
	c.estimate, c.estSE = fit.Coef[j], fit.SE(j)
	c.waldLow, c.waldHigh = fit.ConfInt(j, c.level)

	c.dg = &Diagnostics{
		Estimator: fit.Estimator.String(), VcovKind: vk.String(), Level: c.level, N: m.N,
		Outcome: c.outcomeName, Endogenous: c.endogNames, Shifters: c.shifterNames,
		Estimate: Num(c.estimate), StdError: Num(c.estSE),
		FirstStage: []FirstStageDetail{}, Grouped: []Grouped{}, Warnings: []string{}, Notes: []string{},
	}
	return c, nil
}

// checkOptions rejects option names that are not columns of the moments
// (typing errors). Expected signs of columns that are not shifters of this
// model are ignored, so one map can serve every subset of a screen.
func (c *ctx) checkOptions() error {
	known := map[string]bool{}
	for _, s := range c.shifterNames {
		known[s] = true
	}
	list := strings.Join(c.shifterNames, ", ")
	for key, sign := range c.opts.ExpectSign {
		name, endog, scoped := strings.Cut(key, "@")
		if !known[name] && c.m.Index(name) < 0 {
			return fmt.Errorf("supplyshifters: expected sign given for %q, which is not a column of the model (shifters: %s)", name, list)
		}
		if scoped && c.m.Index(endog) < 0 {
			return fmt.Errorf("supplyshifters: expected sign %q names %q, which is not a column of the model (endogenous: %s)", key, endog, strings.Join(c.endogNames, ", "))
		}
		if sign < -1 || sign > 1 {
			return fmt.Errorf("supplyshifters: expected sign of %q is %d: use +1 (raises price), -1 (lowers price) or 0 (no expectation)", key, sign)
		}
	}
	for _, set := range c.opts.Subsets {
		if len(set) == 0 {
			return errors.New("supplyshifters: an empty subset of shifters was given for a difference-in-J test: name at least one shifter")
		}
		for _, s := range set {
			if !known[s] {
				return fmt.Errorf("supplyshifters: the difference-in-J subset {%s} names %q, which is not a shifter of this model (shifters: %s)", strings.Join(set, ", "), s, list)
			}
		}
	}
	return nil
}

// run registers the residuals the chosen parts need, makes the single
// pass for robust scores, and computes each part.
func (c *ctx) run() error {
	c.bank = &scoreBank{m: c.m, z: c.z, vk: c.vk, k: c.kParZ}
	need := func(p Part) bool { return c.parts&p != 0 }
	c.bV, c.bY, c.bU = -1, -1, -1
	if need(PartFirstStage | PartWeakIV | PartAndersonRubin) {
		c.bV = len(c.bank.res)
		for _, v := range c.vres {
			c.bank.add(v)
		}
	}
	if need(PartReducedForm | PartAndersonRubin) {
		c.bY = c.bank.add(c.ry)
	}
	if need(PartWeakIV) {
		for _, e := range c.md.Endog {
			_, _, xt, err := c.m.Regress(c.m.Unit(e), c.md.Exog)
			if err != nil {
				return fmt.Errorf("supplyshifters: %w", err)
			}
			c.bX = append(c.bX, c.bank.add(xt))
		}
	}
	if need(PartOverid) && c.nl > c.p {
		c.bU = c.bank.add(c.tsls.Residual())
	}
	if need(PartFirstStage) && c.p > 1 {
		for j := range c.md.Endog {
			eps, err := c.swResidual(j)
			if err != nil {
				return err
			}
			g, _, u, err := c.m.Regress(eps, c.z)
			if err != nil {
				return fmt.Errorf("supplyshifters: %w", err)
			}
			c.swCoef = append(c.swCoef, g)
			c.bSW = append(c.bSW, c.bank.add(u))
		}
	}
	if err := c.bank.compute(); err != nil {
		return err
	}
	c.dg.Vcov = c.bank.info.Label
	if c.dg.Vcov == "" {
		c.dg.Vcov = c.fit.Vcov.Label
	}
	c.crit = ivcore.Critical(c.level, c.bank.info.DF)

	if need(PartFirstStage) {
		c.firstStages()
	}
	if need(PartWeakIV) {
		c.weakIV()
	}
	if need(PartOverid) {
		if err := c.overid(); err != nil {
			return err
		}
	}
	if need(PartEndogeneity) {
		if err := c.endogeneity(); err != nil {
			return err
		}
	}
	if need(PartAndersonRubin) {
		c.andersonRubin()
	}
	if need(PartReducedForm) {
		c.reducedForm()
	}
	return nil
}

// exclCov returns the covariance between the shifter coefficients of the
// regressions on Z of bank residuals p and q: [B M_pq B]_ee.
func (c *ctx) exclCov(p, q int, raw bool) *mat.Dense {
	blk := c.bank.block(p, q, raw)
	var t, out mat.Dense
	t.Mul(c.be, blk)
	out.Mul(&t, c.be.T())
	return &out
}

// excluded returns the shifter entries of coefficients on z.
func (c *ctx) excluded(coef []float64) []float64 {
	out := make([]float64, c.nl)
	for a, i := range c.exIdx {
		out[a] = coef[i]
	}
	return out
}

// waldF returns the Wald F of H0: g = 0 with covariance v, divided by q
// (q = len(g) unless given), with its p-value from F(q, DF).
//
// When the covariance is singular (for example fewer clusters than
// shifters, or an indefinite two-way sum) only its positive part is
// inverted, and the numerator degrees of freedom drop to its rank, with a
// warning.
func (c *ctx) waldF(g []float64, v mat.Symmetric, q int) (f, p float64) {
	w, rank := quadInvRank(v, g)
	if rank > 0 && rank < len(g) && rank < q {
		c.warn("the covariance of %d tested coefficients has rank %d only (for example fewer clusters than shifters): the Wald F uses %d numerator degrees of freedom", len(g), rank, rank)
		q = rank
	}
	f = w / float64(q)
	return f, ivcore.FSurvival(f, q, c.bank.info.DF)
}

// tStat returns t and its two-sided p-value with the bank's degrees of
// freedom.
func (c *ctx) tStat(b, se float64) (t, p float64) {
	t = b / se
	return t, ivcore.FSurvival(t*t, 1, c.bank.info.DF)
}

// fDist names F(q, df) or its χ² limit.
func (c *ctx) fDist(q int) string {
	if c.bank.info.DF <= 0 {
		return fmt.Sprintf("χ²(%d)/%d", q, q)
	}
	return fmt.Sprintf("F(%d, %d)", q, c.bank.info.DF)
}

func (c *ctx) warn(format string, a ...any) {
	c.dg.Warnings = append(c.dg.Warnings, fmt.Sprintf(format, a...))
}

func (c *ctx) note(format string, a ...any) {
	c.dg.Notes = append(c.dg.Notes, fmt.Sprintf(format, a...))
}

// alpha is the size of tests: 1 - level.
func (c *ctx) alpha() float64 { return 1 - c.level }

// fmtP formats a p-value for sentences.
func fmtP(p float64) string {
	switch {
	case math.IsNaN(p):
		return "p undefined"
	case p < 0.001:
		return "p < 0.001"
	default:
		return fmt.Sprintf("p = %.3f", p)
	}
}

// fmtG formats a number for sentences with about four significant digits.
func fmtG(x float64) string {
	switch {
	case math.IsNaN(x):
		return "undefined"
	case math.IsInf(x, 1):
		return "+∞"
	case math.IsInf(x, -1):
		return "-∞"
	case x != 0 && (math.Abs(x) >= 1e5 || math.Abs(x) < 1e-3):
		return fmt.Sprintf("%.3g", x)
	case math.Abs(x) >= 100:
		return fmt.Sprintf("%.1f", x)
	default:
		return fmt.Sprintf("%.4g", x)
	}
}

// pct formats a share as a percentage.
func pct(x float64) string { return fmt.Sprintf("%.0f%%", 100*x) }
