package elasticity

import (
	"encoding/csv"
	"io"
	"strconv"
	"strings"

	"priceiv/supplyshifters"
)

// WriteDiagnostics writes the instrument diagnostics: text and Markdown
// with supplyshifters' writers, JSON as an object {"diagnostics": …},
// CSV as one row per statistic.
func WriteDiagnostics(w io.Writer, dg *supplyshifters.Diagnostics, format string) error {
	return writeFormat(w, format, map[string]any{"diagnostics": dg}, writers{
		text:     func(w io.Writer) error { return supplyshifters.WriteText(w, dg) },
		csv:      func(w io.Writer) error { return writeDiagnosticsCSV(w, dg) },
		markdown: func(w io.Writer) error { return supplyshifters.WriteMarkdown(w, dg) },
	})
}

func writeDiagnosticsCSV(w io.Writer, dg *supplyshifters.Diagnostics) error {
	cw := csv.NewWriter(w)
	_ = cw.Write([]string{"part", "statistic", "value", "reference", "p_value"})
	num := func(x supplyshifters.Num) string {
		if !x.Finite() {
			return ""
		}
		return strconv.FormatFloat(float64(x), 'g', -1, 64)
	}
	stat := func(part string, s *supplyshifters.Stat) {
		if s != nil && s.Name != "" {
			_ = cw.Write([]string{part, SafeCell(s.Name), num(s.Value), SafeCell(s.Dist), num(s.P)})
		}
	}
	for _, f := range dg.FirstStage {
		stat("first stage: "+f.Endogenous, &f.F)
		_ = cw.Write([]string{"first stage: " + f.Endogenous, "partial R²", num(f.PartialR2), "", ""})
	}
	if v := dg.WeakIV; v != nil {
		stat("weak instruments", &v.CraggDonald)
		stat("weak instruments", &v.KPWald)
		stat("weak instruments", &v.KPLM)
		if e := v.Effective; e != nil {
			_ = cw.Write([]string{"weak instruments", "effective F", num(e.F), "critical " + num(e.Critical), ""})
		}
	}
	if o := dg.Overid; o != nil && o.Available {
		stat("over-identification", o.Sargan)
		stat("over-identification", o.HansenJ)
		stat("over-identification", o.MTimesF)
		for _, c := range o.C {
			if c.Available {
				_ = cw.Write([]string{"over-identification", SafeCell("C without " + strings.Join(c.Shifters, "+")), num(c.Value), SafeCell(c.Dist), num(c.P)})
			}
		}
	}
	if e := dg.Endogeneity; e != nil {
		stat("endogeneity", &e.Test)
	}
	if a := dg.AndersonRubin; a != nil && a.Available {
		lo, hi := "", ""
		if a.CILow != nil {
			lo = strconv.FormatFloat(*a.CILow, 'g', -1, 64)
		}
		if a.CIHigh != nil {
			hi = strconv.FormatFloat(*a.CIHigh, 'g', -1, 64)
		}
		_ = cw.Write([]string{"anderson-rubin", "band low", lo, a.Shape, ""})
		_ = cw.Write([]string{"anderson-rubin", "band high", hi, a.Shape, ""})
	}
	cw.Flush()
	return cw.Error()
}
