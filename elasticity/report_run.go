package elasticity

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"

	"gonum.org/v1/gonum/mat"

	"priceiv/demand"
	"priceiv/ivcore"
	"priceiv/supplyshifters"
)

// Section names of a report, in report order.
const (
	SectionPooled   = "pooled"
	SectionProducts = "products"
	SectionCross    = "cross"
	SectionShifters = "shifters"
	SectionMargins  = "margins"
	SectionWhatIfs  = "whatifs"
	SectionScreen   = "screen"
)

var sectionTitles = map[string]string{
	SectionPooled:   "All products together (pooled model)",
	SectionProducts: "Own-price elasticity of each product",
	SectionCross:    "Own- and cross-price elasticities",
	SectionShifters: "Are the cost shifters credible?",
	SectionMargins:  "Margins the elasticities imply",
	SectionWhatIfs:  "What if prices move",
	SectionScreen:   "Which cost shifters to use (screen of candidates)",
}

// WholeLine labels the rows of a what-if that sum over all products.
const WholeLine = "whole line"

// DefaultWhatIfMove is the price move simulated for each product when a
// report is given no what-ifs.
const DefaultWhatIfMove = "+5%"

// ReportInput is what RunReport works from: the panel, the spec of each
// design, and what margins and what-ifs need besides the data.
type ReportInput struct {
	// Title heads the report.
	Title string
	// Panel is the data as loaded (before the specs' derived columns and
	// filters, which each design applies itself).
	Panel *demand.Panel
	// Pooled, ByProduct and Cross are the specs of the pooled model, the
	// per-product models (the product column in Product or By) and the
	// cross-price model (Product, Unit and Time set). A nil spec skips
	// its section; Skip then says why.
	Pooled, ByProduct, Cross *demand.Spec
	// Screen, when not nil, is a spec whose shifters are candidates to
	// screen alone and in combinations (supplyshifters.Screen).
	Screen *demand.Spec
	Skip   map[string]string
	// Prices are the current prices, unit costs, units per period and
	// owners of the products (optional), read from PricesSource.
	Prices       []PriceRow
	PricesSource string
	// UnitCosts are unit costs known from elsewhere (used when Prices
	// gives none), described by CostSource.
	UnitCosts  map[string]float64
	CostSource string
	// WhatIfs are the scenarios to simulate, each one or more moves
	// "PRODUCT=+5%", "PRODUCT=-3%" or "PRODUCT=4.20" joined by "; ".
	// None means DefaultWhatIfMove on each product alone.
	WhatIfs []string
	// Bootstrap is the number of cluster bootstrap replicates of the
	// cross-price matrix (0: none; bands of what-ifs then come from the
	// delta method), drawn from Seed.
	Bootstrap int
	Seed      uint64
	// Truth holds true values to compare with (the demo market), or nil.
	Truth *KnownTruth
	// Workers bounds the goroutines (0: all cores).
	Workers int
	// Record is the run record so far (inputs, version, start time);
	// RunReport adds the specs and seeds.
	Record RunRecord
}

// KnownTruth holds the true values behind generated data.
type KnownTruth struct {
	// Own maps a product to its true own-price elasticity.
	Own map[string]float64
	// Pooled is what the pooled model estimates (when PooledDefined).
	Pooled        float64
	PooledDefined bool
}

// productStats describes where a product's prices and units sit in the
// data.
type productStats struct {
	meanPrice, minPrice, maxPrice float64
	// meanUnits is per row (store-week); perPeriod per period (all
	// stores), with period naming it.
	meanUnits, perPeriod float64
	period               string
	rows                 int
}

// plotData keeps what the pictures need beyond the tables.
type plotData struct {
	pooledDesign *demand.Design
	pooledFit    *ivcore.Fit
	pooledDiag   *supplyshifters.Diagnostics
	products     *demand.ProductTable
	stats        map[string]productStats
	// order lists the products of the margins, in table order.
	order []string
}

// RunReport runs the whole workflow of a report: the pooled model with
// its diagnostics, one model per product with Anderson-Rubin bands and
// diagnostics, the cross-price matrix (with joint bootstrap draws when
// asked), the margins each own-price elasticity implies at current
// prices, product-line margins, and the what-ifs. A part that cannot be
// computed leaves its tables empty and its Section says why; RunReport
// returns an error only when no elasticity at all could be estimated.
func RunReport(in ReportInput) (*ReportData, error) {
	if in.Panel == nil {
		panic("elasticity: RunReport needs a panel")
	}
	r := &ReportData{
		Title: in.Title, Level: 0.95, Record: in.Record,
		Terms: []TermRow{}, Elasticities: []ElasticityRow{}, Cross: []CrossRow{}, Shifters: []ShifterRow{},
		Tests: []TestRow{}, Markups: []MarkupRow{}, WhatIfs: []WhatIfRow{}, Diagnostics: []ModelDiagnostics{},
		Warnings: []string{}, Assumptions: []string{}, Cautions: append([]string(nil), Cautions...),
		plots: &plotData{stats: map[string]productStats{}},
	}
	if r.Title == "" {
		r.Title = "Price response and margins"
	}
	if err := checkWhatIfs(in); err != nil {
		return nil, err
	}
	for _, s := range []*demand.Spec{in.Pooled, in.ByProduct, in.Cross} {
		if s != nil && s.Level > 0 {
			r.Level = s.Level
			break
		}
	}
	r.Record.Seed, r.Record.Bootstrap = in.Seed, in.Bootstrap
	for _, u := range []struct {
		name string
		s    *demand.Spec
	}{{"pooled", in.Pooled}, {"per product", in.ByProduct}, {"cross-price", in.Cross}} {
		if u.s != nil {
			r.Record.Specs = append(r.Record.Specs, UsedSpec{Model: u.name, YAML: string(u.s.Marshal())})
		}
	}

	status := map[string]Section{}
	set := func(name string, err error, skip string) {
		s := Section{Name: name, Title: sectionTitles[name], Done: err == nil && skip == ""}
		switch {
		case skip != "":
			s.Reason = skip
		case err != nil:
			s.Reason = err.Error()
		}
		status[name] = s
	}
	skipped := func(name string) string {
		if why := in.Skip[name]; why != "" {
			return why
		}
		return "not asked for"
	}

	var pooledE *ElasticityRow
	if in.Pooled != nil {
		row, err := r.runPooled(in)
		pooledE = row
		set(SectionPooled, err, "")
	} else {
		set(SectionPooled, nil, skipped(SectionPooled))
	}
	var table *demand.ProductTable
	if in.ByProduct != nil {
		t, err := r.runProducts(in)
		table = t
		set(SectionProducts, err, "")
	} else {
		set(SectionProducts, nil, skipped(SectionProducts))
	}
	var cross *demand.CrossPrice
	var draws [][]float64
	if in.Cross != nil {
		c, d, err := r.runCross(in)
		cross, draws = c, d
		set(SectionCross, err, "")
	} else {
		set(SectionCross, nil, skipped(SectionCross))
	}
	if pooledE != nil {
		r.Elasticities = append(r.Elasticities, *pooledE)
	}
	if len(r.Shifters) > 0 {
		set(SectionShifters, nil, "")
	} else {
		set(SectionShifters, errors.New("no model with cost shifters could be estimated, so there is nothing to diagnose"), "")
	}
	if table == nil && cross == nil && pooledE == nil {
		var why []string
		for _, n := range []string{SectionPooled, SectionProducts, SectionCross} {
			why = append(why, sectionTitles[n]+": "+status[n].Reason)
		}
		return nil, fmt.Errorf("no elasticity could be estimated, so there is nothing to report (%s)", strings.Join(why, "; "))
	}

	r.productStats(in, table, cross)
	est, estErr := r.estimates(in, table, cross, pooledE, draws)
	set(SectionMargins, r.margins(in, table, cross, pooledE, draws), "")
	if estErr != nil {
		set(SectionWhatIfs, estErr, "")
	} else {
		set(SectionWhatIfs, r.whatIfs(in, est), "")
	}
	r.truth(in)
	if in.Screen != nil {
		set(SectionScreen, r.runScreen(in), "")
	} else {
		set(SectionScreen, nil, skipped(SectionScreen))
	}
	for _, n := range []string{SectionPooled, SectionProducts, SectionCross, SectionShifters, SectionScreen, SectionMargins, SectionWhatIfs} {
		r.Sections = append(r.Sections, status[n])
	}
	r.Warnings = uniqueStrings(r.Warnings)
	r.Assumptions = uniqueStrings(r.Assumptions)
	return r, nil
}

// runPooled fits the pooled model, diagnoses its shifters and fills the
// pooled tables. It returns the pooled elasticity row (nil outside the
// demand form).
func (r *ReportData) runPooled(in ReportInput) (*ElasticityRow, error) {
	spec := *in.Pooled
	spec.By, spec.Interact, spec.Cross = "", "", false
	p, drops, err := demand.Prepare(in.Panel, &spec)
	if err != nil {
		return nil, err
	}
	d, err := demand.Build(p, &spec, in.Workers)
	if err != nil {
		return nil, err
	}
	d.Dropped = append(drops, d.Dropped...)
	fit, fs, err := d.Fit()
	if err != nil {
		return nil, err
	}
	res := d.Summarize(fit, fs)
	info := &PooledInfo{
		Source: res.Source, N: res.N, Form: res.Form, Outcome: res.Outcome, Estimator: res.Estimator,
		VcovDetail: res.VcovDetail, SmallSample: res.SmallSample, Shifters: nonNilS(res.Instruments),
		Controls: nonNilS(res.Controls), FE: nonNilS(spec.FE), Dropped: []string{}, Notes: nonNilS(res.Notes),
	}
	for _, dr := range res.Dropped {
		what := dr.Reason
		if dr.Column != "" {
			what += " (" + dr.Column + ")"
		}
		info.Dropped = append(info.Dropped, fmt.Sprintf("%d rows: %s", dr.Rows, what))
	}
	r.Pooled = info
	for _, c := range res.Coeffs {
		r.Terms = append(r.Terms, TermRow{Term: Text(c.Name), Estimate: Number(c.Estimate), StdError: Number(c.StdError),
			Low: Number(c.CILow), High: Number(c.CIHigh), PValue: Number(c.PValue)})
	}
	r.plots.pooledDesign, r.plots.pooledFit = d, fit
	var dg *supplyshifters.Diagnostics
	if len(d.Model.Instr) > 0 && len(d.Model.Endog) > 0 {
		dg, err = diagnoseDesign(d, fit, &spec, supplyshifters.PartAll)
		if err != nil {
			r.Warnings = append(r.Warnings, "pooled model: the shifter diagnostics could not be computed: "+err.Error())
			dg = nil
		} else {
			r.plots.pooledDiag = dg
			r.Diagnostics = append(r.Diagnostics, ModelDiagnostics{Model: "pooled", Diagnostics: dg})
			r.addDiagnostics("pooled", dg)
		}
	}
	if len(res.Elasticity) == 0 {
		return nil, nil
	}
	e := res.Elasticity[0]
	row := &ElasticityRow{
		Product: "all products", Model: "pooled", Rows: e.N, Elasticity: Number(e.OwnPrice), StdError: Number(e.StdError),
		Level: Number(res.Level), WaldLow: Number(e.CILow), WaldHigh: Number(e.CIHigh), ARLow: nan, ARHigh: nan,
		FirstStageF: nan, EffectiveF: nan, Shifters: Text(strings.Join(res.Instruments, ", ")),
	}
	if len(res.FirstStage) > 0 {
		row.FirstStageF = Number(res.FirstStage[0].FStat)
	}
	var warn []string
	if dg != nil {
		if ar := dg.AndersonRubin; ar != nil && ar.Available {
			j := fit.Index(d.Names[d.Model.Endog[0]])
			scale := 1.0
			if b := fit.Coef[j]; b != 0 {
				scale = e.OwnPrice / b
			}
			rb := scaleBand(ar.Pieces, scale, res.Level)
			row.ARBand = Text(FormatRobustBand(rb))
			row.ARLow, row.ARHigh = hullOf(rb)
		}
		if w := dg.WeakIV; w != nil && w.Effective != nil {
			row.EffectiveF = Number(w.Effective.F)
		}
	}
	row.Reading = Text(Classify(e.OwnPrice, e.CILow, e.CIHigh).String())
	if e.OwnPrice > -1 {
		warn = append(warn, InelasticCaution("all products (pooled)", e.OwnPrice, e.CILow, e.CIHigh))
	}
	row.Warnings = Text(strings.Join(warn, "; "))
	return row, nil
}

// runProducts fits one model per product, with Anderson-Rubin bands and
// the diagnostics of each product's shifters.
func (r *ReportData) runProducts(in ReportInput) (*demand.ProductTable, error) {
	spec := *in.ByProduct
	if spec.By == "" {
		spec.By = spec.Product
	}
	spec.Interact, spec.Cross = "", false
	p, drops, err := demand.Prepare(in.Panel, &spec)
	if err != nil {
		return nil, err
	}
	s := spec
	s.Product = spec.By
	t, err := demand.EstimateByProduct(p, &s, in.Workers)
	if err != nil {
		return nil, err
	}
	t.Dropped = append(drops, t.Dropped...)
	FillRobust(t)
	r.plots.products = t
	if r.Level == 0 {
		r.Level = t.Level
	}
	for k, e := range t.Elasticities {
		row := ElasticityRow{
			Product: Text(e.Product), Model: "per product", Rows: e.N, Elasticity: nan, StdError: nan, Level: Number(e.Level),
			WaldLow: nan, WaldHigh: nan, ARLow: nan, ARHigh: nan, FirstStageF: nan, EffectiveF: nan,
			Shifters: Text(strings.Join(t.Shifters, ", ")), Warnings: Text(strings.Join(e.Warnings, "; ")),
		}
		if e.Failed {
			row.Reading = "not estimated"
			r.Elasticities = append(r.Elasticities, row)
			r.Warnings = append(r.Warnings, e.Product+": "+strings.Join(e.Warnings, "; "))
			continue
		}
		row.Elasticity, row.StdError = Number(e.OwnPrice), Number(e.StdError)
		row.WaldLow, row.WaldHigh = Number(e.CILow), Number(e.CIHigh)
		row.FirstStageF = Number(e.FirstStageF)
		if e.EffectiveF != nil {
			row.EffectiveF = Number(*e.EffectiveF)
		}
		if e.AR != nil {
			row.ARBand = Text(FormatRobustBand(e.AR))
			row.ARLow, row.ARHigh = hullOf(e.AR)
		}
		row.Reading = Text(Classify(e.OwnPrice, e.CILow, e.CIHigh).String())
		r.Elasticities = append(r.Elasticities, row)
		for _, w := range e.Warnings {
			r.Warnings = append(r.Warnings, e.Product+": "+w)
		}
		pf := t.Fits[k]
		if pf == nil {
			continue
		}
		dg, err := diagnoseDesign(pf.Design, pf.Fit, &spec, supplyshifters.PartAll&^supplyshifters.PartGrouped)
		if err != nil {
			r.Warnings = append(r.Warnings, e.Product+": the shifter diagnostics could not be computed: "+err.Error())
			continue
		}
		r.Diagnostics = append(r.Diagnostics, ModelDiagnostics{Model: e.Product, Diagnostics: dg})
		r.addDiagnostics(e.Product, dg)
	}
	return t, nil
}

// runCross fits the cross-price matrix and, when asked, draws it jointly
// by a cluster bootstrap of every equation with the same seed (the
// equations share their rows, so the same clusters are drawn in each).
func (r *ReportData) runCross(in ReportInput) (*demand.CrossPrice, [][]float64, error) {
	spec := *in.Cross
	spec.By, spec.Interact, spec.Cross = "", "", true
	if spec.Product == "" {
		return nil, nil, fmt.Errorf("%w: the cross-price model needs the product column: set product: in the spec", demand.ErrSpec)
	}
	p, _, err := demand.Prepare(in.Panel, &spec)
	if err != nil {
		return nil, nil, err
	}
	c, err := demand.EstimateCross(p, &spec, in.Workers)
	if err != nil {
		return nil, nil, err
	}
	info := &CrossInfo{
		Products: c.Products, Unit: c.Unit, Time: c.Time, Keys: c.Matched.Keys, Complete: c.Matched.Complete,
		Specific: c.Specific, Common: c.Common, Instruments: c.Instruments, Estimator: c.Estimator,
		VcovDetail: c.VcovDetail, Warnings: nonNilS(c.Warnings),
	}
	r.CrossInfo = info
	for _, w := range c.Warnings {
		r.Warnings = append(r.Warnings, "cross-price matrix: "+w)
	}
	n := len(c.Products)
	var draws [][]float64
	if in.Bootstrap > 0 {
		if err := BootstrapCross(c, in.Bootstrap, in.Seed, nil); err != nil {
			r.Warnings = append(r.Warnings, "cross-price bootstrap not used: "+err.Error())
		} else {
			for _, m := range c.BootstrapDraws {
				flat := make([]float64, 0, n*n)
				for _, row := range m {
					flat = append(flat, row...)
				}
				draws = append(draws, flat)
			}
			info.Bootstrap = len(draws)
			info.BootstrapNote = []string{fmt.Sprintf("pairs cluster bootstrap of every equation with the same seed (%d) over one coding of the %d clusters, so each draw of the matrix resamples the same clusters in every equation; %d of %d replicates succeeded in every equation",
				in.Seed, c.Bootstrap.Clusters, len(draws), in.Bootstrap)}
		}
	}
	for i := range n {
		for j := range n {
			row := CrossRow{
				UnitsOf: Text(c.Products[i]), PriceOf: Text(c.Products[j]), Own: i == j,
				Elasticity: Number(c.Matrix[i][j]), StdError: Number(c.StdErrors[i][j]), Level: Number(c.Level),
				WaldLow: Number(c.CILow[i][j]), WaldHigh: Number(c.CIHigh[i][j]), BootLow: nan, BootHigh: nan,
				FirstStageF: Number(c.FirstStageF[i][j]), Rows: c.N[i],
			}
			if bb := c.Bootstrap; bb != nil {
				row.BootLow, row.BootHigh = Number(bb.CILow[i][j]), Number(bb.CIHigh[i][j])
			}
			r.Cross = append(r.Cross, row)
		}
	}
	return c, draws, nil
}

// runScreen screens the candidate shifters of the screen spec alone and
// in combinations and fills the screen table.
func (r *ReportData) runScreen(in ReportInput) error {
	spec := *in.Screen
	spec.By, spec.Interact, spec.Cross = "", "", false
	if len(spec.Shifters) < 2 {
		return errors.New("a screen compares combinations of at least two candidate shifters")
	}
	p, _, err := demand.Prepare(in.Panel, &spec)
	if err != nil {
		return err
	}
	d, err := demand.Build(p, &spec, in.Workers)
	if err != nil {
		return err
	}
	signs, err := spec.ExpectedSigns()
	if err != nil {
		return err
	}
	res, err := supplyshifters.Screen(d, spec.Shifters, supplyshifters.ScreenOptions{ExpectSign: signs, Workers: in.Workers})
	if err != nil {
		return err
	}
	r.ScreenInfo = &ScreenInfo{Candidates: res.Candidates, Controls: nonNilS(res.Controls), Combinations: res.Combinations,
		N: res.N, Rule: res.Rule, Notes: nonNilS(res.Notes)}
	for _, row := range res.Rows {
		sr := ScreenRow{
			Rank: row.Rank, Shifters: Text(strings.Join(row.Shifters, ", ")), Verdict: Text(row.Verdict),
			EffectiveF: Number(row.EffectiveF), Critical: Number(row.Critical), PartialR2: Number(row.PartialR2),
			HansenJ: Number(row.J), HansenJP: Number(row.JP), Suspects: Text(strings.Join(row.Suspects, ", ")),
			Elasticity: Number(row.Elasticity), WaldLow: Number(row.WaldLow), WaldHigh: Number(row.WaldHigh),
			ARLow: nan, ARHigh: nan, ARShape: Text(row.ARShape), Reasons: Text(strings.Join(row.Reasons, "; ")),
		}
		if row.ARLow != nil {
			sr.ARLow = Number(*row.ARLow)
		}
		if row.ARHigh != nil {
			sr.ARHigh = Number(*row.ARHigh)
		}
		r.Screen = append(r.Screen, sr)
	}
	return nil
}

// diagnoseDesign computes the evidence on a design's shifters, with the
// signs the spec expects of them.
func diagnoseDesign(d *demand.Design, fit *ivcore.Fit, spec *demand.Spec, parts supplyshifters.Part) (*supplyshifters.Diagnostics, error) {
	signs, err := spec.ExpectedSigns()
	if err != nil {
		return nil, err
	}
	return supplyshifters.Diagnose(d, fit, supplyshifters.Options{ExpectSign: signs, Level: d.Level, Parts: parts})
}

// addDiagnostics adds the shifter and test rows of one model.
func (r *ReportData) addDiagnostics(model string, dg *supplyshifters.Diagnostics) {
	alpha := 1 - dg.Level
	strong, strongWhy := true, ""
	modelF := nan
	var eff *supplyshifters.EffectiveFTest
	if dg.WeakIV != nil {
		eff = dg.WeakIV.Effective
	}
	if len(dg.FirstStage) > 0 {
		modelF = Number(dg.FirstStage[0].F.Value)
	}
	switch {
	case eff != nil && eff.F.Finite() && eff.Critical.Finite():
		if !eff.Strong {
			strong = false
			strongWhy = fmt.Sprintf("the shifters are weak together (effective F %.1f below its critical value %.1f)", float64(eff.F), float64(eff.Critical))
		}
	case modelF.Finite():
		if modelF.F() < demand.WeakF {
			strong = false
			strongWhy = fmt.Sprintf("the shifters are weak together (first-stage F %.1f below %d)", modelF.F(), demand.WeakF)
		}
	}
	cp := map[string]supplyshifters.CTest{}
	overidRejected := false
	if o := dg.Overid; o != nil && o.Available {
		for _, ct := range o.C {
			if len(ct.Shifters) == 1 && ct.Available {
				cp[ct.Shifters[0]] = ct
			}
		}
		main := o.HansenJ
		if main == nil || !main.Value.Finite() {
			main = o.Sargan
		}
		if main != nil && main.P.Finite() && float64(main.P) < alpha {
			overidRejected = true
		}
	}
	for _, fsd := range dg.FirstStage {
		for _, sh := range fsd.Shifters {
			row := ShifterRow{
				Model: Text(model), Shifter: Text(sh.Name), Coefficient: Number(sh.Estimate), StdError: Number(sh.StdError),
				T: Number(sh.T), PValue: Number(sh.P), PartialR2: Number(sh.PartialR2), SignCheck: Text(sh.SignCheck),
				ModelF: Number(fsd.F.Value), EffectiveF: nan, EffectiveCritical: nan, OveridP: nan,
			}
			if eff != nil {
				row.EffectiveF, row.EffectiveCritical = Number(eff.F), Number(eff.Critical)
			}
			var why []string
			if sh.SignCheck == supplyshifters.SignWrong {
				why = append(why, "it moves price the wrong way for a cost")
			}
			if sh.P.Finite() && float64(sh.P) >= alpha {
				why = append(why, fmt.Sprintf("its effect on price is not distinguishable from zero (p = %.3f)", float64(sh.P)))
			}
			if !strong {
				why = append(why, strongWhy)
			}
			if ct, ok := cp[sh.Name]; ok {
				row.OveridP = Number(ct.P)
				if ct.P.Finite() && float64(ct.P) < alpha {
					why = append(why, fmt.Sprintf("it disagrees with the other shifters about the elasticity (difference-in-J p = %.3f): it may move demand directly", float64(ct.P)))
				}
			} else if overidRejected {
				why = append(why, "the shifters disagree with each other about the elasticity (over-identification test rejected)")
			}
			row.Passed = len(why) == 0
			if row.Passed {
				v := "passed: raises price as a cost should, clearly different from zero"
				if strong {
					v += ", strong enough with the other shifters"
				}
				if _, ok := cp[sh.Name]; ok {
					v += ", agrees with the other shifters"
				} else if dg.Overid != nil && !dg.Overid.Available {
					v += " (validity not testable: the model is exactly identified)"
				}
				row.Verdict = Text(v)
			} else {
				row.Verdict = Text("not passed: " + strings.Join(why, "; "))
			}
			r.Shifters = append(r.Shifters, row)
		}
	}
	add := func(test string, st supplyshifters.Stat, crit Number, passed bool) {
		r.Tests = append(r.Tests, TestRow{Model: Text(model), Test: Text(test), Statistic: Number(st.Value), Distribution: Text(st.Dist),
			PValue: Number(st.P), Critical: crit, Passed: passed, Meaning: Text(st.Meaning)})
	}
	for _, fsd := range dg.FirstStage {
		add("first-stage F ("+fsd.Endogenous+")", fsd.F, Number(demand.WeakF), float64(fsd.F.Value) >= demand.WeakF)
	}
	if w := dg.WeakIV; w != nil {
		if e := w.Effective; e != nil {
			add("effective F (Montiel Olea-Pflueger)", supplyshifters.Stat{Value: e.F, P: supplyshifters.Num(math.NaN()), Meaning: e.Meaning}, Number(e.Critical), e.Strong)
		}
		crit := nan
		passed := false
		for _, sy := range w.StockYogo {
			if sy.Table == "TSLS relative bias" && sy.Threshold == 0.10 || sy.Table == "LIML size" && sy.Threshold == 0.10 {
				crit, passed = Number(sy.Critical), sy.Exceeded
			}
		}
		if !crit.Finite() && len(w.StockYogo) > 0 {
			crit, passed = Number(w.StockYogo[0].Critical), w.StockYogo[0].Exceeded
		}
		add("Cragg-Donald F (iid errors; Stock-Yogo)", w.CraggDonald, crit, passed)
		add("Kleibergen-Paap rk LM (identified at all?)", w.KPLM, nan, w.KPLM.P.Finite() && float64(w.KPLM.P) < alpha)
	}
	if o := dg.Overid; o != nil {
		if o.Available {
			if o.HansenJ != nil {
				add("Hansen J (do the shifters agree?)", *o.HansenJ, nan, !(o.HansenJ.P.Finite() && float64(o.HansenJ.P) < alpha))
			}
		} else {
			r.Tests = append(r.Tests, TestRow{Model: Text(model), Test: "over-identification", Statistic: nan, PValue: nan, Critical: nan,
				Passed: false, Meaning: Text(o.Reason)})
		}
	}
	if e := dg.Endogeneity; e != nil {
		add("endogeneity (does price need instrumenting?)", e.Test, nan, e.Test.P.Finite() && float64(e.Test.P) < alpha)
	}
	for _, w := range dg.Warnings {
		r.Warnings = append(r.Warnings, model+" model: "+w)
	}
}

// productStats records where each product's prices and units sit in the
// data, from the per-product spec (or the cross or pooled one).
func (r *ReportData) productStats(in ReportInput, t *demand.ProductTable, c *demand.CrossPrice) {
	spec := in.ByProduct
	col := ""
	switch {
	case spec != nil:
		col = spec.By
		if col == "" {
			col = spec.Product
		}
	case in.Cross != nil:
		spec, col = in.Cross, in.Cross.Product
	case in.Pooled != nil:
		spec, col = in.Pooled, in.Pooled.Product
	}
	if spec == nil || col == "" || !spec.DemandForm() {
		return
	}
	s := *spec
	s.By, s.Interact, s.Cross = "", "", false
	p, _, err := demand.Prepare(in.Panel, &s)
	if err != nil {
		return
	}
	codes, levels, err := p.IDs(col)
	if err != nil {
		return
	}
	price, err1 := p.Float(s.Price)
	qty, err2 := p.Float(s.Quantity)
	if err1 != nil || err2 != nil {
		return
	}
	var tcodes []int32
	period := "row"
	if s.Time != "" && p.Has(s.Time) {
		if tc, _, err := p.IDs(s.Time); err == nil {
			tcodes, period = tc, s.Time+" (all "+orDefault(s.Unit, "markets")+"s)"
		}
	}
	type acc struct {
		n              int
		sp, sq, lo, hi float64
		periods        map[int32]bool
	}
	a := make([]acc, len(levels))
	for l := range a {
		a[l] = acc{lo: math.Inf(1), hi: math.Inf(-1), periods: map[int32]bool{}}
	}
	for i, cd := range codes {
		if cd < 0 || !(price[i] > 0) || math.IsNaN(qty[i]) {
			continue
		}
		x := &a[cd]
		x.n++
		x.sp += price[i]
		x.sq += qty[i]
		x.lo = math.Min(x.lo, price[i])
		x.hi = math.Max(x.hi, price[i])
		if tcodes != nil && tcodes[i] >= 0 {
			x.periods[tcodes[i]] = true
		}
	}
	for l, x := range a {
		if x.n == 0 {
			continue
		}
		st := productStats{meanPrice: x.sp / float64(x.n), minPrice: x.lo, maxPrice: x.hi, meanUnits: x.sq / float64(x.n), rows: x.n, period: period}
		st.perPeriod = st.meanUnits
		if len(x.periods) > 0 {
			st.perPeriod = x.sq / float64(len(x.periods))
		}
		r.plots.stats[levels[l]] = st
	}
}

func orDefault(s, d string) string {
	if s == "" {
		return d
	}
	return s
}

// ownEstimate is one product's own-price elasticity for margins.
type ownEstimate struct {
	own   OwnElasticity
	ok    bool
	model string
}

// reportProducts lists the products of the margins and what-ifs with
// their own-price elasticity: per product when estimated, else the
// diagonal of the cross-price matrix, else the pooled elasticity for
// every product of the data.
func (r *ReportData) reportProducts(table *demand.ProductTable, cross *demand.CrossPrice, pooled *ElasticityRow) ([]string, map[string]ownEstimate) {
	own := map[string]ownEstimate{}
	var names []string
	switch {
	case table != nil:
		for _, e := range table.Elasticities {
			names = append(names, e.Product)
			if !e.Failed {
				own[e.Product] = ownEstimate{own: OwnElasticity{Product: e.Product, E: e.OwnPrice, Lo: e.CILow, Hi: e.CIHigh, SE: e.StdError, Band: "Wald"}, ok: true, model: "per product"}
			}
		}
	case cross != nil:
		for i, p := range cross.Products {
			names = append(names, p)
			own[p] = ownEstimate{own: OwnElasticity{Product: p, E: cross.Matrix[i][i], Lo: cross.CILow[i][i], Hi: cross.CIHigh[i][i], SE: cross.StdErrors[i][i], Band: "Wald"}, ok: true, model: "cross-price diagonal"}
		}
	case pooled != nil:
		for p := range r.plots.stats {
			names = append(names, p)
		}
		sort.Strings(names)
		for _, p := range names {
			own[p] = ownEstimate{own: OwnElasticity{Product: p, E: pooled.Elasticity.F(), Lo: pooled.WaldLow.F(), Hi: pooled.WaldHigh.F(), SE: pooled.StdError.F(), Band: "Wald (pooled)"}, ok: true, model: "pooled"}
		}
	}
	return names, own
}

// baseline holds the current position of each product.
type baseline struct {
	price, cost, units           float64
	priceSource, costSource, per string
	owner                        string
}

// baselines gives each product's current price (the prices file, else
// the mean price in the data), unit cost (the prices file, else the
// known unit costs) and units per period.
func (r *ReportData) baselines(in ReportInput, names []string) map[string]baseline {
	out := map[string]baseline{}
	prices := map[string]PriceRow{}
	for _, p := range in.Prices {
		prices[p.Product] = p
	}
	for _, n := range names {
		b := baseline{price: math.NaN(), cost: math.NaN(), units: math.NaN()}
		if st, ok := r.plots.stats[n]; ok {
			b.price, b.priceSource = st.meanPrice, "mean price in the data"
			b.units, b.per = st.perPeriod, "per "+st.period
		}
		if c, ok := in.UnitCosts[n]; ok && c > 0 {
			b.cost, b.costSource = c, orDefault(in.CostSource, "given")
		}
		if p, ok := prices[n]; ok {
			src := orDefault(in.PricesSource, "prices file")
			if p.Price != nil {
				b.price, b.priceSource = *p.Price, src
			}
			if p.UnitCost != nil {
				b.cost, b.costSource = *p.UnitCost, src
			}
			if p.Quantity != nil {
				b.units, b.per = *p.Quantity, "per period ("+src+")"
			}
			b.owner = p.Owner
		}
		out[n] = b
	}
	return out
}

// margins fills the markups table: the inverse-elasticity margins of each
// product and, with a cross-price matrix and every product's units, the
// product-line margins.
func (r *ReportData) margins(in ReportInput, table *demand.ProductTable, cross *demand.CrossPrice, pooled *ElasticityRow, draws [][]float64) error {
	names, own := r.reportProducts(table, cross, pooled)
	if len(names) == 0 {
		return errors.New("no product has an own-price elasticity")
	}
	r.plots.order = names
	base := r.baselines(in, names)
	line := map[string]LineMarkup{}
	if cross != nil {
		lr, note := r.lineMarkups(cross, base, draws)
		if lr != nil {
			for _, row := range lr.Rows {
				line[row.Product] = row
				if row.Caution != "" {
					r.Warnings = append(r.Warnings, row.Caution)
				}
			}
		} else if note != "" {
			r.Assumptions = append(r.Assumptions, "Product-line margins not shown: "+note)
		}
	}
	for _, n := range names {
		b := base[n]
		row := MarkupRow{
			Product: Text(n), Owner: Text(b.owner), Price: Number(b.price), PriceSource: Text(b.priceSource),
			UnitCost: Number(b.cost), CostSource: Text(b.costSource), Units: Number(b.units), UnitsPeriod: Text(b.per),
			Elasticity: nan, ElasticityLow: nan, ElasticityHigh: nan,
			Lerner: nan, LernerLow: nan, LernerHigh: nan, MarginalCost: nan, MarginalCostLow: nan, MarginalCostHigh: nan,
			ProfitMaxPrice: nan, ProfitMaxPriceLow: nan, ProfitMaxPriceHigh: nan, LineLerner: nan, LineLernerLow: nan, LineLernerHigh: nan,
		}
		if l, ok := line[n]; ok {
			row.LineLerner, row.LineLernerLow, row.LineLernerHigh = Number(l.Lerner.Est), Number(l.Lerner.Lo), Number(l.Lerner.Hi)
		}
		oe, ok := own[n]
		switch {
		case !ok:
			row.Caution = "no own-price elasticity was estimated for this product"
		case !(b.price > 0):
			row.Caution = "no current price is known for this product: give one in the prices file"
		default:
			m := MarkupOf(oe.own, b.price, b.cost)
			row.Elasticity, row.ElasticityLow, row.ElasticityHigh = Number(m.Elasticity.Est), Number(m.Elasticity.Lo), Number(m.Elasticity.Hi)
			row.Band = Text(m.Band)
			row.Reading = Text(m.Regime.String())
			row.Lerner, row.LernerLow, row.LernerHigh = Number(m.Lerner.Est), Number(m.Lerner.Lo), Number(m.Lerner.Hi)
			row.MarginalCost, row.MarginalCostLow, row.MarginalCostHigh = Number(m.MarginalCost.Est), Number(m.MarginalCost.Lo), Number(m.MarginalCost.Hi)
			row.ProfitMaxPrice, row.ProfitMaxPriceLow, row.ProfitMaxPriceHigh = Number(m.ProfitMaxPrice.Est), Number(m.ProfitMaxPrice.Lo), Number(m.ProfitMaxPrice.Hi)
			row.Caution = Text(m.Caution)
			if m.Caution != "" {
				r.Warnings = append(r.Warnings, m.Caution)
			}
		}
		r.Markups = append(r.Markups, row)
	}
	r.Assumptions = append(r.Assumptions,
		"Margins read off an own-price elasticity use the inverse-elasticity rule, (p - mc)/p = -1/e: they assume the product is priced to maximise its own profit, with rivals' prices as they are.")
	if cross != nil && len(line) > 0 {
		r.Assumptions = append(r.Assumptions, "Product-line margins solve the first-order conditions of each owner pricing all its products together, with the cross-price elasticities; they assume the same of every owner.")
	}
	return nil
}

// lineMarkups solves the product-line margins with the cross-price matrix.
func (r *ReportData) lineMarkups(c *demand.CrossPrice, base map[string]baseline, draws [][]float64) (*LineResult, string) {
	n := len(c.Products)
	pl := ProductLine{Products: c.Products, E: matOf(c.Matrix), Price: make([]float64, n), Quantity: make([]float64, n), Level: c.Level}
	anyOwner := false
	owners := make([]string, n)
	for j, p := range c.Products {
		b := base[p]
		pl.Price[j], pl.Quantity[j] = b.price, b.units
		if !(b.price > 0) || !(b.units > 0) {
			return nil, fmt.Sprintf("the price and units per period of %q are not known", p)
		}
		owners[j] = b.owner
		anyOwner = anyOwner || b.owner != ""
	}
	if anyOwner {
		for j := range owners {
			if owners[j] == "" {
				owners[j] = "us"
			}
		}
		pl.Owner = owners
	}
	if len(draws) >= ivcore.MinBootstrapReplicates {
		pl.Draws = draws
	}
	lr, err := ProductLineMarkups(pl)
	if err != nil {
		return nil, err.Error()
	}
	return lr, ""
}

func matOf(m [][]float64) *mat.Dense {
	n := len(m)
	d := mat.NewDense(n, n, nil)
	for i, row := range m {
		for j, v := range row {
			d.Set(i, j, v)
		}
	}
	return d
}

// estimates assembles the elasticities the what-ifs use: the cross-price
// matrix when estimated (with its joint draws, or the covariance of each
// equation's coefficients), else the own-price elasticities per product,
// else the pooled one for every product.
func (r *ReportData) estimates(in ReportInput, table *demand.ProductTable, cross *demand.CrossPrice, pooled *ElasticityRow, draws [][]float64) (*Estimates, error) {
	level := r.Level
	switch {
	case cross != nil:
		n := len(cross.Products)
		est := &Estimates{Products: cross.Products, E: matOf(cross.Matrix), SE: matOf(cross.StdErrors), Cross: true,
			OwnLo: make([]float64, n), OwnHi: make([]float64, n), OwnBand: "Wald", Level: cross.Level}
		for i := range n {
			est.OwnLo[i], est.OwnHi[i] = cross.CILow[i][i], cross.CIHigh[i][i]
		}
		if len(cross.Fits) == n {
			est.DF = cross.Fits[0].Fit.Vcov.DF
			est.Cov = crossCov(cross)
		}
		if len(draws) >= ivcore.MinBootstrapReplicates {
			est.Draws = draws
		}
		if est.Cov != nil && est.Draws == nil {
			est.Notes = append(est.Notes, "bands use the covariance of each equation's estimates; estimates of different equations are taken as uncorrelated (ask for a bootstrap for joint bands)")
		}
		return est, nil
	case table != nil:
		var names []string
		var rows []demand.ProductElasticity
		df := 0
		for k, e := range table.Elasticities {
			if e.Failed {
				continue
			}
			names = append(names, e.Product)
			rows = append(rows, e)
			if df == 0 && table.Fits[k] != nil {
				df = table.Fits[k].Fit.Vcov.DF
			}
		}
		n := len(names)
		est := &Estimates{Products: names, E: mat.NewDense(n, n, nil), SE: mat.NewDense(n, n, nil),
			OwnLo: make([]float64, n), OwnHi: make([]float64, n), OwnBand: "Wald", Level: level, DF: df}
		for i, e := range rows {
			est.E.Set(i, i, e.OwnPrice)
			est.SE.Set(i, i, e.StdError)
			est.OwnLo[i], est.OwnHi[i] = e.CILow, e.CIHigh
		}
		return est, nil
	case pooled != nil:
		var names []string
		for p := range r.plots.stats {
			names = append(names, p)
		}
		sort.Strings(names)
		n := len(names)
		if n == 0 {
			return nil, errors.New("the products are not known: set the product column (product:) in the spec")
		}
		est := &Estimates{Products: names, E: mat.NewDense(n, n, nil), SE: mat.NewDense(n, n, nil), Pooled: true,
			OwnLo: make([]float64, n), OwnHi: make([]float64, n), OwnBand: "Wald (pooled)", Level: level}
		if f := r.plots.pooledFit; f != nil {
			est.DF = f.Vcov.DF
		}
		for i := range n {
			est.E.Set(i, i, pooled.Elasticity.F())
			est.SE.Set(i, i, pooled.StdError.F())
			est.OwnLo[i], est.OwnHi[i] = pooled.WaldLow.F(), pooled.WaldHigh.F()
		}
		est.Notes = append(est.Notes, "one pooled elasticity stands for every product's own-price elasticity, and cross-price effects are left out")
		return est, nil
	}
	return nil, errors.New("no elasticity is available for what-ifs")
}

// crossCov returns the covariance of the row-major matrix of elasticities
// with each equation's block from its fit and zero between equations.
func crossCov(c *demand.CrossPrice) *mat.SymDense {
	n := len(c.Products)
	cov := mat.NewSymDense(n*n, nil)
	for i, pf := range c.Fits {
		d, f := pf.Design, pf.Fit
		idx := make([]int, n)
		sc := make([]float64, n)
		for j := range n {
			name := d.Names[d.Model.Endog[j]]
			idx[j] = f.Index(name)
			if idx[j] < 0 {
				return nil
			}
			sc[j] = 1
			if b := f.Coef[idx[j]]; b != 0 {
				sc[j] = c.Matrix[i][j] / b
			}
		}
		for j := range n {
			for k := j; k < n; k++ {
				cov.SetSym(i*n+j, i*n+k, sc[j]*sc[k]*f.Cov.At(idx[j], idx[k]))
			}
		}
	}
	return cov
}

// whatIfs simulates each scenario and fills the what-if table.
func (r *ReportData) whatIfs(in ReportInput, est *Estimates) error {
	products := est.Products
	n := len(products)
	base := r.baselines(in, products)
	b := Baseline{Price: make([]float64, n), Quantity: make([]float64, n), UnitCost: make([]float64, n), PriceMin: make([]float64, n), PriceMax: make([]float64, n)}
	for j, p := range products {
		bl := base[p]
		b.Price[j], b.Quantity[j], b.UnitCost[j] = bl.price, bl.units, bl.cost
		b.PriceMin[j], b.PriceMax[j] = math.NaN(), math.NaN()
		if st, ok := r.plots.stats[p]; ok {
			b.PriceMin[j], b.PriceMax[j] = st.minPrice, st.maxPrice
		}
	}
	scenarios := in.WhatIfs
	if len(scenarios) == 0 {
		for _, p := range products {
			scenarios = append(scenarios, p+"="+DefaultWhatIfMove)
		}
		r.Assumptions = append(r.Assumptions, fmt.Sprintf("No what-ifs were configured, so each product's price is moved by %s on its own.", DefaultWhatIfMove))
	}
	var errs []string
	done := 0
	for _, sc := range scenarios {
		changes, err := parseScenario(sc, products)
		if err != nil {
			errs = append(errs, err.Error())
			continue
		}
		sim, err := Simulate(est, b, changes)
		if err != nil {
			errs = append(errs, fmt.Sprintf("what-if %q: %v", sc, err))
			continue
		}
		done++
		r.Warnings = append(r.Warnings, sim.Warnings...)
		r.Assumptions = append(r.Assumptions, sim.Assumption)
		r.Assumptions = append(r.Assumptions, sim.Notes...)
		for _, row := range sim.Rows {
			r.WhatIfs = append(r.WhatIfs, WhatIfRow{
				Scenario: Text(sc), Product: Text(row.Product), Moved: row.Changed,
				Price: Number(row.Price), NewPrice: Number(row.NewPrice), PriceChange: Number(row.PriceChangePct / 100),
				Units: Number(row.Units), NewUnits: Number(row.NewUnits.Est),
				UnitsChange: Number(row.UnitsPct.Est / 100), UnitsChangeLow: Number(row.UnitsPct.Lo / 100), UnitsChangeHigh: Number(row.UnitsPct.Hi / 100),
				Revenue: Number(row.RevenueChange.Est), RevenueLow: Number(row.RevenueChange.Lo), RevenueHigh: Number(row.RevenueChange.Hi),
				Contribution: Number(row.ContributionChange.Est), ContributionLow: Number(row.ContributionChange.Lo), ContributionHigh: Number(row.ContributionChange.Hi),
				ContributionShare: Number(row.ContributionPct.Est / 100), Extrapolated: row.Extrapolated, Band: Text(sim.Band),
			})
		}
		t := sim.Total
		r.WhatIfs = append(r.WhatIfs, WhatIfRow{
			Scenario: Text(sc), Product: WholeLine, Price: nan, NewPrice: nan, PriceChange: nan, Units: nan, NewUnits: nan,
			UnitsChange: Number(t.UnitsPct.Est / 100), UnitsChangeLow: Number(t.UnitsPct.Lo / 100), UnitsChangeHigh: Number(t.UnitsPct.Hi / 100),
			Revenue: Number(t.RevenueChange.Est), RevenueLow: Number(t.RevenueChange.Lo), RevenueHigh: Number(t.RevenueChange.Hi),
			Contribution: Number(t.ContributionChange.Est), ContributionLow: Number(t.ContributionChange.Lo), ContributionHigh: Number(t.ContributionChange.Hi),
			ContributionShare: Number(t.ContributionPct.Est / 100), Band: Text(sim.Band),
		})
	}
	if len(errs) > 0 {
		if done == 0 {
			return errors.New(strings.Join(errs, "; "))
		}
		r.Warnings = append(r.Warnings, errs...)
	}
	return nil
}

// parseScenario reads one what-if: a single move, or several joined by
// "; " (a product name may itself hold a semicolon only in a one-move
// scenario).
// checkWhatIfs refuses configured what-ifs that name products the panel
// does not have, before any model is fitted: a typo in the spec must not
// quietly leave the section out.
func checkWhatIfs(in ReportInput) error {
	if len(in.WhatIfs) == 0 {
		return nil
	}
	col := ""
	for _, s := range []*demand.Spec{in.ByProduct, in.Cross, in.Pooled} {
		if s == nil {
			continue
		}
		for _, c := range []string{s.By, s.Interact, s.Product} {
			if c != "" && in.Panel.Has(c) {
				col = c
			}
		}
		if col != "" {
			break
		}
	}
	if col == "" {
		return nil
	}
	_, products, err := in.Panel.IDs(col)
	if err != nil {
		return err
	}
	for _, sc := range in.WhatIfs {
		if _, err := parseScenario(sc, products); err != nil {
			return fmt.Errorf("whatifs: %w", err)
		}
	}
	return nil
}

func parseScenario(s string, products []string) ([]Change, error) {
	if c, err := ParseChange(s, products); err == nil {
		return []Change{c}, nil
	}
	var out []Change
	for _, part := range strings.Split(s, ";") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		c, err := ParseChange(part, products)
		if err != nil {
			return nil, fmt.Errorf("what-if %q: %w", s, err)
		}
		out = append(out, c)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("what-if %q holds no price move: write %s", s, changeForms)
	}
	return out, nil
}

// truth compares the estimates with known true values.
func (r *ReportData) truth(in ReportInput) {
	if in.Truth == nil {
		return
	}
	for _, e := range r.Elasticities {
		var tv float64
		what := "own-price elasticity (per-product model)"
		switch {
		case e.Model == "pooled" && in.Truth.PooledDefined:
			tv, what = in.Truth.Pooled, "pooled estimand (a line-wide price move)"
		case e.Model == "per product":
			v, ok := in.Truth.Own[string(e.Product)]
			if !ok || !e.Elasticity.Finite() {
				continue
			}
			tv = v
		default:
			continue
		}
		r.Truth = append(r.Truth, TruthRow{Product: e.Product, What: Text(what), TrueValue: Number(tv), Estimate: e.Elasticity,
			Low: e.WaldLow, High: e.WaldHigh, Covered: tv >= e.WaldLow.F() && tv <= e.WaldHigh.F()})
	}
}

// hullOf returns the lowest and highest point of a robust set, NaN when
// unbounded on that side or empty.
func hullOf(b *demand.RobustBand) (lo, hi Number) {
	lo, hi = nan, nan
	if b == nil || len(b.Pieces) == 0 {
		return
	}
	if p := b.Pieces[0].Low; p != nil {
		lo = Number(*p)
	}
	if p := b.Pieces[len(b.Pieces)-1].High; p != nil {
		hi = Number(*p)
	}
	return
}

func nonNilS(s []string) []string {
	return append([]string{}, s...)
}

func uniqueStrings(s []string) []string {
	out := []string{}
	seen := map[string]bool{}
	for _, v := range s {
		if v == "" || seen[v] {
			continue
		}
		seen[v] = true
		out = append(out, v)
	}
	return out
}
