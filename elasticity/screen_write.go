package elasticity

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"unicode/utf8"

	"priceiv/supplyshifters"
)

// WriteScreen writes a ranked screen of candidate shifters in the given
// format: text (a ranked table, the reasons behind every verdict short of
// solid, the rule, notes), json (the ScreenResult), csv (one row per
// combination; text cells neutralised with SafeCell) or markdown.
func WriteScreen(w io.Writer, res *supplyshifters.ScreenResult, format string) error {
	return writeFormat(w, format, res, writers{
		text:     func(w io.Writer) error { return writeScreenText(w, res) },
		csv:      func(w io.Writer) error { return writeScreenCSV(w, res) },
		markdown: func(w io.Writer) error { return writeScreenMarkdown(w, res) },
	})
}

// scrCells lays out one row of the screen table as display strings, in
// the order of scrHeader.
func scrCells(r *supplyshifters.ScreenRow) []string {
	sign := "ok"
	if r.Sign != supplyshifters.SignAsExpected {
		sign = r.Sign
	}
	return []string{
		strconv.Itoa(r.Rank),
		r.Verdict,
		strings.Join(r.Shifters, " + "),
		sign,
		scrEffF(r),
		scrNum(float64(r.PartialR2), 3),
		scrJ(r),
		fmt.Sprintf("%s [%s, %s]", scrNum(float64(r.Elasticity), 3), scrNum(float64(r.WaldLow), 3), scrNum(float64(r.WaldHigh), 3)),
		scrAR(r),
	}
}

// scrHeader names the columns; in general form (no demand form) the
// estimate is the coefficient of the endogenous regressor.
func scrHeader(res *supplyshifters.ScreenResult) []string {
	lv := pct(res.Level)
	what := "elasticity"
	if res.Form == "" {
		what = "coefficient"
	}
	return []string{"#", "verdict", "shifters", "sign", "eff. F vs crit.", "partial R²", "J p-value", what + " [" + lv + " Wald]", "Anderson-Rubin " + lv}
}

// scrRight marks the right-aligned columns of the table.
var scrRight = []bool{true, false, false, false, true, true, true, false, false}

// scrEffF writes the effective F against its critical value.
func scrEffF(r *supplyshifters.ScreenRow) string {
	f, c := float64(r.EffectiveF), float64(r.Critical)
	if math.IsNaN(f) || math.IsNaN(c) {
		return "–"
	}
	rel := "≤"
	if r.Strong {
		rel = ">"
	}
	return fmt.Sprintf("%s %s %.2f", scrSig(f), rel, c)
}

// scrJ writes the J p-value, the words "just identified", and the shifter
// difference-in-J points at first.
func scrJ(r *supplyshifters.ScreenRow) string {
	if r.JDF == 0 {
		return "just identified"
	}
	s := scrP(float64(r.JP))
	if len(r.Suspects) > 0 {
		s += " (C: " + r.Suspects[0] + ")"
	}
	return s
}

// scrAR writes the Anderson-Rubin set with its shape in words.
func scrAR(r *supplyshifters.ScreenRow) string {
	if r.ARShape == supplyshifters.ShapeEmpty {
		return "∅ empty"
	}
	if len(r.ARPieces) == 0 {
		return r.ARShape
	}
	parts := make([]string, len(r.ARPieces))
	for i, iv := range r.ARPieces {
		lo, hi := "(−∞", "+∞)"
		if iv.Low != nil {
			lo = "[" + scrNum(*iv.Low, 3)
		}
		if iv.High != nil {
			hi = scrNum(*iv.High, 3) + "]"
		}
		parts[i] = lo + ", " + hi
	}
	shape := r.ARShape
	if shape == supplyshifters.ShapeBounded {
		shape = "bounded"
	}
	return strings.Join(parts, " ∪ ") + " " + shape
}

// scrNum writes x with d decimals, or with four significant digits when
// it is large; "–" when undefined.
func scrNum(x float64, d int) string {
	switch {
	case math.IsNaN(x):
		return "–"
	case math.IsInf(x, 1):
		return "+∞"
	case math.IsInf(x, -1):
		return "−∞"
	case math.Abs(x) >= 1e4:
		return strconv.FormatFloat(x, 'g', 4, 64)
	}
	return strconv.FormatFloat(x, 'f', d, 64)
}

// scrSig writes a positive statistic with about four significant digits.
func scrSig(x float64) string {
	switch {
	case math.IsNaN(x):
		return "–"
	case math.Abs(x) >= 1000:
		return strconv.FormatFloat(x, 'f', 0, 64)
	case math.Abs(x) >= 100:
		return strconv.FormatFloat(x, 'f', 1, 64)
	}
	return strconv.FormatFloat(x, 'f', 2, 64)
}

func scrP(p float64) string {
	switch {
	case math.IsNaN(p):
		return "–"
	case p < 0.001:
		return "<0.001"
	}
	return strconv.FormatFloat(p, 'f', 3, 64)
}

// scrModel describes the model in one line.
func scrModel(res *supplyshifters.ScreenResult) string {
	s := fmt.Sprintf("%s of %s on %s", strings.ToUpper(res.Estimator), res.Outcome, res.Endogenous)
	if res.Form != "" {
		s += " (" + res.Form + " demand)"
	}
	cov := res.Vcov
	if cov == "" {
		cov = res.VcovKind
	}
	return s + "; covariance " + cov + "; " + pct(res.Level) + " bands"
}

// scrHeld describes what every combination holds fixed.
func scrHeld(res *supplyshifters.ScreenResult) string {
	var parts []string
	if len(res.Controls) > 0 {
		parts = append(parts, "controls "+strings.Join(res.Controls, ", "))
	}
	if len(res.FixedEffects) > 0 {
		parts = append(parts, "fixed effects "+strings.Join(res.FixedEffects, ", "))
	}
	if len(res.Cluster) > 0 {
		parts = append(parts, "clusters "+strings.Join(res.Cluster, ", "))
	}
	if len(parts) == 0 {
		parts = append(parts, "nothing besides the shifters")
	}
	s := strings.Join(parts, "; ")
	if res.LeftOut == "controls" {
		s += "; candidates outside a combination stay in its demand equation as controls"
	} else {
		s += "; candidates outside a combination are left out of its model"
	}
	return s
}

func writeScreenText(w io.Writer, res *supplyshifters.ScreenResult) error {
	var b strings.Builder
	fmt.Fprintf(&b, "SHIFTER SCREEN   which candidates can carry the price elasticity?\n")
	scrWrap(&b, scrModel(res), "  ", "    ", 100)
	scrWrap(&b, fmt.Sprintf("%d combinations of 1 to %d out of %d candidates: %s", res.Combinations, res.MaxSet, len(res.Candidates), strings.Join(res.Candidates, ", ")), "  ", "    ", 100)
	scrWrap(&b, "held in every combination: "+scrHeld(res), "  ", "    ", 100)
	scrWrap(&b, res.RowsNote, "  ", "    ", 100)
	b.WriteString("\n")

	header := scrHeader(res)
	rows := make([][]string, len(res.Rows))
	for i := range res.Rows {
		rows[i] = scrCells(&res.Rows[i])
	}
	scrTable(&b, header, rows, "  ")

	var why []string
	for _, r := range res.Rows {
		if len(r.Reasons) > 0 {
			why = append(why, fmt.Sprintf("%d %s: %s.", r.Rank, r.Verdict, strings.Join(r.Reasons, "; ")))
		}
	}
	if len(why) > 0 {
		b.WriteString("\nWHY NOT SOLID\n")
		for _, s := range why {
			scrWrap(&b, s, "  ", "      ", 100)
		}
	}
	b.WriteString("\nHOW THE VERDICTS ARE GIVEN\n")
	scrWrap(&b, res.Rule, "  ", "  ", 100)
	scrWrap(&b, "Effective F: Montiel Olea-Pflueger, against its simplified critical value (5% level, 10% worst-case bias). J: Hansen J with the screen's covariance; C: the shifter whose difference-in-J test points at it first. For the full evidence on one combination, run priceiv estimate with it as --shifters.", "  ", "  ", 100)
	if len(res.Notes) > 0 {
		b.WriteString("\nNOTES\n")
		for _, n := range res.Notes {
			scrWrap(&b, n, "  · ", "    ", 100)
		}
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// scrTable writes an aligned table with a rule under the header.
func scrTable(b *strings.Builder, header []string, rows [][]string, indent string) {
	width := make([]int, len(header))
	for j, h := range header {
		width[j] = utf8.RuneCountInString(h)
	}
	for _, r := range rows {
		for j, c := range r {
			width[j] = max(width[j], utf8.RuneCountInString(c))
		}
	}
	line := func(cells []string) {
		var l strings.Builder
		l.WriteString(indent)
		for j, c := range cells {
			pad := strings.Repeat(" ", width[j]-utf8.RuneCountInString(c))
			if scrRight[j] {
				l.WriteString(pad + c)
			} else {
				l.WriteString(c + pad)
			}
			if j < len(cells)-1 {
				l.WriteString("  ")
			}
		}
		b.WriteString(strings.TrimRight(l.String(), " ") + "\n")
	}
	line(header)
	rule := make([]string, len(header))
	for j := range rule {
		rule[j] = strings.Repeat("─", width[j])
	}
	line(rule)
	for _, r := range rows {
		line(r)
	}
}

// scrWrap writes text wrapped at width runes, the first line after first
// and the others after rest.
func scrWrap(b *strings.Builder, text, first, rest string, width int) {
	line := first
	n := utf8.RuneCountInString(first)
	start := true
	for _, word := range strings.Fields(text) {
		l := utf8.RuneCountInString(word)
		if !start && n+1+l > width {
			b.WriteString(line + "\n")
			line, n, start = rest, utf8.RuneCountInString(rest), true
		}
		if !start {
			line += " "
			n++
		}
		line += word
		n += l
		start = false
	}
	b.WriteString(line + "\n")
}

func writeScreenCSV(w io.Writer, res *supplyshifters.ScreenResult) error {
	cw := csv.NewWriter(w)
	f := func(x supplyshifters.Num) string {
		if !x.Finite() {
			return ""
		}
		return strconv.FormatFloat(float64(x), 'g', -1, 64)
	}
	fp := func(x *float64) string {
		if x == nil {
			return ""
		}
		return strconv.FormatFloat(*x, 'g', -1, 64)
	}
	safe := func(list []string, sep string) string {
		out := make([]string, len(list))
		for i, s := range list {
			out[i] = SafeCell(s)
		}
		return SafeCell(strings.Join(out, sep))
	}
	_ = cw.Write([]string{"rank", "verdict", "shifters", "sign_check", "f_eff", "f_eff_critical", "strong", "partial_r2",
		"j_df", "hansen_j", "hansen_j_p", "c_suspects", "elasticity", "std_error", "wald_low", "wald_high",
		"ar_shape", "ar_low", "ar_high", "ar_set", "reasons", "n", "vcov"})
	for i := range res.Rows {
		r := &res.Rows[i]
		jp := f(r.JP)
		if r.JDF == 0 {
			jp = "just identified"
		}
		_ = cw.Write([]string{strconv.Itoa(r.Rank), r.Verdict, safe(r.Shifters, "+"), SafeCell(r.Sign),
			f(r.EffectiveF), f(r.Critical), strconv.FormatBool(r.Strong), f(r.PartialR2),
			strconv.Itoa(r.JDF), f(r.J), jp, safe(r.Suspects, "+"),
			f(r.Elasticity), f(r.StdError), f(r.WaldLow), f(r.WaldHigh),
			r.ARShape, fp(r.ARLow), fp(r.ARHigh), SafeCell(scrAR(r)), SafeCell(strings.Join(r.Reasons, "; ")),
			strconv.Itoa(res.N), SafeCell(res.VcovKind)})
	}
	cw.Flush()
	return cw.Error()
}

func writeScreenMarkdown(w io.Writer, res *supplyshifters.ScreenResult) error {
	var b strings.Builder
	b.WriteString("### Shifter screen: which candidates can carry the price elasticity?\n\n")
	fmt.Fprintf(&b, "%s. %d combinations of 1 to %d out of %d candidates (%s). Held in every combination: %s. %s\n\n",
		mdEscape(scrModel(res)), res.Combinations, res.MaxSet, len(res.Candidates), mdEscape(strings.Join(res.Candidates, ", ")),
		mdEscape(scrHeld(res)), mdEscape(res.RowsNote))
	header := scrHeader(res)
	b.WriteString("| " + strings.Join(header, " | ") + " |\n|")
	for j := range header {
		if scrRight[j] {
			b.WriteString("---:|")
		} else {
			b.WriteString("---|")
		}
	}
	b.WriteString("\n")
	for i := range res.Rows {
		cells := scrCells(&res.Rows[i])
		for j, c := range cells {
			cells[j] = mdEscape(c)
		}
		b.WriteString("| " + strings.Join(cells, " | ") + " |\n")
	}
	first := true
	for _, r := range res.Rows {
		if len(r.Reasons) == 0 {
			continue
		}
		if first {
			b.WriteString("\n**Why not solid**\n\n")
			first = false
		}
		fmt.Fprintf(&b, "- %d, %s: %s.\n", r.Rank, r.Verdict, mdEscape(strings.Join(r.Reasons, "; ")))
	}
	fmt.Fprintf(&b, "\n*%s*\n", mdEscape(res.Rule))
	for _, n := range res.Notes {
		fmt.Fprintf(&b, "\n> %s\n", mdEscape(n))
	}
	_, err := io.WriteString(w, b.String())
	return err
}
