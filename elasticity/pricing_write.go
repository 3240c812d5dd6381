package elasticity

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// PricingReport gathers margins and a what-if for output.
type PricingReport struct {
	// Level is the band level.
	Level float64
	// Markups are the single-product margins at current prices.
	Markups []Markup
	// Line holds product-line margins (nil when not computed), and
	// LineNote says why they are missing.
	Line     *LineResult
	LineNote string
	// Simulation is the what-if (nil when none).
	Simulation *Simulation
	// Notes are further remarks on the inputs.
	Notes []string
}

// Cautions returns everything that must be read with the report: the
// what-if's extrapolation warnings and assumption, the reasons margins are
// withheld, notes, and the general Cautions, in that order.
func (r *PricingReport) Cautions() []string {
	var c []string
	if s := r.Simulation; s != nil {
		c = append(c, s.Warnings...)
		c = append(c, s.Assumption)
		c = append(c, s.Notes...)
	}
	// Each withheld margin gets its own sentence; the usual reasons are
	// listed once, after them.
	reasons := ""
	for _, m := range r.Markups {
		if m.Caution == "" {
			continue
		}
		head, tail, found := strings.Cut(m.Caution, " Usual reasons for such an estimate:")
		c = append(c, head)
		if found {
			reasons = "Usual reasons for an estimate that is not clearly elastic:" + tail
		}
	}
	if reasons != "" {
		c = append(c, reasons)
	}
	if r.Line != nil {
		for _, l := range r.Line.Rows {
			if l.Caution != "" {
				c = append(c, l.Caution)
			}
		}
	}
	if r.LineNote != "" {
		c = append(c, r.LineNote)
	}
	c = append(c, r.Notes...)
	return append(c, Cautions...)
}

// WritePricing writes a pricing report as text, json, csv or markdown.
func WritePricing(w io.Writer, r *PricingReport, format string) error {
	return writeFormat(w, format, r.jsonReport(), writers{
		text: func(w io.Writer) error {
			_, err := io.WriteString(w, r.text())
			return err
		},
		csv:      func(w io.Writer) error { return writePricingCSV(w, r) },
		markdown: func(w io.Writer) error { return writePricingMarkdown(w, r) },
	})
}

// numKind says how a number is written.
type numKind int

const (
	kLevel  numKind = iota // units, money: decimals by size
	kChange                // a signed change: decimals by size
	kPct                   // a signed percentage, one decimal
	kRatio                 // a share such as the Lerner index, three decimals
	kElast                 // an elasticity, two decimals
)

// decimals returns the number of decimals for a level quantity of the
// size of x: 0 from 1000, 1 from 100, 2 below.
func decimals(x float64) int {
	switch a := math.Abs(x); {
	case a >= 1000:
		return 0
	case a >= 100:
		return 1
	}
	return 2
}

// fmtNum writes x of kind k; d is the decimals of kLevel and kChange.
func fmtNum(x float64, k numKind, d int) string {
	switch {
	case math.IsNaN(x):
		return "—"
	case math.IsInf(x, 1):
		return "+∞"
	case math.IsInf(x, -1):
		return "-∞"
	}
	switch k {
	case kPct:
		return fmt.Sprintf("%+.1f%%", x)
	case kRatio:
		d = 3
	case kElast:
		d = 2
	}
	s := strconv.FormatFloat(x, 'f', d, 64)
	if k == kChange && !strings.HasPrefix(s, "-") {
		s = "+" + s
	}
	return s
}

// bandText writes an interval as "est (lo to hi)", all three with the
// decimals suited to the estimate, or the estimate alone without a band.
func bandText(iv Interval, k numKind) string {
	if math.IsNaN(iv.Est) {
		return "—"
	}
	d := decimals(iv.Est)
	if math.IsNaN(iv.Lo) && math.IsNaN(iv.Hi) {
		return fmtNum(iv.Est, k, d)
	}
	return fmt.Sprintf("%s (%s to %s)", fmtNum(iv.Est, k, d), fmtNum(iv.Lo, k, d), fmtNum(iv.Hi, k, d))
}

func (r *PricingReport) level() string {
	if r.Level > 0 && r.Level < 1 {
		return pct(r.Level)
	}
	return "95%"
}

func (r *PricingReport) text() string {
	var b strings.Builder
	if s := r.Simulation; s != nil {
		fmt.Fprintf(&b, "WHAT IF THE PRICES MOVE  (per period; %s bands: %s)\n", r.level(), s.Band)
		for _, row := range s.Rows {
			move := "unchanged"
			if row.Changed {
				move = fmt.Sprintf("%s → %s (%s)", money(row.Price), money(row.NewPrice), fmtNum(row.PriceChangePct, kPct, 1))
				if row.Extrapolated {
					move += "  outside the observed prices"
				}
			} else {
				move = money(row.Price) + " unchanged"
			}
			fmt.Fprintf(&b, "\n%s   price %s\n", row.Product, move)
			simLine(&b, "units", row.UnitsChange, row.UnitsPct)
			simLine(&b, "revenue", row.RevenueChange, row.RevenuePct)
			if !math.IsNaN(row.ContributionChange.Est) || !math.IsNaN(row.ContributionPct.Est) {
				simLine(&b, "contribution", row.ContributionChange, row.ContributionPct)
			}
		}
		t := s.Total
		if !math.IsNaN(t.RevenueChange.Est) && len(s.Rows) > 1 {
			b.WriteString("\nwhole line\n")
			simLine(&b, "units", t.UnitsChange, t.UnitsPct)
			simLine(&b, "revenue", t.RevenueChange, t.RevenuePct)
			if !math.IsNaN(t.ContributionChange.Est) {
				simLine(&b, "contribution", t.ContributionChange, t.ContributionPct)
			}
		}
		b.WriteString("\n")
	}
	if len(r.Markups) > 0 {
		band := r.Markups[0].Band
		fmt.Fprintf(&b, "MARGINS AT CURRENT PRICES  (inverse-elasticity rule; bands carried over from the %s %s band of each elasticity)\n", r.level(), band)
		for _, m := range r.Markups {
			fmt.Fprintf(&b, "\n%s   price %s   elasticity %s\n", m.Product, money(m.Price), bandText(m.Elasticity, kElast))
			if m.Regime != Elastic {
				fmt.Fprintf(&b, "    no margin shown: %s (see READ WITH CARE)\n", m.Regime)
				continue
			}
			se := func(x float64) string {
				if math.IsNaN(x) {
					return ""
				}
				return "   s.e. " + strconv.FormatFloat(x, 'f', 3, 64)
			}
			fmt.Fprintf(&b, "    %-15s %-26s%s\n", "Lerner index", bandText(m.Lerner, kRatio), se(m.LernerSE))
			fmt.Fprintf(&b, "    %-15s %-26s%s\n", "marginal cost", bandText(m.MarginalCost, kLevel), se(m.MarginalCostSE))
			if !math.IsNaN(m.ProfitMaxPrice.Est) {
				fmt.Fprintf(&b, "    %-15s %-26s%s   at the unit cost %s\n", "best price", bandText(m.ProfitMaxPrice, kLevel), se(m.ProfitMaxPriceSE), money(m.UnitCost))
			}
		}
		b.WriteString("\n")
	}
	if l := r.Line; l != nil {
		fmt.Fprintf(&b, "PRODUCT-LINE MARGINS  (each owner prices its products together, using the cross-price elasticities")
		if l.Draws > 0 {
			fmt.Fprintf(&b, "; %s bands from %d draws", r.level(), l.Draws)
		}
		b.WriteString(")\n")
		w := 7
		for _, row := range l.Rows {
			w = max(w, len([]rune(row.Product)))
		}
		fmt.Fprintf(&b, "    %-*s  %-12s  %-24s  %s\n", w, "product", "owner", "Lerner index", "marginal cost")
		for _, row := range l.Rows {
			owner := row.Owner
			if owner == "" {
				owner = "(one owner)"
			}
			if row.Caution != "" {
				fmt.Fprintf(&b, "    %-*s  %-12s  no margin shown: not consistent with profit maximisation (see READ WITH CARE)\n", w, row.Product, owner)
				continue
			}
			fmt.Fprintf(&b, "    %-*s  %-12s  %-24s  %s\n", w, row.Product, owner, bandText(row.Lerner, kRatio), bandText(row.MarginalCost, kLevel))
		}
		b.WriteString("\n")
	}
	b.WriteString("READ WITH CARE\n")
	for i, c := range r.Cautions() {
		fmt.Fprintf(&b, "  %d. %s\n", i+1, c)
	}
	return b.String()
}

func simLine(b *strings.Builder, what string, level, pc Interval) {
	fmt.Fprintf(b, "    %-13s %-30s %s\n", what, bandText(level, kChange), bandText(pc, kPct))
}

// jnum is a number for JSON: nil for NaN and infinities.
func jnum(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

type jInterval struct {
	Estimate *float64 `json:"estimate"`
	Low      *float64 `json:"low,omitempty"`
	High     *float64 `json:"high,omitempty"`
}

func jiv(iv Interval) *jInterval {
	if math.IsNaN(iv.Est) {
		return nil
	}
	return &jInterval{jnum(iv.Est), jnum(iv.Lo), jnum(iv.Hi)}
}

type jMarkup struct {
	Product          string     `json:"product"`
	Price            *float64   `json:"price"`
	UnitCost         *float64   `json:"unit_cost,omitempty"`
	Elasticity       *jInterval `json:"elasticity"`
	ElasticitySE     *float64   `json:"elasticity_std_error,omitempty"`
	Band             string     `json:"band"`
	Regime           string     `json:"regime"`
	Lerner           *jInterval `json:"lerner,omitempty"`
	LernerSE         *float64   `json:"lerner_std_error,omitempty"`
	MarginalCost     *jInterval `json:"marginal_cost,omitempty"`
	MarginalCostSE   *float64   `json:"marginal_cost_std_error,omitempty"`
	ProfitMaxPrice   *jInterval `json:"profit_max_price,omitempty"`
	ProfitMaxPriceSE *float64   `json:"profit_max_price_std_error,omitempty"`
	Caution          string     `json:"caution,omitempty"`
}

type jLine struct {
	Product      string     `json:"product"`
	Owner        string     `json:"owner,omitempty"`
	Price        *float64   `json:"price"`
	Lerner       *jInterval `json:"lerner"`
	MarginalCost *jInterval `json:"marginal_cost"`
	Caution      string     `json:"caution,omitempty"`
}

type jSimRow struct {
	Product            string     `json:"product"`
	Price              *float64   `json:"price"`
	NewPrice           *float64   `json:"new_price"`
	PriceChangePct     *float64   `json:"price_change_pct"`
	Changed            bool       `json:"changed"`
	Units              *float64   `json:"units,omitempty"`
	UnitCost           *float64   `json:"unit_cost,omitempty"`
	NewUnits           *jInterval `json:"new_units,omitempty"`
	UnitsChange        *jInterval `json:"units_change,omitempty"`
	UnitsPct           *jInterval `json:"units_change_pct,omitempty"`
	RevenueChange      *jInterval `json:"revenue_change,omitempty"`
	RevenuePct         *jInterval `json:"revenue_change_pct,omitempty"`
	ContributionChange *jInterval `json:"contribution_change,omitempty"`
	ContributionPct    *jInterval `json:"contribution_change_pct,omitempty"`
	Extrapolated       bool       `json:"extrapolated"`
}

type jTotal struct {
	UnitsChange        *jInterval `json:"units_change,omitempty"`
	UnitsPct           *jInterval `json:"units_change_pct,omitempty"`
	RevenueChange      *jInterval `json:"revenue_change,omitempty"`
	RevenuePct         *jInterval `json:"revenue_change_pct,omitempty"`
	ContributionChange *jInterval `json:"contribution_change,omitempty"`
	ContributionPct    *jInterval `json:"contribution_change_pct,omitempty"`
}

type jChange struct {
	Product string  `json:"product"`
	Kind    string  `json:"kind"`
	Value   float64 `json:"value"`
}

type jSimulation struct {
	Changes    []jChange `json:"changes"`
	Band       string    `json:"band"`
	Products   []jSimRow `json:"products"`
	Total      jTotal    `json:"total"`
	Assumption string    `json:"assumption"`
	Warnings   []string  `json:"warnings"`
	Notes      []string  `json:"notes"`
}

type jReport struct {
	Level   float64 `json:"level"`
	Markups *struct {
		Rule string    `json:"rule"`
		Rows []jMarkup `json:"products"`
	} `json:"markups,omitempty"`
	ProductLine *struct {
		Draws int     `json:"draws"`
		Rows  []jLine `json:"products"`
	} `json:"product_line,omitempty"`
	ProductLineNote string       `json:"product_line_note,omitempty"`
	Simulation      *jSimulation `json:"simulation,omitempty"`
	Cautions        []string     `json:"cautions"`
}

func (r *PricingReport) jsonReport() *jReport {
	out := &jReport{Level: r.Level, ProductLineNote: r.LineNote, Cautions: r.Cautions()}
	if out.Level == 0 {
		out.Level = 0.95
	}
	if len(r.Markups) > 0 {
		out.Markups = &struct {
			Rule string    `json:"rule"`
			Rows []jMarkup `json:"products"`
		}{Rule: "inverse elasticity: L = (p - mc)/p = -1/e, mc = p(1 + 1/e), p* = c e/(1 + e), for e < -1"}
		for _, m := range r.Markups {
			out.Markups.Rows = append(out.Markups.Rows, jMarkup{
				Product: m.Product, Price: jnum(m.Price), UnitCost: jnum(m.UnitCost),
				Elasticity: jiv(m.Elasticity), ElasticitySE: jnum(m.ElasticitySE), Band: m.Band, Regime: m.Regime.String(),
				Lerner: jiv(m.Lerner), LernerSE: jnum(m.LernerSE),
				MarginalCost: jiv(m.MarginalCost), MarginalCostSE: jnum(m.MarginalCostSE),
				ProfitMaxPrice: jiv(m.ProfitMaxPrice), ProfitMaxPriceSE: jnum(m.ProfitMaxPriceSE),
				Caution: m.Caution,
			})
		}
	}
	if l := r.Line; l != nil {
		out.ProductLine = &struct {
			Draws int     `json:"draws"`
			Rows  []jLine `json:"products"`
		}{Draws: l.Draws}
		for _, row := range l.Rows {
			out.ProductLine.Rows = append(out.ProductLine.Rows, jLine{row.Product, row.Owner, jnum(row.Price), jiv(row.Lerner), jiv(row.MarginalCost), row.Caution})
		}
	}
	if s := r.Simulation; s != nil {
		js := &jSimulation{Band: s.Band, Assumption: s.Assumption, Warnings: nonNil(s.Warnings), Notes: nonNil(s.Notes)}
		for _, c := range s.Changes {
			kind := "percent"
			if c.Kind == NewPrice {
				kind = "new_price"
			}
			js.Changes = append(js.Changes, jChange{c.Product, kind, c.Value})
		}
		for _, row := range s.Rows {
			js.Products = append(js.Products, jSimRow{
				Product: row.Product, Price: jnum(row.Price), NewPrice: jnum(row.NewPrice), PriceChangePct: jnum(row.PriceChangePct),
				Changed: row.Changed, Units: jnum(row.Units), UnitCost: jnum(row.UnitCost),
				NewUnits: jiv(row.NewUnits), UnitsChange: jiv(row.UnitsChange), UnitsPct: jiv(row.UnitsPct),
				RevenueChange: jiv(row.RevenueChange), RevenuePct: jiv(row.RevenuePct),
				ContributionChange: jiv(row.ContributionChange), ContributionPct: jiv(row.ContributionPct),
				Extrapolated: row.Extrapolated,
			})
		}
		t := s.Total
		js.Total = jTotal{jiv(t.UnitsChange), jiv(t.UnitsPct), jiv(t.RevenueChange), jiv(t.RevenuePct), jiv(t.ContributionChange), jiv(t.ContributionPct)}
		out.Simulation = js
	}
	return out
}

func nonNil(s []string) []string {
	if s == nil {
		return []string{}
	}
	return s
}

func writePricingCSV(w io.Writer, r *PricingReport) error {
	cw := csv.NewWriter(w)
	f := func(x float64) string {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return ""
		}
		return strconv.FormatFloat(x, 'g', -1, 64)
	}
	_ = cw.Write([]string{"section", "product", "measure", "estimate", "low", "high", "std_error"})
	put := func(section, product, measure string, iv Interval, se float64) {
		if math.IsNaN(iv.Est) {
			return
		}
		_ = cw.Write([]string{section, SafeCell(product), measure, f(iv.Est), f(iv.Lo), f(iv.Hi), f(se)})
	}
	one := func(x float64) Interval { return Interval{x, math.NaN(), math.NaN()} }
	nan := math.NaN()
	if s := r.Simulation; s != nil {
		for _, row := range s.Rows {
			put("what_if", row.Product, "price", one(row.Price), nan)
			put("what_if", row.Product, "new_price", one(row.NewPrice), nan)
			put("what_if", row.Product, "new_units", row.NewUnits, nan)
			put("what_if", row.Product, "units_change", row.UnitsChange, nan)
			put("what_if", row.Product, "units_change_pct", row.UnitsPct, nan)
			put("what_if", row.Product, "revenue_change", row.RevenueChange, nan)
			put("what_if", row.Product, "revenue_change_pct", row.RevenuePct, nan)
			put("what_if", row.Product, "contribution_change", row.ContributionChange, nan)
			put("what_if", row.Product, "contribution_change_pct", row.ContributionPct, nan)
		}
		t := s.Total
		put("what_if_total", "", "units_change", t.UnitsChange, nan)
		put("what_if_total", "", "units_change_pct", t.UnitsPct, nan)
		put("what_if_total", "", "revenue_change", t.RevenueChange, nan)
		put("what_if_total", "", "revenue_change_pct", t.RevenuePct, nan)
		put("what_if_total", "", "contribution_change", t.ContributionChange, nan)
		put("what_if_total", "", "contribution_change_pct", t.ContributionPct, nan)
	}
	for _, m := range r.Markups {
		put("markup", m.Product, "elasticity", m.Elasticity, m.ElasticitySE)
		put("markup", m.Product, "lerner_index", m.Lerner, m.LernerSE)
		put("markup", m.Product, "marginal_cost", m.MarginalCost, m.MarginalCostSE)
		put("markup", m.Product, "profit_max_price", m.ProfitMaxPrice, m.ProfitMaxPriceSE)
	}
	if l := r.Line; l != nil {
		for _, row := range l.Rows {
			put("product_line", row.Product, "lerner_index", row.Lerner, nan)
			put("product_line", row.Product, "marginal_cost", row.MarginalCost, nan)
		}
	}
	for _, c := range r.Cautions() {
		_ = cw.Write([]string{"caution", "", SafeCell(c), "", "", "", ""})
	}
	cw.Flush()
	return cw.Error()
}

func writePricingMarkdown(w io.Writer, r *PricingReport) error {
	var b strings.Builder
	lv := r.level()
	if s := r.Simulation; s != nil {
		fmt.Fprintf(&b, "### What if the prices move\n\nPer period; %s bands: %s.\n\n", lv, mdEscape(s.Band))
		b.WriteString("| product | price | new price | units | units % | revenue | revenue % | contribution | contribution % |\n|---|---:|---:|---|---|---|---|---|---|\n")
		for _, row := range s.Rows {
			fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s | %s | %s | %s |\n", mdEscape(row.Product), money(row.Price), money(row.NewPrice),
				bandText(row.UnitsChange, kChange), bandText(row.UnitsPct, kPct), bandText(row.RevenueChange, kChange), bandText(row.RevenuePct, kPct),
				bandText(row.ContributionChange, kChange), bandText(row.ContributionPct, kPct))
		}
		t := s.Total
		if !math.IsNaN(t.RevenueChange.Est) {
			fmt.Fprintf(&b, "| **whole line** | | | %s | %s | %s | %s | %s | %s |\n",
				bandText(t.UnitsChange, kChange), bandText(t.UnitsPct, kPct), bandText(t.RevenueChange, kChange), bandText(t.RevenuePct, kPct),
				bandText(t.ContributionChange, kChange), bandText(t.ContributionPct, kPct))
		}
		b.WriteString("\n")
	}
	if len(r.Markups) > 0 {
		fmt.Fprintf(&b, "### Margins at current prices\n\nInverse-elasticity rule; bands carried over from the %s band of each elasticity.\n\n", lv)
		b.WriteString("| product | price | elasticity | Lerner index | marginal cost | best price |\n|---|---:|---|---|---|---|\n")
		for _, m := range r.Markups {
			if m.Regime != Elastic {
				fmt.Fprintf(&b, "| %s | %s | %s | no margin: %s | | |\n", mdEscape(m.Product), money(m.Price), bandText(m.Elasticity, kElast), m.Regime)
				continue
			}
			best := "—"
			if !math.IsNaN(m.ProfitMaxPrice.Est) {
				best = fmt.Sprintf("%s at unit cost %s", bandText(m.ProfitMaxPrice, kLevel), money(m.UnitCost))
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s |\n", mdEscape(m.Product), money(m.Price), bandText(m.Elasticity, kElast),
				bandText(m.Lerner, kRatio), bandText(m.MarginalCost, kLevel), best)
		}
		b.WriteString("\n")
	}
	if l := r.Line; l != nil {
		b.WriteString("### Product-line margins\n\n| product | owner | Lerner index | marginal cost |\n|---|---|---|---|\n")
		for _, row := range l.Rows {
			owner := row.Owner
			if owner == "" {
				owner = "(one owner)"
			}
			if row.Caution != "" {
				fmt.Fprintf(&b, "| %s | %s | no margin: not consistent with profit maximisation | |\n", mdEscape(row.Product), mdEscape(owner))
				continue
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s |\n", mdEscape(row.Product), mdEscape(owner), bandText(row.Lerner, kRatio), bandText(row.MarginalCost, kLevel))
		}
		b.WriteString("\n")
	}
	b.WriteString("### Read with care\n\n")
	for i, c := range r.Cautions() {
		fmt.Fprintf(&b, "%d. %s\n", i+1, mdEscape(c))
	}
	_, err := io.WriteString(w, b.String())
	return err
}
