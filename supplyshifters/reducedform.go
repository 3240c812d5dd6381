package supplyshifters

import (
	"fmt"
	"math"
	"strings"
)

// ReducedForm is the regression of the outcome on all instruments
// (controls and shifters), with the model's covariance kind:
//
//	y = Z γ + e
//
// With valid shifters, a shifter moves the outcome only through the
// endogenous regressor, so γ_s = β π_s for each shifter s (one endogenous
// regressor): a cost shifter that raises price should lower quantity when
// demand slopes down. The joint test of the shifters is the
// Anderson-Rubin test of β = 0.
type ReducedForm struct {
	Outcome string `json:"outcome"`
	// Shifters holds each shifter's coefficient.
	Shifters []Coef `json:"shifters"`
	// Joint is the Wald F of all shifters.
	Joint   Stat   `json:"joint"`
	Meaning string `json:"meaning"`
}

// reducedForm fills Diagnostics.ReducedForm from the reduced-form
// coefficients and the bank's block of their residual.
func (c *ctx) reducedForm() {
	r := &ReducedForm{Outcome: c.outcomeName}
	g := c.excluded(c.gy)
	v := symOf(c.exclCov(c.bY, c.bY, false))
	var moves []string
	for a, name := range c.shifterNames {
		se := math.Sqrt(v.At(a, a))
		t, p := c.tStat(g[a], se)
		r.Shifters = append(r.Shifters, Coef{Name: name, Estimate: Num(g[a]), StdError: Num(se), T: Num(t), P: Num(p)})
		if p < c.alpha() {
			moves = append(moves, fmt.Sprintf("%s (%s %s)", name, map[bool]string{true: "raises", false: "lowers"}[g[a] > 0], c.outcomeName))
		}
	}
	f, p := c.waldF(g, v, c.nl)
	r.Joint = Stat{Name: "reduced-form Wald F", Value: Num(f), Dist: c.fDist(c.nl), DF1: c.nl, DF2: c.bank.info.DF, P: Num(p)}
	if p < c.alpha() {
		r.Joint.Meaning = fmt.Sprintf("The shifters move %s directly in the reduced form (F = %s, %s): with valid shifters this can only happen through %s, so the coefficient is not zero (this is the Anderson-Rubin test of a zero coefficient).", c.outcomeName, fmtG(f), fmtP(p), strings.Join(c.endogNames, " and "))
	} else {
		r.Joint.Meaning = fmt.Sprintf("The shifters do not move %s detectably in the reduced form (F = %s, %s): the data cannot reject a zero coefficient, however strong the first stage.", c.outcomeName, fmtG(f), fmtP(p))
	}
	if len(moves) > 0 {
		r.Meaning = "Shifters with a clear reduced-form effect: " + strings.Join(moves, "; ") + ". With one endogenous regressor each reduced-form coefficient is the coefficient times that shifter's first-stage coefficient, so its sign is the first-stage sign times the sign of the coefficient."
	} else {
		r.Meaning = "No shifter has a clear reduced-form effect on " + c.outcomeName + " on its own."
	}
	c.dg.ReducedForm = r
}
