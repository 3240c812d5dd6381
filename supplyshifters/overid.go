package supplyshifters

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// Overid gathers the over-identification tests: do the shifters agree
// with each other about the coefficient?
type Overid struct {
	// DF = L - p, the number of over-identifying restrictions.
	DF int `json:"df"`
	// Available is false for an exactly identified model; Reason says why
	// there is no test.
	Available bool   `json:"available"`
	Reason    string `json:"reason,omitempty"`
	// Sargan is n·R² of the 2SLS residual û on all instruments (iid
	// errors):
	//
	//	S = n · ûᵀP_Zû / ûᵀû  ~  χ²(L - p)
	//
	// (Sargan 1958, Econometrica 26(3), 393-415; Wooldridge, Introductory
	// Econometrics, section 15-5).
	Sargan *Stat `json:"sargan"`
	// HansenJ is the minimised criterion of two-step efficient GMM with
	// the model's covariance kind (ivcore.TwoStepGMM): robust to
	// heteroskedasticity or clustering; equal to Sargan under iid errors.
	HansenJ *Stat `json:"hansen_j"`
	// MTimesF is the form of Stock & Watson (Introduction to
	// Econometrics, section 12.3): m times the homoskedastic F of the m
	// shifters in the regression of û on all instruments,
	//
	//	J = m·F = ûᵀP_Zû / [(ûᵀû - ûᵀP_Zû)/(n - k)]
	//
	// It differs from Sargan only in the denominator: the residual
	// variance of that auxiliary regression with n - k degrees of
	// freedom, instead of the total ûᵀû/n.
	MTimesF *Stat `json:"j_m_times_f"`
	// C holds difference-in-J tests, one per shifter and one per
	// requested subset.
	C []CTest `json:"c_tests"`
}

// CTest is a difference-in-J (C) test of a group of shifters:
//
//	C = J(all shifters) - J(without the group),  χ²(size of the group)
//
// with both criteria evaluated with the weight matrix of the full model
// (its submatrix for the restricted model), which keeps C ≥ 0 (Hayashi,
// Econometrics, 2000, section 3.6, ISBN 9780691010182).
type CTest struct {
	Shifters []string `json:"shifters"`
	// Available is false when dropping the group leaves too few shifters
	// or the full model is exactly identified; Reason says why.
	Available bool   `json:"available"`
	Reason    string `json:"reason,omitempty"`
	Stat
}

// justIdentifiedReason explains the missing over-identification test.
func (c *ctx) justIdentifiedReason() string {
	return fmt.Sprintf("The model is exactly identified (%d shifter(s) for %d endogenous regressor(s)): every shifter is needed to estimate the coefficient, so the data cannot test whether any of them is valid. Validity rests on the economic argument alone; add a further credible shifter to make it testable.", c.nl, c.p)
}

// overid fills Diagnostics.Overid.
func (c *ctx) overid() error {
	o := &Overid{DF: c.nl - c.p, C: []CTest{}}
	c.dg.Overid = o
	if o.DF <= 0 {
		o.Reason = c.justIdentifiedReason()
		for _, set := range c.opts.Subsets {
			o.C = append(o.C, CTest{Shifters: set, Reason: o.Reason, Stat: Stat{Name: "difference-in-J", Value: Num(math.NaN()), P: Num(math.NaN())}})
		}
		c.note("No over-identification test: %s", o.Reason)
		return nil
	}
	o.Available = true
	n := float64(c.m.N)
	u := c.tsls.Residual()
	uu := c.m.Cross(u, u)
	gz := gramTimes(c.m, c.z, u)
	upu := quadForm(gz, c.zinv, gz)
	dist := fmt.Sprintf("χ²(%d)", o.DF)

	sargan := n * upu / uu
	o.Sargan = &Stat{Name: "Sargan", Value: Num(sargan), Dist: dist, DF1: o.DF, P: Num(ivcore.ChiSquaredSurvival(sargan, o.DF))}
	o.Sargan.Meaning = c.overidSentence("Sargan (iid errors)", sargan, float64(o.Sargan.P))

	f := (upu / float64(c.nl)) / ((uu - upu) / float64(c.m.N-c.kParZ))
	mf := float64(c.nl) * f
	o.MTimesF = &Stat{Name: "J = m·F", Value: Num(mf), Dist: dist, DF1: o.DF, P: Num(ivcore.ChiSquaredSurvival(mf, o.DF))}
	o.MTimesF.Meaning = fmt.Sprintf("m·F = %s (%s): the same test as Sargan in the form of Stock & Watson, m = %d times the homoskedastic F of the shifters in the regression of the 2SLS residual on all instruments. It differs from Sargan (%s) only in the variance it divides by: that regression's residual variance with n - k degrees of freedom instead of the total ûᵀû/n.",
		fmtG(mf), fmtP(float64(o.MTimesF.P)), c.nl, fmtG(sargan))

	// Hansen J with the weight of the model's covariance kind.
	s := c.bankSym(c.bU, true)
	j, _, err := ivcore.HansenJ(c.m, c.md, s)
	if err != nil {
		o.HansenJ = &Stat{Name: "Hansen J", Value: Num(math.NaN()), Dist: dist, DF1: o.DF, P: Num(math.NaN()),
			Meaning: fmt.Sprintf("Hansen J could not be computed: %v", err)}
		c.note("Hansen J could not be computed: %v", err)
	} else {
		pj := ivcore.ChiSquaredSurvival(j, o.DF)
		o.HansenJ = &Stat{Name: "Hansen J", Value: Num(j), Dist: dist, DF1: o.DF, P: Num(pj)}
		label := "Hansen J with a " + c.bank.info.Label + " weight"
		if c.vk == ivcore.IID {
			label = "Hansen J (iid weight, equal to Sargan)"
		}
		o.HansenJ.Meaning = c.overidSentence(label, j, pj)
	}
	main := o.HansenJ
	if !main.Value.Finite() {
		main = o.Sargan
	}

	// Difference-in-J: each shifter alone, then the requested subsets.
	var sets [][]string
	if c.nl > 1 {
		for _, name := range c.shifterNames {
			sets = append(sets, []string{name})
		}
	}
	sets = append(sets, c.opts.Subsets...)
	var suspects []string
	for _, set := range sets {
		ct := c.cTest(set, s, float64(main.Value))
		if ct.Available && float64(ct.P) < c.alpha() && len(set) < c.nl-c.p {
			suspects = append(suspects, "{"+strings.Join(set, ", ")+"}")
		}
		o.C = append(o.C, ct)
	}
	if float64(main.P) < c.alpha() {
		msg := fmt.Sprintf("The shifters disagree about the coefficient (%s = %s, %s): at least one of them probably moves %s directly, not only through %s.", main.Name, fmtG(float64(main.Value)), fmtP(float64(main.P)), c.outcomeName, strings.Join(c.endogNames, " and "))
		if len(suspects) > 0 {
			msg += " Difference-in-J points at " + strings.Join(suspects, " and ") + "."
		}
		c.warn("%s", msg)
	}
	return nil
}

// bankSym returns the symmetric |Z|×|Z| raw or scaled block of bank
// residual q with itself, with negative eigenvalues (possible with two-way
// clustering) set to zero.
func (c *ctx) bankSym(q int, raw bool) *mat.SymDense {
	s := symOf(c.bank.block(q, q, raw))
	if c.vk != ivcore.Cluster || len(c.m.Clusters) != 3 {
		return s
	}
	var es mat.EigenSym
	if !es.Factorize(s, true) {
		return s
	}
	vals := es.Values(nil)
	neg := false
	for i, v := range vals {
		if v < 0 {
			vals[i], neg = 0, true
		}
	}
	if !neg {
		return s
	}
	var v mat.Dense
	es.VectorsTo(&v)
	n := len(vals)
	out := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			x := 0.0
			for l := 0; l < n; l++ {
				x += v.At(i, l) * vals[l] * v.At(j, l)
			}
			out.SetSym(i, j, x)
		}
	}
	return out
}

// cTest computes the difference-in-J statistic for dropping set.
func (c *ctx) cTest(set []string, s *mat.SymDense, jFull float64) CTest {
	ct := CTest{Shifters: append([]string(nil), set...), Stat: Stat{Name: "difference-in-J", Value: Num(math.NaN()), P: Num(math.NaN())}}
	drop := map[string]bool{}
	for _, name := range set {
		drop[name] = true
	}
	var keepPos []int
	for a := 0; a < c.nw; a++ {
		keepPos = append(keepPos, a)
	}
	var instr []int
	for i, col := range c.md.Instr {
		if !drop[c.shifterNames[i]] {
			keepPos = append(keepPos, c.nw+i)
			instr = append(instr, col)
		}
	}
	label := "{" + strings.Join(set, ", ") + "}"
	if len(instr) < c.p {
		ct.Reason = fmt.Sprintf("Dropping %s leaves %d shifter(s) for %d endogenous regressor(s): the model without them cannot be estimated, so they cannot be tested as a group.", label, len(instr), c.p)
		ct.Meaning = ct.Reason
		return ct
	}
	if !(jFull >= 0) {
		ct.Reason = "The full model's J is undefined."
		ct.Meaning = ct.Reason
		return ct
	}
	rmd := ivcore.Model{Y: c.md.Y, Endog: c.md.Endog, Exog: c.md.Exog, Instr: instr}
	jr, _, err := ivcore.HansenJ(c.m, rmd, subSym(s, keepPos))
	if err != nil {
		ct.Reason = fmt.Sprintf("The model without %s could not be fitted: %v", label, err)
		ct.Meaning = ct.Reason
		return ct
	}
	cv := math.Max(jFull-jr, 0)
	df := len(set)
	ct.Available = true
	ct.Value, ct.DF1, ct.Dist = Num(cv), df, fmt.Sprintf("χ²(%d)", df)
	ct.P = Num(ivcore.ChiSquaredSurvival(cv, df))
	p := float64(ct.P)
	exact := len(instr) == c.p
	switch {
	case p < c.alpha() && exact:
		ct.Meaning = fmt.Sprintf("C = %s (%s): without %s the model is exactly identified, so this C equals J; it shows the disagreement but cannot tell which side is at fault.", fmtG(cv), fmtP(p), label)
	case p < c.alpha():
		ct.Meaning = fmt.Sprintf("C = %s (%s): %s disagrees with the other shifters; it is a suspect (it may move %s directly). The estimate without it is the safer one.", fmtG(cv), fmtP(p), label, c.outcomeName)
	case exact:
		ct.Meaning = fmt.Sprintf("C = %s (%s): without %s the model is exactly identified, so this C equals J: no disagreement detected.", fmtG(cv), fmtP(p), label)
	default:
		ct.Meaning = fmt.Sprintf("C = %s (%s): no evidence that %s is invalid, given that the other shifters are valid.", fmtG(cv), fmtP(p), label)
	}
	return ct
}

// overidSentence reads a J-type statistic.
func (c *ctx) overidSentence(name string, j, p float64) string {
	if p < c.alpha() {
		return fmt.Sprintf("%s = %s (%s) rejects that all shifters are valid together: they point to different values of the coefficient, so at least one of them probably affects %s directly (or the effect differs by shifter). Look at the difference-in-J tests.", name, fmtG(j), fmtP(p), c.outcomeName)
	}
	return fmt.Sprintf("%s = %s (%s): no evidence against the shifters; given that at least one is valid, the others agree with it. The test has little power when all shifters share the same flaw.", name, fmtG(j), fmtP(p))
}
