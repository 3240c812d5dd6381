package elasticity

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/demand"
	"priceiv/ivcore"
	"priceiv/supplyshifters"
)

// productTableJSON is the JSON document of a per-product table: the
// table's fields (its "elasticities" list among them) and the cautions.
type productTableJSON struct {
	*demand.ProductTable
	Cautions []string `json:"cautions"`
}

// crossPriceJSON is the JSON document of a cross-price matrix.
type crossPriceJSON struct {
	CrossPrice *demand.CrossPrice `json:"cross_price"`
	Cautions   []string           `json:"cautions"`
}

// WriteProductTable writes a per-product own-price elasticity table as
// text, json, csv or markdown.
func WriteProductTable(w io.Writer, t *demand.ProductTable, format string) error {
	return writeFormat(w, format, productTableJSON{t, Cautions}, writers{
		text:     func(w io.Writer) error { return writeProductText(w, t) },
		csv:      func(w io.Writer) error { return writeProductCSV(w, t) },
		markdown: func(w io.Writer) error { return writeProductMarkdown(w, t) },
	})
}

// WriteCrossPrice writes a cross-price elasticity matrix as text, json,
// csv or markdown.
func WriteCrossPrice(w io.Writer, c *demand.CrossPrice, format string) error {
	return writeFormat(w, format, crossPriceJSON{c, Cautions}, writers{
		text:     func(w io.Writer) error { return writeCrossText(w, c) },
		csv:      func(w io.Writer) error { return writeCrossCSV(w, c) },
		markdown: func(w io.Writer) error { return writeCrossMarkdown(w, c) },
	})
}

// FillRobust fills the weak-instrument-robust columns of a per-product
// table made by demand.EstimateByProduct: for every estimated product the
// Anderson-Rubin set of its elasticity (its one price regressor, same
// covariance kind as the estimate; supplyshifters.ARStat), mapped through
// e = s·b, and, with several shifters, the Montiel Olea-Pflueger
// effective F (supplyshifters.EffectiveF) from the first stage:
//
//	F_eff = π̂ᵀ Q π̂ / tr(V̂(π̂) Q),   Q = Z̃ᵀZ̃/n
//
// with Z̃ the shifters after the controls (and absorbed effects) are
// partialled out. A product whose set cannot be computed gets a warning
// instead. Tables of the pooled interaction model are left as they are:
// there every product's price is one of several endogenous regressors.
func FillRobust(t *demand.ProductTable) {
	if t.Mode != "by product" {
		return
	}
	for k, pf := range t.Fits {
		if pf == nil {
			continue
		}
		row := &t.Elasticities[k]
		d, f := pf.Design, pf.Fit
		if f.Estimator != ivcore.OLS && len(d.Model.Instr) > 0 {
			ar, err := supplyshifters.NewARStat(d.Moments, d.Model, f.Vcov.Kind)
			if err != nil {
				row.Warnings = append(row.Warnings, "Anderson-Rubin band not computed: "+err.Error())
			} else {
				band := ar.Band(row.Level, f.Coef[pf.Index], f.SE(pf.Index), supplyshifters.ARSearch{})
				row.AR = scaleBand(band.Pieces, pf.Scale, row.Level)
			}
		}
		if row.EffectiveF == nil && len(pf.FirstStage) > 0 && len(d.Model.Instr) > 1 {
			if x, ok := effectiveF(d, pf.FirstStage[0]); ok {
				row.EffectiveF = &x
			}
		}
	}
}

// scaleBand maps a set for b onto e = s·b.
func scaleBand(pieces []supplyshifters.Interval, s, level float64) *demand.RobustBand {
	rb := &demand.RobustBand{Method: "anderson-rubin", Level: level, Pieces: []demand.Interval{}}
	mul := func(x *float64) *float64 {
		if x == nil {
			return nil
		}
		v := s * *x
		return &v
	}
	for _, p := range pieces {
		lo, hi := mul(p.Low), mul(p.High)
		if s < 0 {
			lo, hi = hi, lo
		}
		rb.Pieces = append(rb.Pieces, demand.Interval{Low: lo, High: hi})
	}
	if s < 0 {
		for i, j := 0, len(rb.Pieces)-1; i < j; i, j = i+1, j-1 {
			rb.Pieces[i], rb.Pieces[j] = rb.Pieces[j], rb.Pieces[i]
		}
	}
	return rb
}

// effectiveF computes the effective F of one first stage; ok is false
// when the partialled-out shifter matrix is singular.
func effectiveF(d *demand.Design, fs ivcore.FirstStage) (float64, bool) {
	g := d.Moments.Gram
	z, x := d.Model.Instr, d.Model.Exog
	l := len(z)
	pi := make([]float64, l)
	vpi := mat.NewSymDense(l, nil)
	for a, pa := range fs.Excluded {
		pi[a] = fs.Fit.Coef[pa]
		for b := a; b < l; b++ {
			vpi.SetSym(a, b, fs.Fit.Cov.At(pa, fs.Excluded[b]))
		}
	}
	qzz := mat.NewSymDense(l, nil)
	for a := range z {
		for b := a; b < l; b++ {
			qzz.SetSym(a, b, g.At(z[a], z[b]))
		}
	}
	if len(x) > 0 {
		gxx := mat.NewSymDense(len(x), nil)
		gxz := mat.NewDense(len(x), l, nil)
		for a := range x {
			for b := a; b < len(x); b++ {
				gxx.SetSym(a, b, g.At(x[a], x[b]))
			}
			for b := range z {
				gxz.Set(a, b, g.At(x[a], z[b]))
			}
		}
		var ch mat.Cholesky
		if !ch.Factorize(gxx) {
			return 0, false
		}
		var sol, proj mat.Dense
		if err := ch.SolveTo(&sol, gxz); err != nil {
			return 0, false
		}
		proj.Mul(gxz.T(), &sol)
		for a := 0; a < l; a++ {
			for b := a; b < l; b++ {
				qzz.SetSym(a, b, qzz.At(a, b)-proj.At(a, b))
			}
		}
	}
	n := d.Moments.N
	qzz.ScaleSym(1/float64(n), qzz)
	f := supplyshifters.EffectiveF(pi, qzz, vpi, n)
	return f, !math.IsNaN(f)
}

// FormatRobustBand writes a robust confidence set in words: "-2.61 to
// -2.05", "below -3.1 or above 0.4", "any value", "no value", or "n/a"
// when it has not been computed.
func FormatRobustBand(b *demand.RobustBand) string {
	if b == nil {
		return "n/a"
	}
	if len(b.Pieces) == 0 {
		return "no value"
	}
	var parts []string
	for _, p := range b.Pieces {
		switch {
		case p.Low == nil && p.High == nil:
			parts = append(parts, "any value")
		case p.Low == nil:
			parts = append(parts, fmt.Sprintf("up to %.3f", *p.High))
		case p.High == nil:
			parts = append(parts, fmt.Sprintf("from %.3f up", *p.Low))
		default:
			parts = append(parts, fmt.Sprintf("%.3f to %.3f", *p.Low, *p.High))
		}
	}
	return strings.Join(parts, " or ")
}

// tblIntervals writes a robust set in interval notation for CSV cells,
// "[-2.75, -2.28]" or "(-inf, -3.1] U [0.4, +inf)", "empty" for the empty
// set and "" when it was not computed. The leading bracket keeps
// spreadsheets from reading the cell as a formula.
func tblIntervals(b *demand.RobustBand) string {
	if b == nil {
		return ""
	}
	if len(b.Pieces) == 0 {
		return "empty"
	}
	parts := make([]string, len(b.Pieces))
	for i, p := range b.Pieces {
		lo, hi := "(-inf", "+inf)"
		if p.Low != nil {
			lo = "[" + tblG(*p.Low)
		}
		if p.High != nil {
			hi = tblG(*p.High) + "]"
		}
		parts[i] = lo + ", " + hi
	}
	return strings.Join(parts, " U ")
}

func tblMode(t *demand.ProductTable) string {
	est := strings.ToUpper(t.Estimator)
	if t.Mode == "interact product" {
		return fmt.Sprintf("one pooled %s regression with price × %s and shifter × %s terms; controls and fixed effects shared", est, t.ProductColumn, t.ProductColumn)
	}
	return fmt.Sprintf("one %s regression per %s, same controls, fixed effects and shifters in each", est, t.ProductColumn)
}

func tblNum(x float64, prec int) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(x, 'f', prec, 64)
}

func tblEffF(e demand.ProductElasticity) string {
	if e.EffectiveF == nil {
		return "n/a"
	}
	return tblNum(*e.EffectiveF, 1)
}

func writeProductText(w io.Writer, t *demand.ProductTable) error {
	var b strings.Builder
	lv := pct(t.Level)
	b.WriteString("OWN-PRICE ELASTICITY BY " + strings.ToUpper(tblColumn(t)) + "\n")
	fmt.Fprintf(&b, "  %s\n", tblMode(t))
	fmt.Fprintf(&b, "  %s demand; %s; %s bands\n\n", t.Form, t.VcovDetail, lv)
	width := len(tblColumn(t))
	for _, e := range t.Elasticities {
		width = max(width, len([]rune(e.Product)))
	}
	fmt.Fprintf(&b, "  %3s  %-*s  %7s  %10s  %-20s  %-22s  %9s  %7s\n", "#", width, tblColumn(t), "rows", "elasticity",
		"Wald band", "Anderson-Rubin band", "1st-st. F", "eff. F")
	for i, e := range t.Elasticities {
		if e.Failed {
			fmt.Fprintf(&b, "  %3d  %-*s  %7s  %10s  %-20s  %-22s  %9s  %7s\n", i+1, width, e.Product, "-", "failed", "-", "-", "-", "-")
			continue
		}
		band := tblNum(e.CILow, 3) + " to " + tblNum(e.CIHigh, 3)
		fmt.Fprintf(&b, "  %3d  %-*s  %7d  %10s  %-20s  %-22s  %9s  %7s\n", i+1, width, e.Product, e.N, tblNum(e.OwnPrice, 3),
			band, FormatRobustBand(e.AR), tblNum(e.FirstStageF, 1), tblEffF(e))
	}
	booted := false
	for i, e := range t.Elasticities {
		bb := e.Bootstrap
		if bb == nil {
			continue
		}
		if !booted {
			fmt.Fprintf(&b, "\nCLUSTER BOOTSTRAP (%d replicates over %d clusters, seed %d, percentile bands)\n", bb.Replicates, bb.Clusters, bb.Seed)
			booted = true
		}
		fmt.Fprintf(&b, "  %3d  %-*s  %s to %s   (bootstrap s.e. %s)\n", i+1, width, e.Product, tblNum(bb.Low, 3), tblNum(bb.High, 3), tblNum(bb.StdError, 3))
	}
	warned := false
	for i, e := range t.Elasticities {
		for _, msg := range e.Warnings {
			if !warned {
				b.WriteString("\nWATCH\n")
				warned = true
			}
			fmt.Fprintf(&b, "  [%d] %s: %s\n", i+1, e.Product, msg)
		}
	}
	if q := t.Equal; q != nil {
		b.WriteString("\nONE ELASTICITY FOR ALL?\n")
		fmt.Fprintf(&b, "  Wald test of %d restrictions (every product equal): F = %.2f on %d and %d df, p %s\n", q.Q, q.F, q.Q, q.DF, tblP(q.P))
		if q.P < 1-t.Level {
			fmt.Fprintf(&b, "  → the products respond differently to price (rejected at %s): price them on their own elasticities.\n", tblAlpha(t.Level))
		} else {
			fmt.Fprintf(&b, "  → the data do not reject one shared elasticity at %s; a pooled estimate is a fair summary.\n", tblAlpha(t.Level))
		}
	}
	b.WriteString("\nDATA\n")
	fmt.Fprintf(&b, "  source       %s\n", t.Source)
	fmt.Fprintf(&b, "  rows used    %d\n", t.N)
	if len(t.Shifters) > 0 {
		fmt.Fprintf(&b, "  shifters     %s\n", strings.Join(t.Shifters, ", "))
	}
	if len(t.Controls) > 0 {
		fmt.Fprintf(&b, "  controls     %s\n", strings.Join(t.Controls, ", "))
	}
	if len(t.FE) > 0 {
		fmt.Fprintf(&b, "  absorbed     %s\n", strings.Join(t.FE, ", "))
	}
	for _, d := range t.Dropped {
		what := d.Reason
		if d.Column != "" {
			what += " (" + d.Column + ")"
		}
		fmt.Fprintf(&b, "  dropped      %d rows: %s\n", d.Rows, what)
	}
	for _, n := range t.Notes {
		fmt.Fprintf(&b, "\nNOTE  %s\n", n)
	}
	b.WriteString("\nREAD WITH CARE\n")
	for _, c := range Cautions {
		fmt.Fprintf(&b, "  · %s\n", c)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// tblColumn names what the rows of a per-product table are (the product
// column, or another column given to --by / --interact).
func tblColumn(t *demand.ProductTable) string {
	if t.ProductColumn == "" {
		return "product"
	}
	return t.ProductColumn
}

// tblAlpha returns the test level 1 - level as a percentage, without
// the rounding dust of 1 - 0.95.
func tblAlpha(level float64) string {
	return strconv.FormatFloat(math.Round((1-level)*1e6)/1e4, 'g', -1, 64) + "%"
}

func tblP(p float64) string {
	if p < 1e-4 {
		return "< 0.0001"
	}
	return "= " + strconv.FormatFloat(p, 'f', 4, 64)
}

func tblG(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return ""
	}
	return strconv.FormatFloat(x, 'g', -1, 64)
}

func writeProductCSV(w io.Writer, t *demand.ProductTable) error {
	cw := csv.NewWriter(w)
	_ = cw.Write([]string{"product", "n", "elasticity", "std_error", "band", "level", "ci_low", "ci_high",
		"ar_band", "first_stage_f", "effective_f", "failed", "warnings"})
	for _, e := range t.Elasticities {
		rec := []string{SafeCell(e.Product), strconv.Itoa(e.N), "", "", e.Band, tblG(e.Level), "", "", "", "", "", "true", SafeCell(strings.Join(e.Warnings, "; "))}
		if !e.Failed {
			ar := tblIntervals(e.AR)
			eff := ""
			if e.EffectiveF != nil {
				eff = tblG(*e.EffectiveF)
			}
			rec = []string{SafeCell(e.Product), strconv.Itoa(e.N), tblG(e.OwnPrice), tblG(e.StdError), e.Band, tblG(e.Level),
				tblG(e.CILow), tblG(e.CIHigh), SafeCell(ar), tblG(e.FirstStageF), eff, "false", SafeCell(strings.Join(e.Warnings, "; "))}
		}
		_ = cw.Write(rec)
	}
	cw.Flush()
	return cw.Error()
}

func writeProductMarkdown(w io.Writer, t *demand.ProductTable) error {
	var b strings.Builder
	lv := pct(t.Level)
	fmt.Fprintf(&b, "### Own-price elasticity by product\n\n%s; %s demand; %s.\n\n", mdEscape(tblMode(t)), mdEscape(t.Form), mdEscape(t.VcovDetail))
	fmt.Fprintf(&b, "| product | rows | elasticity | %s Wald band | Anderson-Rubin band | first-stage F | effective F | warnings |\n", lv)
	b.WriteString("|---|---:|---:|---|---|---:|---:|---|\n")
	for _, e := range t.Elasticities {
		warn := mdEscape(strings.Join(e.Warnings, "; "))
		if e.Failed {
			fmt.Fprintf(&b, "| %s | – | failed | – | – | – | – | %s |\n", mdEscape(e.Product), warn)
			continue
		}
		fmt.Fprintf(&b, "| %s | %d | %s | %s to %s | %s | %s | %s | %s |\n", mdEscape(e.Product), e.N, tblNum(e.OwnPrice, 3),
			tblNum(e.CILow, 3), tblNum(e.CIHigh, 3), mdEscape(FormatRobustBand(e.AR)), tblNum(e.FirstStageF, 1), tblEffF(e), warn)
	}
	if q := t.Equal; q != nil {
		fmt.Fprintf(&b, "\nOne elasticity for all products: Wald F = %.2f on %d and %d df, p %s.\n", q.F, q.Q, q.DF, tblP(q.P))
	}
	for _, n := range t.Notes {
		fmt.Fprintf(&b, "\n*Note:* %s\n", mdEscape(n))
	}
	b.WriteString("\n> " + strings.Join(Cautions, "\n>\n> ") + "\n")
	_, err := io.WriteString(w, b.String())
	return err
}

func writeCrossText(w io.Writer, c *demand.CrossPrice) error {
	var b strings.Builder
	lv := pct(c.Level)
	nP := len(c.Products)
	b.WriteString("OWN- AND CROSS-PRICE ELASTICITIES\n")
	fmt.Fprintf(&b, "  row: units of the product; column: price of the product (%% change in units per 1%% price change)\n")
	fmt.Fprintf(&b, "  %s demand, one %s equation per product; %s; %s Wald bands under each estimate\n", c.Form, strings.ToUpper(c.Estimator), c.VcovDetail, lv)
	fmt.Fprintf(&b, "  matched by %s × %s: %d of %d keys hold a price for all %d products\n\n", c.Unit, c.Time, c.Matched.Complete, c.Matched.Keys, nP)
	width := 0
	for i, p := range c.Products {
		width = max(width, len([]rune(fmt.Sprintf("[%d] %s", i+1, p))))
	}
	const cw = 15
	fmt.Fprintf(&b, "  %-*s", width, "units of ↓   price of →")
	for j := range nP {
		fmt.Fprintf(&b, "%*s", cw, fmt.Sprintf("[%d]", j+1))
	}
	b.WriteString("\n")
	for i, p := range c.Products {
		fmt.Fprintf(&b, "  %-*s", width, fmt.Sprintf("[%d] %s", i+1, p))
		for j := range nP {
			mark := " "
			if i == j {
				mark = "*"
			}
			fmt.Fprintf(&b, "%*s", cw, tblNum(c.Matrix[i][j], 3)+mark)
		}
		b.WriteString("\n")
		fmt.Fprintf(&b, "  %-*s", width, "")
		for j := range nP {
			fmt.Fprintf(&b, "%*s", cw, tblNum(c.CILow[i][j], 2)+".."+tblNum(c.CIHigh[i][j], 2)+" ")
		}
		b.WriteString("\n")
	}
	b.WriteString("  (* own-price elasticity)\n")
	if bb := c.Bootstrap; bb != nil {
		fmt.Fprintf(&b, "\nCLUSTER BOOTSTRAP (%d joint replicates over %d clusters, seed %d): own-price percentile bands\n", bb.Replicates, bb.Clusters, bb.Seed)
		for i, p := range c.Products {
			fmt.Fprintf(&b, "  [%d] %-28s %s to %s   (bootstrap s.e. %s)\n", i+1, p, tblNum(bb.CILow[i][i], 3), tblNum(bb.CIHigh[i][i], 3), tblNum(bb.StdErrors[i][i], 3))
		}
		b.WriteString("  (the JSON output holds the bands of every entry and the joint draws, for what-ifs)\n")
	}
	b.WriteString("\nWHAT IDENTIFIES IT\n")
	if len(c.Specific) > 0 {
		fmt.Fprintf(&b, "  product-specific shifters (one instrument per product): %s\n", strings.Join(c.Specific, ", "))
	}
	if len(c.Common) > 0 {
		fmt.Fprintf(&b, "  common shifters (one instrument each): %s\n", strings.Join(c.Common, ", "))
	}
	fmt.Fprintf(&b, "  %d instruments for %d prices in each equation; rows per equation: %s\n", c.Instruments, nP, tblInts(c.N))
	if len(c.Warnings) > 0 {
		b.WriteString("\nWATCH\n")
		for _, m := range c.Warnings {
			fmt.Fprintf(&b, "  · %s\n", m)
		}
	}
	b.WriteString("\nREAD WITH CARE\n")
	for _, m := range Cautions {
		fmt.Fprintf(&b, "  · %s\n", m)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

func tblInts(x []int) string {
	s := make([]string, len(x))
	for i, v := range x {
		s[i] = strconv.Itoa(v)
	}
	return strings.Join(s, ", ")
}

// writeCrossCSV writes one line per matrix entry (long layout), which
// spreadsheets pivot easily.
func writeCrossCSV(w io.Writer, c *demand.CrossPrice) error {
	cw := csv.NewWriter(w)
	_ = cw.Write([]string{"units_of", "price_of", "elasticity", "std_error", "band", "level", "ci_low", "ci_high", "first_stage_f", "n"})
	for i, pi := range c.Products {
		for j, pj := range c.Products {
			_ = cw.Write([]string{SafeCell(pi), SafeCell(pj), tblG(c.Matrix[i][j]), tblG(c.StdErrors[i][j]), c.Band, tblG(c.Level),
				tblG(c.CILow[i][j]), tblG(c.CIHigh[i][j]), tblG(c.FirstStageF[i][j]), strconv.Itoa(c.N[i])})
		}
	}
	cw.Flush()
	return cw.Error()
}

func writeCrossMarkdown(w io.Writer, c *demand.CrossPrice) error {
	var b strings.Builder
	fmt.Fprintf(&b, "### Own- and cross-price elasticities\n\nRow: units of the product; column: price of the product. %s demand, %s, %s; %s Wald bands in brackets. %d of %d %s × %s keys hold all products.\n\n",
		mdEscape(c.Form), strings.ToUpper(c.Estimator), mdEscape(c.VcovDetail), pct(c.Level), c.Matched.Complete, c.Matched.Keys, mdEscape(c.Unit), mdEscape(c.Time))
	b.WriteString("| units of \\ price of |")
	for _, p := range c.Products {
		fmt.Fprintf(&b, " %s |", mdEscape(p))
	}
	b.WriteString("\n|---|")
	for range c.Products {
		b.WriteString("---:|")
	}
	b.WriteString("\n")
	for i, p := range c.Products {
		fmt.Fprintf(&b, "| %s |", mdEscape(p))
		for j := range c.Products {
			cell := fmt.Sprintf("%s [%s, %s]", tblNum(c.Matrix[i][j], 3), tblNum(c.CILow[i][j], 2), tblNum(c.CIHigh[i][j], 2))
			if i == j {
				cell = "**" + cell + "**"
			}
			fmt.Fprintf(&b, " %s |", cell)
		}
		b.WriteString("\n")
	}
	for _, m := range c.Warnings {
		fmt.Fprintf(&b, "\n*Watch:* %s\n", mdEscape(m))
	}
	b.WriteString("\n> " + strings.Join(Cautions, "\n>\n> ") + "\n")
	_, err := io.WriteString(w, b.String())
	return err
}
