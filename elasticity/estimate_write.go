package elasticity

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"priceiv/demand"
)

// Formats lists the output formats of the estimate writers.
var Formats = []string{"text", "json", "csv", "markdown"}

// CheckFormat returns an error for an unknown format name.
func CheckFormat(f string) error {
	for _, g := range Formats {
		if f == g {
			return nil
		}
	}
	return fmt.Errorf("unknown format %q: choose one of %s", f, strings.Join(Formats, ", "))
}

// WriteEstimate writes an estimation result in the given format.
func WriteEstimate(w io.Writer, r *demand.Result, format string) error {
	return writeFormat(w, format, r, writers{
		text:     func(w io.Writer) error { return writeEstimateText(w, r) },
		csv:      func(w io.Writer) error { return writeEstimateCSV(w, r) },
		markdown: func(w io.Writer) error { return writeEstimateMarkdown(w, r) },
	})
}

func pct(level float64) string { return strconv.FormatFloat(level*100, 'g', -1, 64) + "%" }

// describeElasticity says in words what an own-price elasticity means.
func describeElasticity(e, lo, hi float64) string {
	var b strings.Builder
	fmt.Fprintf(&b, "a 1%% higher price goes with about %.1f%% %s units sold", math.Abs(e), map[bool]string{true: "fewer", false: "more"}[e < 0])
	switch {
	case e > 0:
		b.WriteString("; a positive own-price elasticity is implausible for demand: check the instruments and the model")
	case hi < -1:
		b.WriteString("; demand is elastic (the whole band lies below -1)")
	case lo > -1 && hi < 0:
		b.WriteString("; demand is inelastic (the whole band lies between -1 and 0)")
	case lo < -1 && hi > -1:
		b.WriteString("; the band straddles -1, so whether demand is elastic is not settled")
	default:
		b.WriteString("; the band reaches zero, so the data do not rule out no price response")
	}
	return b.String()
}

func writeEstimateText(w io.Writer, r *demand.Result) error {
	var b strings.Builder
	lv := pct(r.Level)
	if len(r.Elasticity) > 0 {
		b.WriteString("OWN-PRICE ELASTICITY\n")
		for _, e := range r.Elasticity {
			fmt.Fprintf(&b, "  %-14s %7.3f   %s band %.3f to %.3f   (s.e. %.3f, %d rows)\n", e.Product, e.OwnPrice, lv, e.CILow, e.CIHigh, e.StdError, e.N)
			fmt.Fprintf(&b, "  → %s.\n", describeElasticity(e.OwnPrice, e.CILow, e.CIHigh))
			if bb := e.Bootstrap; bb != nil {
				fmt.Fprintf(&b, "  cluster bootstrap: %s band %.3f to %.3f (s.e. %.3f; %d replicates over %d clusters, seed %d)\n",
					lv, bb.Low, bb.High, bb.StdError, bb.Replicates, bb.Clusters, bb.Seed)
			}
			if !strings.HasPrefix(e.At, "everywhere") {
				fmt.Fprintf(&b, "    (%s form: the elasticity is evaluated at the %s)\n", r.Form, e.At)
			}
		}
		b.WriteString("\n")
	}
	how := fmt.Sprintf("%s of %s", strings.ToUpper(r.Estimator), r.Outcome)
	if r.Form != "" {
		how += " (" + r.Form + " demand)"
	}
	fmt.Fprintf(&b, "TERMS   %s, %s\n", how, r.VcovDetail)
	width := 10
	for _, c := range r.Coeffs {
		width = max(width, len(c.Name))
	}
	for _, c := range r.Coeffs {
		fmt.Fprintf(&b, "  %-*s  %11.5g  ± %-10.4g  band %.5g to %.5g\n", width, c.Name, c.Estimate, c.StdError, c.CILow, c.CIHigh)
	}
	fmt.Fprintf(&b, "  (± is one standard error; bands at %s from t with %d degrees of freedom)\n", lv, r.DF)
	if len(r.FirstStage) > 0 {
		b.WriteString("\nSHIFTER STRENGTH (first stage, excluded instruments: " + strings.Join(r.Instruments, ", ") + ")\n")
		for _, f := range r.FirstStage {
			verdict := "strong"
			switch {
			case f.FStat < 10:
				verdict = "weak: below the rule-of-thumb 10, estimates and bands are unreliable"
			case f.FStat < 23.1:
				verdict = "moderate: passes the rule of thumb of 10, below the robust bound 23.1"
			}
			fmt.Fprintf(&b, "  %-*s  F = %.2f on %d and %d df, partial R² %.3f → %s\n", width, f.Endogenous, f.FStat, f.DF1, f.DF2, f.PartialR2, verdict)
		}
	}
	b.WriteString("\nDATA\n")
	fmt.Fprintf(&b, "  source       %s\n", r.Source)
	fmt.Fprintf(&b, "  rows used    %d\n", r.N)
	for _, d := range r.Dropped {
		what := d.Reason
		if d.Column != "" {
			what += " (" + d.Column + ")"
		}
		fmt.Fprintf(&b, "  dropped      %d rows: %s\n", d.Rows, what)
	}
	if len(r.Absorbed) > 0 {
		var parts []string
		for _, a := range r.Absorbed {
			s := fmt.Sprintf("%s (%d levels", a.Name, a.Levels)
			if a.Redundant > 0 {
				s += fmt.Sprintf(", %d redundant", a.Redundant)
			}
			parts = append(parts, s+")")
		}
		fmt.Fprintf(&b, "  absorbed     %s\n", strings.Join(parts, ", "))
		if a := r.Absorption; a != nil {
			fmt.Fprintf(&b, "               %d parameters, %d sweeps (%s), tolerance %.0e\n", a.DoF, a.Sweeps, a.Method, a.Tolerance)
		}
	} else {
		b.WriteString("  absorbed     nothing (an intercept is estimated)\n")
	}
	fmt.Fprintf(&b, "  small-sample %s\n", r.SmallSample)
	for _, n := range r.Notes {
		fmt.Fprintf(&b, "\nNOTE  %s\n", n)
	}
	if len(r.Cautions) > 0 {
		b.WriteString("\nREAD WITH CARE\n")
		for _, c := range r.Cautions {
			fmt.Fprintf(&b, "  · %s\n", c)
		}
	}
	_, err := io.WriteString(w, b.String())
	return err
}

func writeEstimateCSV(w io.Writer, r *demand.Result) error {
	cw := csv.NewWriter(w)
	_ = cw.Write([]string{"section", "name", "estimate", "std_error", "ci_low", "ci_high", "p_value"})
	f := func(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }
	for _, e := range r.Elasticity {
		_ = cw.Write([]string{"elasticity", SafeCell(e.Product), f(e.OwnPrice), f(e.StdError), f(e.CILow), f(e.CIHigh), ""})
	}
	for _, c := range r.Coeffs {
		_ = cw.Write([]string{"coefficient", SafeCell(c.Name), f(c.Estimate), f(c.StdError), f(c.CILow), f(c.CIHigh), f(c.PValue)})
	}
	for _, s := range r.FirstStage {
		_ = cw.Write([]string{"first_stage_f", SafeCell(s.Endogenous), f(s.FStat), "", "", "", f(s.PValue)})
	}
	cw.Flush()
	return cw.Error()
}

func writeEstimateMarkdown(w io.Writer, r *demand.Result) error {
	var b strings.Builder
	lv := pct(r.Level)
	if len(r.Elasticity) > 0 {
		fmt.Fprintf(&b, "### Own-price elasticity\n\n| product | elasticity | std. error | %s band | rows |\n|---|---:|---:|---|---:|\n", lv)
		for _, e := range r.Elasticity {
			fmt.Fprintf(&b, "| %s | %.3f | %.3f | %.3f to %.3f | %d |\n", mdEscape(e.Product), e.OwnPrice, e.StdError, e.CILow, e.CIHigh, e.N)
		}
		b.WriteString("\n")
	}
	fmt.Fprintf(&b, "### Terms (%s, %s)\n\n| term | estimate | std. error | %s band |\n|---|---:|---:|---|\n", strings.ToUpper(r.Estimator), mdEscape(r.VcovDetail), lv)
	for _, c := range r.Coeffs {
		fmt.Fprintf(&b, "| %s | %.5g | %.4g | %.5g to %.5g |\n", mdEscape(c.Name), c.Estimate, c.StdError, c.CILow, c.CIHigh)
	}
	if len(r.FirstStage) > 0 {
		b.WriteString("\n### Shifter strength\n\n| endogenous | first-stage F | df | partial R² |\n|---|---:|---|---:|\n")
		for _, f := range r.FirstStage {
			fmt.Fprintf(&b, "| %s | %.2f | %d, %d | %.3f |\n", mdEscape(f.Endogenous), f.FStat, f.DF1, f.DF2, f.PartialR2)
		}
	}
	fmt.Fprintf(&b, "\nRows used: %d.", r.N)
	for _, d := range r.Dropped {
		fmt.Fprintf(&b, " Dropped %d (%s %s).", d.Rows, d.Reason, mdEscape(d.Column))
	}
	b.WriteString("\n")
	if len(r.Cautions) > 0 {
		b.WriteString("\n> " + strings.Join(r.Cautions, "\n>\n> ") + "\n")
	}
	_, err := io.WriteString(w, b.String())
	return err
}

func mdEscape(s string) string {
	r := strings.NewReplacer("|", `\|`, "<", "&lt;", ">", "&gt;", "\n", " ")
	return r.Replace(s)
}

// SafeCell neutralises text that a spreadsheet would read as a formula:
// a cell starting with = + - @ tab or carriage return gets a leading
// apostrophe. Numbers (including negative ones) are left as they are.
func SafeCell(s string) string {
	if s == "" {
		return s
	}
	switch s[0] {
	case '=', '+', '-', '@', '\t', '\r':
		if _, err := strconv.ParseFloat(s, 64); err == nil {
			return s
		}
		return "'" + s
	}
	return s
}
