package elasticity

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"math"
	"strconv"
	"strings"
	"time"
)

//go:embed report.html.tmpl
var reportTemplate string

var reportTmpl = template.Must(template.New("report").Parse(reportTemplate))

// WriteHTML writes the report as one self-contained HTML page: a summary
// a pricing lead can read in a minute, the evidence (pictures and
// tables), the cautions and the run record. Everything is inline (styles
// and SVG pictures); every label is escaped by html/template. Each number
// of the summary and the tables carries, in its data-json attribute, the
// JSON pointer of its value in results.json (with data-scale when it is
// shown multiplied, for example by 100 as a percentage, and data-abs when
// shown without its sign).
func WriteHTML(w io.Writer, r *ReportData) error {
	v := r.htmlView()
	return reportTmpl.Execute(w, v)
}

// frag is a piece of a sentence or a table cell: plain text, or a number
// from results.json shown as Text.
type frag struct {
	Text  string
	Ptr   string
	Scale float64
	Abs   bool
	Class string
}

// line is a sentence or a table cell made of fragments.
type line []frag

// lb builds a line.
type lb struct{ l line }

func (b *lb) t(s string) *lb { b.l = append(b.l, frag{Text: s}); return b }

func (b *lb) c(s, class string) *lb { b.l = append(b.l, frag{Text: s, Class: class}); return b }

// n adds a number shown with the given formatter, tagged with its JSON
// pointer. A value that is not finite is shown as a dash, untagged.
func (b *lb) n(ptr string, x Number, f numFmt) *lb {
	if !x.Finite() {
		b.l = append(b.l, frag{Text: "—"})
		return b
	}
	v := x.F()
	fr := frag{Ptr: ptr, Class: f.class}
	if f.abs {
		v = math.Abs(v)
		fr.Abs = true
	}
	if f.scale != 0 && f.scale != 1 {
		v *= f.scale
		fr.Scale = f.scale
	}
	fr.Text = f.format(v)
	b.l = append(b.l, fr)
	return b
}

func (b *lb) done() line { return b.l }

func newLine() *lb { return &lb{} }

func textLine(s string) line { return line{{Text: s}} }

// numFmt says how a number is shown.
type numFmt struct {
	decimals int
	scale    float64
	abs      bool
	sign     bool
	suffix   string
	class    string
	group    bool
}

var (
	fElast  = numFmt{decimals: 2}
	fAbs1   = numFmt{decimals: 1, abs: true, suffix: "%"}
	fPct0   = numFmt{decimals: 0, scale: 100, suffix: "%"}
	fPct1s  = numFmt{decimals: 1, scale: 100, suffix: "%", sign: true}
	fMoney  = numFmt{decimals: 2, group: true}
	fStat   = numFmt{decimals: 1, group: true}
	fCoef   = numFmt{decimals: 4}
	fInt    = numFmt{decimals: 0, group: true}
	fP      = numFmt{decimals: 3}
	fMoneyS = numFmt{decimals: 0, sign: true, group: true}
)

// format writes v with a typographic minus sign.
func (f numFmt) format(v float64) string {
	s := strconv.FormatFloat(v, 'f', f.decimals, 64)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	if f.group {
		s = groupThousands(s)
	}
	// A value that rounds to zero is shown without a sign.
	if strings.Trim(s, "0.,") == "" {
		neg = false
	}
	switch {
	case neg:
		s = "−" + s
	case f.sign && strings.Trim(s, "0.,") != "":
		s = "+" + s
	}
	return s + f.suffix
}

// groupThousands puts commas between groups of three digits of the
// integer part of an unsigned decimal.
func groupThousands(s string) string {
	intPart, frac, hasFrac := strings.Cut(s, ".")
	if len(intPart) <= 3 {
		return s
	}
	var b strings.Builder
	lead := len(intPart) % 3
	if lead > 0 {
		b.WriteString(intPart[:lead])
	}
	for i := lead; i < len(intPart); i += 3 {
		if b.Len() > 0 {
			b.WriteByte(',')
		}
		b.WriteString(intPart[i : i+3])
	}
	if hasFrac {
		b.WriteString("." + frac)
	}
	return b.String()
}

func ptr(parts ...any) string {
	var b strings.Builder
	for _, p := range parts {
		b.WriteByte('/')
		fmt.Fprint(&b, p)
	}
	return b.String()
}

// htmlView is what the template shows.
type htmlView struct {
	Title, Subtitle, Level string
	Missing                []Section
	KeyFigures             []keyFigure
	Products               []productSummary
	PooledLine             line
	ScreenLine             line
	WhatIfHead             []string
	WhatIfRows             [][]line
	WhatIfNote             line
	ShifterLines           []line
	Evidence               []evidenceBlock
	FigureProblems         []string
	Warnings               []string
	Assumptions            []string
	Cautions               []string
	Record                 []RecordRow
	Specs                  []UsedSpec
}

type keyFigure struct {
	Label string
	Value line
	Note  line
}

type productSummary struct {
	Name     string
	Headline line
	Lines    []line
	Flag     string // "card-good", "card-warn" or ""
}

// evidenceBlock is one part of the evidence: a heading, sentences,
// figures and tables.
type evidenceBlock struct {
	ID, Title string
	Intro     []line
	Figures   []Figure
	Tables    []htmlTable
}

type htmlTable struct {
	Caption string
	Head    []string
	Rows    [][]line
	// Numeric marks columns aligned right.
	Numeric []bool
	// Heat colours the cells of a matrix by value (cross-price).
	Heat [][]string
	// RowClass marks rows (the first row of a group).
	RowClass []string
	// Class is the table's class ("matrix" for the cross-price matrix).
	Class string
}

// RowCls returns the class of row i.
func (t htmlTable) RowCls(i int) string {
	if i < len(t.RowClass) {
		return t.RowClass[i]
	}
	return ""
}

// groupRows blanks repeated values of column 0 and marks the first row of
// each group.
func (t *htmlTable) groupRows() {
	t.RowClass = make([]string, len(t.Rows))
	prev := ""
	for i, row := range t.Rows {
		key := ""
		for _, f := range row[0] {
			key += f.Text
		}
		if i > 0 && key == prev {
			t.Rows[i][0] = nil
		} else if i > 0 {
			t.RowClass[i] = "group"
		}
		prev = key
	}
}

func (r *ReportData) htmlView() *htmlView {
	v := &htmlView{Title: r.Title, Level: r.levelText(), Warnings: r.Warnings, Assumptions: r.Assumptions, Cautions: r.Cautions,
		Specs: r.Record.Specs}
	for _, row := range r.Record.Rows() {
		if !row.Block() {
			v.Record = append(v.Record, row)
		}
	}
	var sub []string
	if r.Pooled != nil {
		sub = append(sub, fmt.Sprintf("%s · %s rows", r.Pooled.Source, fInt.format(float64(r.Pooled.N))))
	}
	if !r.Record.Started.IsZero() {
		sub = append(sub, r.Record.Started.Format("2 January 2006, 15:04 MST"))
	} else {
		sub = append(sub, time.Now().UTC().Format("2 January 2006"))
	}
	if r.Record.Program != "" {
		sub = append(sub, strings.TrimSpace(r.Record.Program+" "+r.Record.Version))
	}
	v.Subtitle = strings.Join(sub, " · ")
	for _, s := range r.Sections {
		if !s.Done {
			v.Missing = append(v.Missing, s)
		}
	}
	r.summaryView(v)
	r.evidenceView(v)
	return v
}

// pointers into results.json
func (r *ReportData) elastIndex(product, model string) int {
	for i, e := range r.Elasticities {
		if string(e.Product) == product && string(e.Model) == model {
			return i
		}
	}
	return -1
}

func (r *ReportData) markupIndex(product string) int {
	for i, m := range r.Markups {
		if string(m.Product) == product {
			return i
		}
	}
	return -1
}

// summaryView builds the one-minute summary.
func (r *ReportData) summaryView(v *htmlView) {
	// Key figures.
	if i := r.elastIndex("all products", "pooled"); i >= 0 {
		e := r.Elasticities[i]
		v.KeyFigures = append(v.KeyFigures, keyFigure{Label: "All products together",
			Value: newLine().n(ptr("elasticities", i, "elasticity"), e.Elasticity, fElast).done(),
			Note:  newLine().n("/level", Number(r.Level), fPct0).t(" band ").n(ptr("elasticities", i, "wald_low"), e.WaldLow, fElast).t(" to ").n(ptr("elasticities", i, "wald_high"), e.WaldHigh, fElast).done()})
	}
	nProd, nElastic := 0, 0
	for _, e := range r.Elasticities {
		if e.Model == "per product" && e.Elasticity.Finite() {
			nProd++
			if e.Reading == Text(Elastic.String()) {
				nElastic++
			}
		}
	}
	if nProd > 0 {
		v.KeyFigures = append(v.KeyFigures, keyFigure{Label: "Products estimated",
			Value: textLine(strconv.Itoa(nProd)),
			Note:  textLine(fmt.Sprintf("%d elastic beyond doubt (band below −1)", nElastic))})
	}
	if len(r.Shifters) > 0 {
		passed := 0
		for _, s := range r.Shifters {
			if s.Passed {
				passed++
			}
		}
		note := "every shifter check passed"
		if passed < len(r.Shifters) {
			note = fmt.Sprintf("%d did not pass: see below", len(r.Shifters)-passed)
		}
		v.KeyFigures = append(v.KeyFigures, keyFigure{Label: "Cost-shifter checks passed",
			Value: textLine(fmt.Sprintf("%d of %d", passed, len(r.Shifters))), Note: textLine(note)})
	}
	if len(r.Warnings) > 0 {
		v.KeyFigures = append(v.KeyFigures, keyFigure{Label: "Warnings to read",
			Value: textLine(strconv.Itoa(len(r.Warnings))), Note: textLine("listed under Read with care")})
	}

	// One card per product.
	for _, name := range r.productOrder() {
		i := r.elastIndex(name, "per product")
		if i < 0 {
			continue
		}
		e := r.Elasticities[i]
		ps := productSummary{Name: name}
		if !e.Elasticity.Finite() {
			ps.Headline = textLine("not estimated")
			ps.Lines = append(ps.Lines, textLine(string(e.Warnings)))
			ps.Flag = "card-warn"
			v.Products = append(v.Products, ps)
			continue
		}
		pe := func(f string) string { return ptr("elasticities", i, f) }
		ps.Headline = newLine().n(pe("elasticity"), e.Elasticity, fElast).done()
		words := newLine().c("A 1% higher price", "label").t(" goes with about ").n(pe("elasticity"), e.Elasticity, fAbs1)
		if e.Elasticity.F() < 0 {
			words.t(" fewer units sold")
		} else {
			words.t(" more units sold")
		}
		words.t(" (").n("/level", Number(r.Level), fPct0).t(" band ").n(pe("wald_low"), e.WaldLow, fElast).t(" to ").n(pe("wald_high"), e.WaldHigh, fElast).t(").")
		ps.Lines = append(ps.Lines, words.done())
		sure := newLine()
		switch Classify(e.Elasticity.F(), e.WaldLow.F(), e.WaldHigh.F()) {
		case Elastic:
			sure.c("Elastic beyond doubt", "good").t(": the whole band lies below −1")
			ps.Flag = "card-good"
		case Unsettled:
			sure.c("Probably elastic", "warn").t(", but the band reaches −1")
			ps.Flag = "card-warn"
		case Inelastic:
			sure.c("Inelastic", "bad").t(": no margin follows from this estimate")
			ps.Flag = "card-warn"
		default:
			sure.c("Implausible", "bad").t(": a positive elasticity is not a demand response")
			ps.Flag = "card-warn"
		}
		w := e.WaldHigh.F() - e.WaldLow.F()
		switch rel := w / math.Abs(e.Elasticity.F()); {
		case rel < 0.25:
			sure.t("; the estimate is precise")
		case rel < 0.6:
			sure.t("; the estimate is fairly precise")
		default:
			sure.t("; the estimate is imprecise")
		}
		if e.ARBand != "" {
			if differsAR(e) {
				if e.ARLow.Finite() && e.ARHigh.Finite() && !strings.Contains(string(e.ARBand), " or ") {
					sure.t("; the weak-instrument-robust band is wider: ").n(pe("ar_low"), e.ARLow, fElast).t(" to ").n(pe("ar_high"), e.ARHigh, fElast)
				} else {
					sure.t("; the weak-instrument-robust set is not one bounded interval (see the table)")
				}
			} else {
				sure.t(", and the weak-instrument-robust band agrees")
			}
		}
		sure.t(".")
		ps.Lines = append(ps.Lines, sure.done())
		if j := r.markupIndex(name); j >= 0 {
			m := r.Markups[j]
			pm := func(f string) string { return ptr("markups", j, f) }
			if m.Lerner.Finite() {
				ml := newLine().t("Implied margin ").n(pm("lerner"), m.Lerner, fPct0).t(" of the price (").
					n(pm("lerner_low"), m.LernerLow, fPct0).t(" to ").n(pm("lerner_high"), m.LernerHigh, fPct0).t(")")
				if m.ProfitMaxPrice.Finite() {
					ml.t("; at a unit cost of ").n(pm("unit_cost"), m.UnitCost, fMoney).t(" profit is highest at a price of ").
						n(pm("profit_max_price"), m.ProfitMaxPrice, fMoney).t(" (").n(pm("profit_max_price_low"), m.ProfitMaxPriceLow, fMoney).
						t(" to ").n(pm("profit_max_price_high"), m.ProfitMaxPriceHigh, fMoney).t("); today's ").
						n(pm("price"), m.Price, fMoney)
					// Compared at the cent shown, so that "3.40" is not
					// called below a band starting at "3.40".
					switch p := m.Price.F(); {
					case p < m.ProfitMaxPriceLow.F()-0.005:
						ml.t(" is ").c("below that band", "warn")
					case p > m.ProfitMaxPriceHigh.F()+0.005:
						ml.t(" is ").c("above that band", "warn")
					default:
						ml.t(" lies inside it")
					}
				} else {
					ml.t(" at today's price of ").n(pm("price"), m.Price, fMoney)
				}
				ml.t(".")
				ps.Lines = append(ps.Lines, ml.done())
			} else if m.Caution != "" {
				ps.Lines = append(ps.Lines, textLine("No margin is read from this estimate (see Read with care)."))
			}
		}
		if sl := r.shifterLine(name); sl != nil {
			ps.Lines = append(ps.Lines, sl)
		}
		v.Products = append(v.Products, ps)
	}
	if sl := r.shifterLine("pooled"); sl != nil {
		v.PooledLine = sl
	}
	if len(r.Screen) > 0 {
		best := r.Screen[0]
		b := newLine().t("Screen of the candidate shifters: the best combination is "+string(best.Shifters)+" (").c(string(best.Verdict), map[bool]string{true: "good", false: "warn"}[best.Verdict == "solid"]).t(")")
		// Candidates flagged in every combination that holds them.
		var flagged []string
		if si := r.ScreenInfo; si != nil {
			for _, c := range si.Candidates {
				all, has := true, false
				for _, x := range r.Screen {
					if !containsString(strings.Split(string(x.Shifters), ", "), c) {
						continue
					}
					has = true
					if x.Verdict != "suspect" && x.Verdict != "wrong-sign" {
						all = false
					}
				}
				if has && all {
					flagged = append(flagged, c)
				}
			}
		}
		if len(flagged) > 0 {
			b.t("; every combination with ").c(strings.Join(flagged, ", "), "bad").t(" was flagged (its shifters disagree about the elasticity, or a sign is wrong): do not use it as an instrument")
		}
		b.t(".")
		v.ScreenLine = b.done()
	}

	// What-ifs: one row per scenario.
	idx := map[string]int{}
	var order []string
	for i, w := range r.WhatIfs {
		s := string(w.Scenario)
		if w.Product == WholeLine {
			idx[s] = i
			order = append(order, s)
		}
	}
	if len(order) > 0 {
		v.WhatIfHead = []string{"price move", "units of the product moved", "units of the line", "revenue of the line", "contribution of the line"}
		for _, s := range order {
			t, ok := idx[s]
			if !ok {
				continue
			}
			tot := r.WhatIfs[t]
			moved := newLine()
			for i, w := range r.WhatIfs {
				if string(w.Scenario) == s && w.Moved {
					if len(moved.l) > 0 {
						moved.t("; ")
					}
					moved.n(ptr("what_ifs", i, "units_change"), w.UnitsChange, fPct1s)
					inlineBand(moved, ptr("what_ifs", i, "units_change_low"), w.UnitsChangeLow, ptr("what_ifs", i, "units_change_high"), w.UnitsChangeHigh, fPct1s)
				}
			}
			row := []line{
				{{Text: scenarioLabel(s), Class: "label"}},
				moved.done(),
				newLine().n(ptr("what_ifs", t, "units_change"), tot.UnitsChange, fPct1s).done(),
				newLine().n(ptr("what_ifs", t, "revenue_change"), tot.Revenue, fMoneyS).done(),
				inlineBand(newLine().n(ptr("what_ifs", t, "contribution_change"), tot.Contribution, fMoneyS),
					ptr("what_ifs", t, "contribution_change_low"), tot.ContributionLow, ptr("what_ifs", t, "contribution_change_high"), tot.ContributionHigh, fMoneyS).done(),
			}
			v.WhatIfRows = append(v.WhatIfRows, row)
		}
		per := ""
		for _, m := range r.Markups {
			if m.UnitsPeriod != "" {
				per = string(m.UnitsPeriod)
				break
			}
		}
		band := ""
		if len(r.WhatIfs) > 0 {
			band = string(r.WhatIfs[0].Band)
		}
		v.WhatIfNote = newLine().t(fmt.Sprintf("Changes %s against today, in money of the price column; ", per)).n("/level", Number(r.Level), fPct0).
			t(fmt.Sprintf(" bands in brackets (%s). Each row moves the named price alone; the other prices stay where they are.", band)).done()
	}
}

// productOrder lists the products of the per-product table in its order.
func (r *ReportData) productOrder() []string {
	var out []string
	for _, e := range r.Elasticities {
		if e.Model == "per product" {
			out = append(out, string(e.Product))
		}
	}
	return out
}

// shifterLine says which shifters identify a model and whether they
// passed.
func (r *ReportData) shifterLine(model string) line {
	b := newLine()
	var names, failed []string
	for _, s := range r.Shifters {
		if string(s.Model) != model {
			continue
		}
		names = append(names, string(s.Shifter))
		if !s.Passed {
			failed = append(failed, string(s.Shifter))
		}
	}
	if len(names) == 0 {
		return nil
	}
	who := "Identified by "
	if model == "pooled" {
		who = "The pooled model is identified by "
	}
	b.t(who + strings.Join(names, ", ") + ": ")
	switch {
	case len(failed) == 0 && len(names) == 1:
		b.c("passed", "good").t(" (it raises price as a cost should, strongly).")
	case len(failed) == 0:
		b.c("all passed", "good").t(" (they raise price as costs should, strongly, and agree with each other).")
	default:
		b.c(strings.Join(failed, ", ")+" did not pass", "bad").t(" (see the shifter table).")
	}
	return b.done()
}

// evidenceView builds the evidence blocks with their figures and tables.
func (r *ReportData) evidenceView(v *htmlView) {
	figs, problems := r.Figures()
	v.FigureProblems = problems
	byID := map[string]Figure{}
	for _, f := range figs {
		byID[f.ID] = f
	}
	pick := func(ids ...string) []Figure {
		var out []Figure
		for _, id := range ids {
			if f, ok := byID[id]; ok {
				out = append(out, f)
			}
		}
		return out
	}
	lv := r.levelText()

	// Elasticities.
	if len(r.Elasticities) > 0 {
		t := htmlTable{Caption: "Own-price elasticities; bands at " + lv,
			Head:    []string{"product", "model", "rows", "elasticity", "Wald band", "Anderson-Rubin band", "first-stage F", "effective F", "reading"},
			Numeric: []bool{false, false, true, true, true, true, true, true, false}}
		for i, e := range r.Elasticities {
			p := func(f string) string { return ptr("elasticities", i, f) }
			band := newLine().n(p("wald_low"), e.WaldLow, fElast).t(" to ").n(p("wald_high"), e.WaldHigh, fElast)
			t.Rows = append(t.Rows, []line{textLine(string(e.Product)), textLine(string(e.Model)),
				newLine().n(p("rows"), Number(e.Rows), fInt).done(), newLine().n(p("elasticity"), e.Elasticity, fElast).done(),
				band.done(), arCell(e, p),
				newLine().n(p("first_stage_f"), e.FirstStageF, fStat).done(), newLine().n(p("effective_f"), e.EffectiveF, fStat).done(),
				textLine(string(e.Reading))})
		}
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-elasticities", Title: "How strongly each product's sales respond to its price",
			Figures: pick("elasticities", "demand-curves"), Tables: []htmlTable{t}})
	}

	// Margins.
	if len(r.Markups) > 0 {
		t := htmlTable{Caption: "Margins at today's prices (inverse-elasticity rule; " + lv + " bands in small type; product-line margins use the cross-price matrix)",
			Head:    []string{"product", "price today", "unit cost", "elasticity", "implied margin", "implied marginal cost", "profit-maximising price", "product-line margin"},
			Numeric: []bool{false, true, true, true, true, true, true, true}}
		for i, m := range r.Markups {
			p := func(f string) string { return ptr("markups", i, f) }
			t.Rows = append(t.Rows, []line{textLine(string(m.Product)),
				newLine().n(p("price"), m.Price, fMoney).done(), newLine().n(p("unit_cost"), m.UnitCost, fMoney).done(),
				newLine().n(p("elasticity"), m.Elasticity, fElast).done(),
				withBand(newLine().n(p("lerner"), m.Lerner, fPct0), p("lerner_low"), m.LernerLow, p("lerner_high"), m.LernerHigh, fPct0),
				withBand(newLine().n(p("implied_marginal_cost"), m.MarginalCost, fMoney), p("implied_marginal_cost_low"), m.MarginalCostLow, p("implied_marginal_cost_high"), m.MarginalCostHigh, fMoney),
				withBand(newLine().n(p("profit_max_price"), m.ProfitMaxPrice, fMoney), p("profit_max_price_low"), m.ProfitMaxPriceLow, p("profit_max_price_high"), m.ProfitMaxPriceHigh, fMoney),
				withBand(newLine().n(p("line_lerner"), m.LineLerner, fPct0), p("line_lerner_low"), m.LineLernerLow, p("line_lerner_high"), m.LineLernerHigh, fPct0)})
		}
		var intro []line
		if len(r.Markups) > 0 {
			m := r.Markups[0]
			intro = append(intro, textLine(fmt.Sprintf("Prices: %s. Unit costs: %s. Units: %s.", orDefault(string(m.PriceSource), "not known"), orDefault(string(m.CostSource), "not known"), orDefault(string(m.UnitsPeriod), "not known"))))
		}
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-margins", Title: "What margins the elasticities imply", Intro: intro,
			Figures: pick("contribution"), Tables: []htmlTable{t}})
	}

	// Cross-price matrix.
	if ci := r.CrossInfo; ci != nil && len(r.Cross) > 0 {
		n := len(ci.Products)
		t := htmlTable{Caption: "Row: units of the product; column: price of the product. Own-price elasticities on the diagonal; " + lv + " Wald band under each estimate.",
			Head: append([]string{"units ↓ price →"}, ci.Products...), Class: "matrix"}
		t.Numeric = make([]bool, n+1)
		for j := 1; j <= n; j++ {
			t.Numeric[j] = true
		}
		for i := range n {
			row := []line{textLine(ci.Products[i])}
			heat := []string{""}
			for j := range n {
				k := i*n + j
				c := r.Cross[k]
				row = append(row, withBand(newLine().n(ptr("cross_price", k, "elasticity"), c.Elasticity, fElast),
					ptr("cross_price", k, "wald_low"), c.WaldLow, ptr("cross_price", k, "wald_high"), c.WaldHigh, fElast))
				heat = append(heat, heatClass(c))
			}
			t.Rows = append(t.Rows, row)
			t.Heat = append(t.Heat, heat)
		}
		intro := []line{textLine(fmt.Sprintf("Each product's equation uses the %d %s × %s keys where all %d products are priced (of %d). Product-specific shifters: %s; common shifters: %s; %d instruments for %d prices. Errors: %s.",
			ci.Complete, ci.Unit, ci.Time, n, ci.Keys, orDefault(strings.Join(ci.Specific, ", "), "none"), orDefault(strings.Join(ci.Common, ", "), "none"), ci.Instruments, n, ci.VcovDetail))}
		if ci.Bootstrap > 0 {
			intro = append(intro, textLine(fmt.Sprintf("What-if and product-line bands use %d joint bootstrap draws of the whole matrix.", ci.Bootstrap)))
		}
		intro = append(intro, textLine("Green cells: substitutes whose band lies above zero (a higher price of the column product lifts the row product's sales). Red: complements whose band lies below zero. Pale: not distinguishable from zero."))
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-cross", Title: "How products take sales from each other", Intro: intro, Tables: []htmlTable{t}})
	}

	// What-ifs in detail: units change of every product under each move.
	if len(r.WhatIfs) > 0 {
		var products []string
		seen := map[string]bool{}
		var scen []string
		for _, w := range r.WhatIfs {
			if w.Product != WholeLine && !seen[string(w.Product)] {
				seen[string(w.Product)] = true
				products = append(products, string(w.Product))
			}
			if len(scen) == 0 || scen[len(scen)-1] != string(w.Scenario) {
				scen = append(scen, string(w.Scenario))
			}
		}
		t := htmlTable{Caption: "Change in units of each product (columns) under each price move (rows)",
			Head: append(append([]string{"price move"}, products...), WholeLine)}
		t.Numeric = make([]bool, len(t.Head))
		for j := 1; j < len(t.Head); j++ {
			t.Numeric[j] = true
		}
		for _, s := range scen {
			row := []line{textLine(scenarioLabel(s))}
			for _, p := range append(append([]string(nil), products...), WholeLine) {
				cell := textLine("—")
				for i, w := range r.WhatIfs {
					if string(w.Scenario) == s && string(w.Product) == p {
						b := newLine().n(ptr("what_ifs", i, "units_change"), w.UnitsChange, fPct1s)
						if w.Moved {
							b.l[len(b.l)-1].Class = "moved"
						}
						if w.Extrapolated {
							b.t(" *")
						}
						cell = b.done()
					}
				}
				row = append(row, cell)
			}
			t.Rows = append(t.Rows, row)
		}
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-whatifs", Title: "What the price moves do to every product",
			Intro: []line{textLine("Bold: the product whose price moves. Revenue and contribution of every product, with bands, are in the workbook (sheet what_ifs).")}, Tables: []htmlTable{t}})
	}

	// Shifters.
	if len(r.Shifters) > 0 {
		t := htmlTable{Caption: "Each cost shifter in each model: its first-stage effect on price and the verdict",
			Head:    []string{"model", "shifter", "effect on price", "t", "partial R²", "sign", "model F", "effective F (critical)", "verdict"},
			Numeric: []bool{false, false, true, true, true, false, true, true, false}}
		for i, s := range r.Shifters {
			p := func(f string) string { return ptr("shifters", i, f) }
			eff := newLine().n(p("effective_f"), s.EffectiveF, fStat)
			if s.EffectiveCritical.Finite() {
				eff.t(" (").n(p("effective_f_critical"), s.EffectiveCritical, fStat).t(")")
			}
			verdict := newLine()
			if s.Passed {
				verdict.c("passed", "good")
			} else {
				verdict.c(string(s.Verdict), "bad")
			}
			t.Rows = append(t.Rows, []line{textLine(string(s.Model)), textLine(string(s.Shifter)),
				newLine().n(p("coefficient"), s.Coefficient, fCoef).done(), newLine().n(p("t"), s.T, fStat).done(),
				newLine().n(p("partial_r2"), s.PartialR2, numFmt{decimals: 1, scale: 100, suffix: "%"}).done(),
				textLine(string(s.SignCheck)), newLine().n(p("model_first_stage_f"), s.ModelF, fStat).done(), eff.done(), verdict.done()})
		}
		tt := r.testsMatrix()
		t.groupRows()
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-shifters", Title: "Why the cost shifters can be trusted (or not)",
			Intro:   []line{textLine("A cost shifter identifies the elasticity when it moves price through cost, strongly, and does not move demand itself. The first two pictures show the movement; the tables give the tests.")},
			Figures: pick("first-stage", "first-stage-products", "grouped"), Tables: []htmlTable{t, tt}})
	}

	// Screen of candidate shifters.
	if si := r.ScreenInfo; si != nil && len(r.Screen) > 0 {
		t := htmlTable{Caption: "Every combination of the candidates, best first (2SLS on the same rows; candidates left out of a combination stay in as controls)",
			Head:    []string{"rank", "shifters", "verdict", "effective F (critical)", "Hansen J p-value", "elasticity", "Anderson-Rubin band", "why"},
			Numeric: []bool{true, false, false, true, true, true, true, false}}
		for i, x := range r.Screen {
			p := func(f string) string { return ptr("screen", i, f) }
			cls := "bad"
			switch x.Verdict {
			case "solid":
				cls = "good"
			case "usable", "weak":
				cls = "warn"
			}
			eff := newLine().n(p("effective_f"), x.EffectiveF, fStat)
			if x.Critical.Finite() {
				eff.t(" (").n(p("effective_f_critical"), x.Critical, fStat).t(")")
			}
			jp := newLine()
			switch {
			case !x.HansenJP.Finite():
				jp.t("—")
			case x.HansenJP.F() < 0.001:
				jp.t("< 0.001")
			default:
				jp.n(p("hansen_j_p"), x.HansenJP, fP)
			}
			ar := newLine()
			if x.ARLow.Finite() && x.ARHigh.Finite() {
				ar.n(p("ar_low"), x.ARLow, fElast).t(" to ").n(p("ar_high"), x.ARHigh, fElast)
			} else {
				ar.t(string(x.ARShape))
			}
			t.Rows = append(t.Rows, []line{newLine().n(p("rank"), Number(x.Rank), fInt).done(), textLine(string(x.Shifters)),
				line{{Text: string(x.Verdict), Class: cls}}, eff.done(), jp.done(),
				withBand(newLine().n(p("elasticity"), x.Elasticity, fElast), p("wald_low"), x.WaldLow, p("wald_high"), x.WaldHigh, fElast),
				ar.done(), textLine(string(x.Reasons))})
		}
		t.Class = "screen"
		intro := []line{textLine(fmt.Sprintf("Candidates screened: %s, alone and in combinations (%d in all), on the %s rows where every candidate is present.",
			strings.Join(si.Candidates, ", "), si.Combinations, fInt.format(float64(si.N))))}
		if si.Rule != "" {
			intro = append(intro, textLine(si.Rule))
		}
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-screen", Title: "Which cost shifters to use", Intro: intro, Tables: []htmlTable{t}})
	}

	// Pooled model terms.
	if r.Pooled != nil && len(r.Terms) > 0 {
		t := htmlTable{Caption: fmt.Sprintf("%s of %s (%s demand); %s; %s", strings.ToUpper(r.Pooled.Estimator), r.Pooled.Outcome, r.Pooled.Form, r.Pooled.VcovDetail, r.Pooled.SmallSample),
			Head: []string{"term", "estimate", "standard error", "band", "p-value"}, Numeric: []bool{false, true, true, true, true}}
		for i, x := range r.Terms {
			p := func(f string) string { return ptr("pooled_terms", i, f) }
			pv := newLine()
			if x.PValue.Finite() && x.PValue.F() < 0.001 {
				pv.t("< 0.001")
			} else {
				pv.n(p("p_value"), x.PValue, fP)
			}
			t.Rows = append(t.Rows, []line{textLine(string(x.Term)), newLine().n(p("estimate"), x.Estimate, fCoef).done(),
				newLine().n(p("std_error"), x.StdError, fCoef).done(),
				newLine().n(p("low"), x.Low, fCoef).t(" to ").n(p("high"), x.High, fCoef).done(), pv.done()})
		}
		var intro []line
		intro = append(intro, textLine(fmt.Sprintf("Shifters: %s. Controls: %s. Absorbed: %s.", orDefault(strings.Join(r.Pooled.Shifters, ", "), "none"), orDefault(strings.Join(r.Pooled.Controls, ", "), "none"), orDefault(strings.Join(r.Pooled.FE, ", "), "none"))))
		if len(r.Pooled.Dropped) > 0 {
			intro = append(intro, textLine("Rows left out: "+strings.Join(r.Pooled.Dropped, "; ")+"."))
		}
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-pooled", Title: "The pooled model in full", Intro: intro, Tables: []htmlTable{t}})
	}

	// Known truth (demo).
	if len(r.Truth) > 0 {
		t := htmlTable{Caption: "Estimates against the values the demo market was generated with",
			Head: []string{"product", "what", "true value", "estimate", "band", "band covers the truth"}, Numeric: []bool{false, false, true, true, true, false}}
		for i, x := range r.Truth {
			p := func(f string) string { return ptr("demo_truth", i, f) }
			cov := newLine()
			if x.Covered {
				cov.c("yes", "good")
			} else {
				cov.c("no", "bad")
			}
			t.Rows = append(t.Rows, []line{textLine(string(x.Product)), textLine(string(x.What)),
				newLine().n(p("true_value"), x.TrueValue, fElast).done(), newLine().n(p("estimate"), x.Estimate, fElast).done(),
				newLine().n(p("low"), x.Low, fElast).t(" to ").n(p("high"), x.High, fElast).done(), cov.done()})
		}
		v.Evidence = append(v.Evidence, evidenceBlock{ID: "ev-truth", Title: "Checked against the truth (demo market only)",
			Intro:  []line{textLine("The demo market is invented, so the true elasticities are known. About one band in twenty may miss its true value by chance.")},
			Tables: []htmlTable{t}})
	}
}

// Cls returns the class of cell (i, j) (the heat of a matrix cell).
func (t htmlTable) Cls(i, j int) string {
	if i < len(t.Heat) && j < len(t.Heat[i]) {
		return t.Heat[i][j]
	}
	return ""
}

// arCell shows the Anderson-Rubin set of a row: as a band when it is one
// interval, in words otherwise.
func arCell(e ElasticityRow, p func(string) string) line {
	switch {
	case e.ARBand == "":
		return textLine("—")
	case e.ARLow.Finite() && e.ARHigh.Finite() && !strings.Contains(string(e.ARBand), " or "):
		return newLine().n(p("ar_low"), e.ARLow, fElast).t(" to ").n(p("ar_high"), e.ARHigh, fElast).done()
	}
	return textLine(string(e.ARBand))
}

// withBand adds a band in small type under a number, when both ends are
// known.
func withBand(b *lb, pLo string, lo Number, pHi string, hi Number, f numFmt) line {
	if lo.Finite() && hi.Finite() {
		b.l = append(b.l, frag{Text: " ", Class: ""})
		b.l = append(b.l, frag{Text: "", Class: "band-open"})
		b.n(pLo, lo, f).t(" to ").n(pHi, hi, f)
		b.l = append(b.l, frag{Text: "", Class: "band-close"})
	}
	return b.done()
}

// inlineBand adds " (lo to hi)" in small type after a number.
func inlineBand(b *lb, pLo string, lo Number, pHi string, hi Number, f numFmt) *lb {
	if !lo.Finite() || !hi.Finite() {
		return b
	}
	b.t(" ")
	b.l = append(b.l, frag{Class: "band-open"})
	b.t("(").n(pLo, lo, f).t(" to ").n(pHi, hi, f).t(")")
	b.l = append(b.l, frag{Class: "band-close"})
	return b
}

// scenarioLabel shows a what-if as "Product +5%".
func scenarioLabel(s string) string {
	parts := strings.Split(s, ";")
	for i, p := range parts {
		p = strings.TrimSpace(p)
		if k := strings.LastIndexByte(p, '='); k >= 0 {
			p = strings.TrimSpace(p[:k]) + " " + strings.TrimSpace(p[k+1:])
		}
		parts[i] = p
	}
	return strings.Join(parts, "; ")
}

// testsMatrix lays the shifter tests out with one row per test and one
// column per model: each cell the statistic, marked by whether it speaks
// for the shifters (p-values, distributions and critical values are in
// the workbook's shifter_tests sheet).
func (r *ReportData) testsMatrix() htmlTable {
	var models, tests []string
	at := map[[2]string]int{}
	for i, x := range r.Tests {
		m, name := string(x.Model), string(x.Test)
		if name == "over-identification" {
			name = "Hansen J (do the shifters agree?)"
		}
		if !containsString(models, m) {
			models = append(models, m)
		}
		if !containsString(tests, name) {
			tests = append(tests, name)
		}
		at[[2]string{name, m}] = i
	}
	t := htmlTable{Caption: "Tests of the shifters, model by model: green speaks for the shifters, red against; compare-with values, p-values and sentences are in the workbook (sheet shifter_tests)",
		Head: append([]string{"test"}, models...), Class: "tests"}
	t.Numeric = make([]bool, len(t.Head))
	for j := 1; j < len(t.Head); j++ {
		t.Numeric[j] = true
	}
	for _, name := range tests {
		row := []line{textLine(name)}
		heat := []string{""}
		for _, m := range models {
			i, ok := at[[2]string{name, m}]
			if !ok {
				row = append(row, textLine("—"))
				heat = append(heat, "")
				continue
			}
			x := r.Tests[i]
			switch {
			case !x.Statistic.Finite():
				row = append(row, line{{Text: "not testable", Class: "warn"}})
				heat = append(heat, "")
			case x.Passed:
				row = append(row, newLine().n(ptr("shifter_tests", i, "statistic"), x.Statistic, fStat).done())
				heat = append(heat, "pass")
			default:
				row = append(row, newLine().n(ptr("shifter_tests", i, "statistic"), x.Statistic, fStat).done())
				heat = append(heat, "fail")
			}
		}
		t.Rows = append(t.Rows, row)
		t.Heat = append(t.Heat, heat)
	}
	return t
}

func containsString(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// heatClass colours a cross-price cell: the diagonal, substitutes and
// complements whose band excludes zero, or neither.
func heatClass(c CrossRow) string {
	switch {
	case c.Own:
		return "own"
	case c.WaldLow.Finite() && c.WaldLow.F() > 0:
		return "sub"
	case c.WaldHigh.Finite() && c.WaldHigh.F() < 0:
		return "comp"
	}
	return "none"
}
