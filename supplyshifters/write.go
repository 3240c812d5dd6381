package supplyshifters

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"strings"
	"unicode/utf8"
)

// WriteText writes the diagnostics as plain text: one numbered question
// per part, a small table of numbers and, under it, what each number means
// for the estimate; then the warnings and notes.
func WriteText(w io.Writer, dg *Diagnostics) error {
	bw := bufio.NewWriter(w)
	title, sub := heading(dg)
	fmt.Fprintf(bw, "%s\n%s\n%s\n", title, strings.Repeat("=", utf8.RuneCountInString(title)), sub)
	for i, s := range sections(dg) {
		fmt.Fprintf(bw, "\n[%d] %s\n", i+1, s.title)
		for _, b := range s.blocks {
			if b.table != nil {
				writeTextTable(bw, b.table, "    ")
				continue
			}
			writeWrapped(bw, b.text, "    · ", "      ", 96)
		}
	}
	if len(dg.Warnings) > 0 {
		fmt.Fprintf(bw, "\nWARNINGS\n")
		for _, s := range dg.Warnings {
			writeWrapped(bw, s, "  ! ", "    ", 96)
		}
	}
	if len(dg.Notes) > 0 {
		fmt.Fprintf(bw, "\nNotes\n")
		for _, s := range dg.Notes {
			writeWrapped(bw, s, "  - ", "    ", 96)
		}
	}
	return bw.Flush()
}

// WriteMarkdown writes the diagnostics as a Markdown section (level-2
// heading, one level-3 heading per part, tables and sentences).
func WriteMarkdown(w io.Writer, dg *Diagnostics) error {
	bw := bufio.NewWriter(w)
	title, sub := heading(dg)
	fmt.Fprintf(bw, "## %s\n\n%s\n", title, sub)
	if len(dg.Warnings) > 0 {
		fmt.Fprintf(bw, "\n**Warnings**\n\n")
		for _, s := range dg.Warnings {
			fmt.Fprintf(bw, "- ⚠ %s\n", mdEscape(s))
		}
	}
	for i, s := range sections(dg) {
		fmt.Fprintf(bw, "\n### %d. %s\n", i+1, s.title)
		for _, b := range s.blocks {
			if b.table != nil {
				fmt.Fprintln(bw)
				writeMarkdownTable(bw, b.table)
				continue
			}
			fmt.Fprintf(bw, "\n%s\n", mdEscape(b.text))
		}
	}
	if len(dg.Notes) > 0 {
		fmt.Fprintf(bw, "\n**Notes**\n\n")
		for _, s := range dg.Notes {
			fmt.Fprintf(bw, "- %s\n", mdEscape(s))
		}
	}
	return bw.Flush()
}

type textTable struct {
	header []string
	rows   [][]string
	right  []bool // right-align column
}

type block struct {
	table *textTable
	text  string
}

type section struct {
	title  string
	blocks []block
}

func (s *section) say(text string) {
	if text != "" {
		s.blocks = append(s.blocks, block{text: text})
	}
}

func (s *section) tab(t *textTable) {
	if t != nil && len(t.rows) > 0 {
		s.blocks = append(s.blocks, block{table: t})
	}
}

func heading(dg *Diagnostics) (title, sub string) {
	title = fmt.Sprintf("Shifter evidence: %s instrumented by %s", strings.Join(dg.Endogenous, ", "), strings.Join(dg.Shifters, ", "))
	sub = fmt.Sprintf("%s estimate %s (s.e. %s) on %d rows; covariance: %s; %s level.",
		dg.Estimator, num(dg.Estimate), num(dg.StdError), dg.N, dg.Vcov, pct(dg.Level))
	return title, sub
}

// num formats a number for tables.
func num(x Num) string {
	f := float64(x)
	switch {
	case math.IsNaN(f):
		return "–"
	case math.IsInf(f, 0):
		return fmtG(f)
	case f != 0 && (math.Abs(f) >= 1e6 || math.Abs(f) < 1e-4):
		return fmt.Sprintf("%.3e", f)
	}
	return fmt.Sprintf("%.4f", f)
}

func pval(x Num) string {
	f := float64(x)
	switch {
	case math.IsNaN(f):
		return "–"
	case f < 0.001:
		return "<0.001"
	}
	return fmt.Sprintf("%.3f", f)
}

func statRow(s *Stat) []string {
	return []string{s.Name, num(s.Value), s.Dist, pval(s.P)}
}

func statTable(stats ...*Stat) *textTable {
	t := &textTable{header: []string{"statistic", "value", "reference", "p-value"}, right: []bool{false, true, false, true}}
	for _, s := range stats {
		if s != nil {
			t.rows = append(t.rows, statRow(s))
		}
	}
	return t
}

// sections lays out the parts that were computed.
func sections(dg *Diagnostics) []section {
	var out []section
	endog := strings.Join(dg.Endogenous, ", ")
	if len(dg.FirstStage) > 0 {
		s := section{title: fmt.Sprintf("Do the shifters move %s? (first stage)", endog)}
		for _, fs := range dg.FirstStage {
			t := &textTable{header: []string{fs.Endogenous + " ←", "coef", "s.e.", "t", "p-value", "own R²", "sign"}, right: []bool{false, true, true, true, true, true, false}}
			for _, e := range fs.Shifters {
				sign := e.SignCheck
				if e.ExpectedSign != 0 {
					sign += fmt.Sprintf(" (expected %s)", map[bool]string{true: "+", false: "−"}[e.ExpectedSign > 0])
				}
				t.rows = append(t.rows, []string{e.Name, num(e.Estimate), num(e.StdError), num(e.T), pval(e.P), num(e.PartialR2), sign})
			}
			s.tab(t)
			st := statTable(&fs.F, fs.ConditionalF)
			st.rows = append(st.rows, []string{"partial R²", num(fs.PartialR2), "", ""})
			if fs.SheaPartialR2 != nil {
				st.rows = append(st.rows, []string{"Shea partial R²", num(*fs.SheaPartialR2), "", ""})
			}
			s.tab(st)
			for _, e := range fs.Shifters {
				if e.SignCheck == SignWrong {
					s.say(e.Meaning)
				}
			}
			s.say(fs.F.Meaning)
			s.say(fs.PartialR2Meaning)
			s.say(fs.SheaMeaning)
			if fs.ConditionalF != nil {
				s.say(fs.ConditionalF.Meaning)
			}
		}
		out = append(out, s)
	}
	if w := dg.WeakIV; w != nil {
		s := section{title: "Are they strong enough? (weak instruments)"}
		t := statTable(&w.CraggDonald, &w.KPWald, &w.KPLM)
		if e := w.Effective; e != nil {
			t.rows = append(t.rows, []string{"effective F (Montiel Olea-Pflueger)", num(e.F), fmt.Sprintf("critical %s (τ = %s, α = %s); conservative %.3f", num(e.Critical), pct(e.Tau), pct(e.Alpha), e.Conservative), "–"})
		}
		s.tab(t)
		if len(w.StockYogo) > 0 {
			sy := &textTable{header: []string{"Stock-Yogo table", "threshold", "critical", "Cragg-Donald above?", "cell"}, right: []bool{false, true, true, false, false}}
			for _, c := range w.StockYogo {
				sy.rows = append(sy.rows, []string{c.Table, pct(c.Threshold), fmt.Sprintf("%.2f", c.Critical), map[bool]string{true: "yes", false: "no"}[c.Exceeded], c.Provenance})
			}
			s.tab(sy)
		}
		s.say(w.CraggDonald.Meaning)
		s.say(w.StockYogoNote)
		s.say(w.KPWald.Meaning)
		s.say(w.KPLM.Meaning)
		if w.Effective != nil {
			s.say(w.Effective.Meaning)
		}
		out = append(out, s)
	}
	if o := dg.Overid; o != nil {
		s := section{title: "Do the shifters agree with each other? (over-identification)"}
		if !o.Available {
			s.say(o.Reason)
		} else {
			s.tab(statTable(o.Sargan, o.HansenJ, o.MTimesF))
			s.say(o.Sargan.Meaning)
			s.say(o.HansenJ.Meaning)
			s.say(o.MTimesF.Meaning)
		}
		if len(o.C) > 0 {
			ct := &textTable{header: []string{"drop", "C", "reference", "p-value"}, right: []bool{false, true, false, true}}
			for _, c := range o.C {
				ct.rows = append(ct.rows, []string{"{" + strings.Join(c.Shifters, ", ") + "}", num(c.Value), c.Dist, pval(c.P)})
			}
			s.tab(ct)
			for _, c := range o.C {
				if o.Available {
					s.say(c.Meaning)
				}
			}
		}
		out = append(out, s)
	}
	if e := dg.Endogeneity; e != nil {
		s := section{title: fmt.Sprintf("Does %s need instrumenting? (endogeneity)", endog)}
		t := &textTable{header: []string{"control function", "coef", "s.e.", "t", "p-value"}, right: []bool{false, true, true, true, true}}
		for _, r := range e.Residuals {
			t.rows = append(t.rows, []string{r.Name, num(r.Estimate), num(r.StdError), num(r.T), pval(r.P)})
		}
		s.tab(t)
		if len(e.Residuals) > 1 {
			s.tab(statTable(&e.Test))
		}
		s.say(e.Test.Meaning)
		out = append(out, s)
	}
	if a := dg.AndersonRubin; a != nil {
		s := section{title: "What does a test that ignores shifter strength allow? (Anderson-Rubin)"}
		if !a.Available {
			s.say(a.Reason)
		} else {
			t := &textTable{header: []string{"band", "set", "shape", "method"}}
			t.rows = append(t.rows, []string{"Anderson-Rubin " + pct(a.Level), fmtSet(a.Pieces), a.Shape, a.Method})
			t.rows = append(t.rows, []string{"Wald " + pct(a.Level), fmt.Sprintf("[%s, %s]", fmtG(float64(a.WaldLow)), fmtG(float64(a.WaldHigh))), "bounded interval", dg.Estimator})
			s.tab(t)
			at := &textTable{header: []string{"H0: coefficient =", "AR", "reference", "p-value", "verdict"}, right: []bool{true, true, false, true, false}}
			for _, x := range a.Tests {
				at.rows = append(at.rows, []string{fmtG(x.Null), num(x.Value), x.Dist, pval(x.P), map[bool]string{true: "rejected", false: "not rejected"}[x.Rejected]})
			}
			s.tab(at)
			s.say(a.Meaning)
		}
		out = append(out, s)
	}
	if len(dg.Grouped) > 0 {
		s := section{title: "The whiteboard picture (grouped estimator)"}
		t := &textTable{header: []string{"shifter", "version", "split at", "low: n, x̄, ȳ", "high: n, x̄, ȳ", "slope", "s.e."}, right: []bool{false, false, true, false, false, true, true}}
		for _, g := range dg.Grouped {
			if !g.Available {
				t.rows = append(t.rows, []string{g.Shifter, g.Version, num(g.Cut), "–", "–", "–", "–"})
				continue
			}
			t.rows = append(t.rows, []string{g.Shifter, g.Version, num(g.Cut),
				fmt.Sprintf("%d, %s, %s", g.Low.N, num(g.Low.Endogenous), num(g.Low.Outcome)),
				fmt.Sprintf("%d, %s, %s", g.High.N, num(g.High.Endogenous), num(g.High.Outcome)),
				num(g.Slope), num(g.StdError)})
		}
		s.tab(t)
		for _, g := range dg.Grouped {
			s.say(g.Meaning)
		}
		out = append(out, s)
	}
	if r := dg.ReducedForm; r != nil {
		s := section{title: fmt.Sprintf("Do the shifters move %s directly? (reduced form)", r.Outcome)}
		t := &textTable{header: []string{r.Outcome + " ←", "coef", "s.e.", "t", "p-value"}, right: []bool{false, true, true, true, true}}
		for _, c := range r.Shifters {
			t.rows = append(t.rows, []string{c.Name, num(c.Estimate), num(c.StdError), num(c.T), pval(c.P)})
		}
		s.tab(t)
		s.tab(statTable(&r.Joint))
		s.say(r.Joint.Meaning)
		s.say(r.Meaning)
		out = append(out, s)
	}
	return out
}

func writeTextTable(w io.Writer, t *textTable, indent string) {
	width := make([]int, len(t.header))
	for j, h := range t.header {
		width[j] = utf8.RuneCountInString(h)
	}
	for _, r := range t.rows {
		for j, c := range r {
			width[j] = max(width[j], utf8.RuneCountInString(c))
		}
	}
	line := func(cells []string) {
		var b strings.Builder
		b.WriteString(indent)
		for j, c := range cells {
			pad := strings.Repeat(" ", width[j]-utf8.RuneCountInString(c))
			if j < len(t.right) && t.right[j] {
				b.WriteString(pad + c)
			} else {
				b.WriteString(c + pad)
			}
			if j < len(cells)-1 {
				b.WriteString("   ")
			}
		}
		fmt.Fprintln(w, strings.TrimRight(b.String(), " "))
	}
	line(t.header)
	for _, r := range t.rows {
		line(r)
	}
}

func writeMarkdownTable(w io.Writer, t *textTable) {
	row := func(cells []string) {
		esc := make([]string, len(cells))
		for i, c := range cells {
			esc[i] = strings.ReplaceAll(c, "|", "\\|")
		}
		fmt.Fprintf(w, "| %s |\n", strings.Join(esc, " | "))
	}
	row(t.header)
	sep := make([]string, len(t.header))
	for j := range sep {
		sep[j] = "---"
		if j < len(t.right) && t.right[j] {
			sep[j] = "---:"
		}
	}
	fmt.Fprintf(w, "|%s|\n", strings.Join(sep, "|"))
	for _, r := range t.rows {
		row(r)
	}
}

// writeWrapped writes text wrapped at width runes, the first line after
// first and the others after rest.
func writeWrapped(w io.Writer, text, first, rest string, width int) {
	words := strings.Fields(text)
	line := first
	n := utf8.RuneCountInString(first)
	start := true
	for _, word := range words {
		l := utf8.RuneCountInString(word)
		if !start && n+1+l > width {
			fmt.Fprintln(w, line)
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
	fmt.Fprintln(w, line)
}

// mdEscape protects the Markdown characters that sentences may contain.
func mdEscape(s string) string {
	r := strings.NewReplacer("*", "\\*", "_", "\\_", "|", "\\|")
	return r.Replace(s)
}
