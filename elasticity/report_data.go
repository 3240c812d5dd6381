package elasticity

import (
	"math"

	"priceiv/supplyshifters"
)

// Number is a float64 that is written as JSON null and as an empty CSV
// cell when it is not a finite number (a value that does not apply, or an
// unbounded band end), so that every table of a report encodes without
// failure: the same type as the diagnostics' numbers.
type Number = supplyshifters.Num

// nan is the Number for "does not apply".
var nan = Number(math.NaN())

// Text is a label written into a table (a product or shifter name, a
// warning). In CSV cells it is neutralised against formula injection with
// SafeCell; the XLSX writer does the same.
type Text string

// MarshalCSV returns SafeCell(t).
func (t Text) MarshalCSV() (string, error) { return SafeCell(string(t)), nil }

// UnmarshalCSV reads the cell as written.
func (t *Text) UnmarshalCSV(s string) error {
	*t = Text(s)
	return nil
}

// The tables of a report. Each row type is one table: its fields, in
// order, are the columns. The tags name the column (csv, json) and how
// the workbook formats it (xlsx):
//
//	text   a label (neutralised against formula injection)
//	int    a count
//	elast  an elasticity, 2 decimals
//	coef   a coefficient or standard error, 4 decimals
//	stat   a test statistic, 1 decimal
//	p      a p-value, 4 decimals
//	pct    a share shown as a percentage (0.05 is 5%)
//	money  a price or amount, 2 decimals with thousands separators
//	units  units, no decimals
//	bool   yes or no
//	wide   a long text (warnings), given a wide column

// ElasticityRow is one own-price elasticity: a product's, or the pooled
// one of all products.
type ElasticityRow struct {
	Product Text `json:"product" csv:"product" xlsx:"text"`
	// Model is "per product" (one regression per product) or "pooled".
	Model Text `json:"model" csv:"model" xlsx:"text"`
	Rows  int  `json:"rows" csv:"rows" xlsx:"int"`
	// Elasticity is the estimate; WaldLow and WaldHigh its band at Level.
	Elasticity Number `json:"elasticity" csv:"elasticity" xlsx:"elast"`
	StdError   Number `json:"std_error" csv:"std_error" xlsx:"coef"`
	Level      Number `json:"level" csv:"level" xlsx:"pct"`
	WaldLow    Number `json:"wald_low" csv:"wald_low" xlsx:"elast"`
	WaldHigh   Number `json:"wald_high" csv:"wald_high" xlsx:"elast"`
	// ARLow and ARHigh are the lowest and highest points of the
	// Anderson-Rubin set (null when unbounded on that side or not
	// computed); ARBand says it in words, including gaps.
	ARLow  Number `json:"ar_low" csv:"ar_low" xlsx:"elast"`
	ARHigh Number `json:"ar_high" csv:"ar_high" xlsx:"elast"`
	ARBand Text   `json:"ar_band" csv:"ar_band" xlsx:"text"`
	// FirstStageF and EffectiveF measure the strength of the shifters.
	FirstStageF Number `json:"first_stage_f" csv:"first_stage_f" xlsx:"stat"`
	EffectiveF  Number `json:"effective_f" csv:"effective_f" xlsx:"stat"`
	// Reading classifies the estimate and band: "elastic", "band
	// crosses -1", "inelastic" or "positive".
	Reading Text `json:"reading" csv:"reading" xlsx:"text"`
	// Shifters lists the shifters that identify the estimate.
	Shifters Text `json:"shifters" csv:"shifters" xlsx:"text"`
	Warnings Text `json:"warnings" csv:"warnings" xlsx:"wide"`
}

// CrossRow is one entry of the cross-price matrix: the elasticity of the
// units of UnitsOf with respect to the price of PriceOf.
type CrossRow struct {
	UnitsOf    Text   `json:"units_of" csv:"units_of" xlsx:"text"`
	PriceOf    Text   `json:"price_of" csv:"price_of" xlsx:"text"`
	Own        bool   `json:"own" csv:"own" xlsx:"bool"`
	Elasticity Number `json:"elasticity" csv:"elasticity" xlsx:"elast"`
	StdError   Number `json:"std_error" csv:"std_error" xlsx:"coef"`
	Level      Number `json:"level" csv:"level" xlsx:"pct"`
	WaldLow    Number `json:"wald_low" csv:"wald_low" xlsx:"elast"`
	WaldHigh   Number `json:"wald_high" csv:"wald_high" xlsx:"elast"`
	// BootLow and BootHigh are bootstrap percentile bands (null without
	// a bootstrap).
	BootLow     Number `json:"bootstrap_low" csv:"bootstrap_low" xlsx:"elast"`
	BootHigh    Number `json:"bootstrap_high" csv:"bootstrap_high" xlsx:"elast"`
	FirstStageF Number `json:"first_stage_f" csv:"first_stage_f" xlsx:"stat"`
	Rows        int    `json:"rows" csv:"rows" xlsx:"int"`
}

// MarkupRow holds the margins one product's own-price elasticity implies
// at its current price.
type MarkupRow struct {
	Product Text `json:"product" csv:"product" xlsx:"text"`
	Owner   Text `json:"owner" csv:"owner" xlsx:"text"`
	// Price is the current price and PriceSource where it came from.
	Price       Number `json:"price" csv:"price" xlsx:"money"`
	PriceSource Text   `json:"price_source" csv:"price_source" xlsx:"text"`
	// UnitCost is the cost of one more unit (null when unknown).
	UnitCost   Number `json:"unit_cost" csv:"unit_cost" xlsx:"money"`
	CostSource Text   `json:"cost_source" csv:"cost_source" xlsx:"text"`
	// Units is the units sold per period and UnitsPeriod the period.
	Units       Number `json:"units" csv:"units" xlsx:"units"`
	UnitsPeriod Text   `json:"units_period" csv:"units_period" xlsx:"text"`
	// Elasticity and its band, of the kind named by Band.
	Elasticity     Number `json:"elasticity" csv:"elasticity" xlsx:"elast"`
	ElasticityLow  Number `json:"elasticity_low" csv:"elasticity_low" xlsx:"elast"`
	ElasticityHigh Number `json:"elasticity_high" csv:"elasticity_high" xlsx:"elast"`
	Band           Text   `json:"band" csv:"band" xlsx:"text"`
	Reading        Text   `json:"reading" csv:"reading" xlsx:"text"`
	// Lerner is (p - mc)/p = -1/e with its band.
	Lerner     Number `json:"lerner" csv:"lerner" xlsx:"pct"`
	LernerLow  Number `json:"lerner_low" csv:"lerner_low" xlsx:"pct"`
	LernerHigh Number `json:"lerner_high" csv:"lerner_high" xlsx:"pct"`
	// MarginalCost is the implied p(1 + 1/e) with its band.
	MarginalCost     Number `json:"implied_marginal_cost" csv:"implied_marginal_cost" xlsx:"money"`
	MarginalCostLow  Number `json:"implied_marginal_cost_low" csv:"implied_marginal_cost_low" xlsx:"money"`
	MarginalCostHigh Number `json:"implied_marginal_cost_high" csv:"implied_marginal_cost_high" xlsx:"money"`
	// ProfitMaxPrice is c·e/(1 + e) for the unit cost, with its band.
	ProfitMaxPrice     Number `json:"profit_max_price" csv:"profit_max_price" xlsx:"money"`
	ProfitMaxPriceLow  Number `json:"profit_max_price_low" csv:"profit_max_price_low" xlsx:"money"`
	ProfitMaxPriceHigh Number `json:"profit_max_price_high" csv:"profit_max_price_high" xlsx:"money"`
	// LineLerner is the margin of the owner pricing its products
	// together (cross-price elasticities), with its band.
	LineLerner     Number `json:"line_lerner" csv:"line_lerner" xlsx:"pct"`
	LineLernerLow  Number `json:"line_lerner_low" csv:"line_lerner_low" xlsx:"pct"`
	LineLernerHigh Number `json:"line_lerner_high" csv:"line_lerner_high" xlsx:"pct"`
	Caution        Text   `json:"caution" csv:"caution" xlsx:"wide"`
}

// WhatIfRow is the predicted effect of one scenario (a set of price
// moves) on one product per period, or on the whole line (Product
// "whole line"). Changes in percent are shares (0.05 is 5%).
type WhatIfRow struct {
	Scenario Text `json:"scenario" csv:"scenario" xlsx:"text"`
	Product  Text `json:"product" csv:"product" xlsx:"text"`
	// Moved is true for a product whose price the scenario moves.
	Moved       bool   `json:"moved" csv:"moved" xlsx:"bool"`
	Price       Number `json:"price" csv:"price" xlsx:"money"`
	NewPrice    Number `json:"new_price" csv:"new_price" xlsx:"money"`
	PriceChange Number `json:"price_change" csv:"price_change" xlsx:"pct"`
	Units       Number `json:"units" csv:"units" xlsx:"units"`
	NewUnits    Number `json:"new_units" csv:"new_units" xlsx:"units"`
	// UnitsChange is the change in units as a share, with its band.
	UnitsChange     Number `json:"units_change" csv:"units_change" xlsx:"pct"`
	UnitsChangeLow  Number `json:"units_change_low" csv:"units_change_low" xlsx:"pct"`
	UnitsChangeHigh Number `json:"units_change_high" csv:"units_change_high" xlsx:"pct"`
	// Revenue is the change in p·q per period, with its band.
	Revenue     Number `json:"revenue_change" csv:"revenue_change" xlsx:"money"`
	RevenueLow  Number `json:"revenue_change_low" csv:"revenue_change_low" xlsx:"money"`
	RevenueHigh Number `json:"revenue_change_high" csv:"revenue_change_high" xlsx:"money"`
	// Contribution is the change in (p - c)·q per period, with its band;
	// ContributionShare the same as a share of the current contribution.
	Contribution      Number `json:"contribution_change" csv:"contribution_change" xlsx:"money"`
	ContributionLow   Number `json:"contribution_change_low" csv:"contribution_change_low" xlsx:"money"`
	ContributionHigh  Number `json:"contribution_change_high" csv:"contribution_change_high" xlsx:"money"`
	ContributionShare Number `json:"contribution_change_share" csv:"contribution_change_share" xlsx:"pct"`
	// Extrapolated marks a new price outside the prices in the data.
	Extrapolated bool `json:"extrapolated" csv:"extrapolated" xlsx:"bool"`
	Band         Text `json:"band" csv:"band" xlsx:"text"`
}

// ShifterRow is one cost shifter in one model: its first-stage effect on
// price and the verdict on it.
type ShifterRow struct {
	// Model is "pooled" or the product whose model it is.
	Model   Text `json:"model" csv:"model" xlsx:"text"`
	Shifter Text `json:"shifter" csv:"shifter" xlsx:"text"`
	// Coefficient is the first-stage effect on (log) price of one unit of
	// the shifter, with its standard error, t and p-value.
	Coefficient Number `json:"coefficient" csv:"coefficient" xlsx:"coef"`
	StdError    Number `json:"std_error" csv:"std_error" xlsx:"coef"`
	T           Number `json:"t" csv:"t" xlsx:"stat"`
	PValue      Number `json:"p_value" csv:"p_value" xlsx:"p"`
	PartialR2   Number `json:"partial_r2" csv:"partial_r2" xlsx:"pct"`
	SignCheck   Text   `json:"sign_check" csv:"sign_check" xlsx:"text"`
	// ModelF is the first-stage F of all the model's shifters;
	// EffectiveF and EffectiveCritical the Montiel Olea-Pflueger test.
	ModelF            Number `json:"model_first_stage_f" csv:"model_first_stage_f" xlsx:"stat"`
	EffectiveF        Number `json:"effective_f" csv:"effective_f" xlsx:"stat"`
	EffectiveCritical Number `json:"effective_f_critical" csv:"effective_f_critical" xlsx:"stat"`
	// OveridP is the p-value of the difference-in-J test of this shifter
	// (null when the model is exactly identified).
	OveridP Number `json:"overid_p_value" csv:"overid_p_value" xlsx:"p"`
	// Passed is true when the shifter raises price as expected, is
	// significant, the model's shifters are strong, and no validity test
	// rejects it; Verdict says it in words.
	Passed  bool `json:"passed" csv:"passed" xlsx:"bool"`
	Verdict Text `json:"verdict" csv:"verdict" xlsx:"wide"`
}

// TestRow is one test of the shifters of one model.
type TestRow struct {
	Model Text `json:"model" csv:"model" xlsx:"text"`
	Test  Text `json:"test" csv:"test" xlsx:"text"`
	// Statistic, its reference Distribution and p-value; Critical is the
	// value a strength statistic is compared with.
	Statistic    Number `json:"statistic" csv:"statistic" xlsx:"stat"`
	Distribution Text   `json:"distribution" csv:"distribution" xlsx:"text"`
	PValue       Number `json:"p_value" csv:"p_value" xlsx:"p"`
	Critical     Number `json:"critical_value" csv:"critical_value" xlsx:"stat"`
	// Passed is true when the test speaks for the shifters.
	Passed  bool `json:"passed" csv:"passed" xlsx:"bool"`
	Meaning Text `json:"meaning" csv:"meaning" xlsx:"wide"`
}

// ScreenRow is one combination of candidate shifters in the screen,
// best first.
type ScreenRow struct {
	Rank     int  `json:"rank" csv:"rank" xlsx:"int"`
	Shifters Text `json:"shifters" csv:"shifters" xlsx:"text"`
	// Verdict is solid, usable, weak, suspect or wrong-sign (see
	// supplyshifters.ScreenRow).
	Verdict Text `json:"verdict" csv:"verdict" xlsx:"text"`
	// EffectiveF and its critical value; PartialR2 the share of price
	// variation the shifters explain.
	EffectiveF Number `json:"effective_f" csv:"effective_f" xlsx:"stat"`
	Critical   Number `json:"effective_f_critical" csv:"effective_f_critical" xlsx:"stat"`
	PartialR2  Number `json:"partial_r2" csv:"partial_r2" xlsx:"pct"`
	// HansenJ and its p-value (null when exactly identified); Suspects
	// the shifters whose difference-in-J test rejects.
	HansenJ  Number `json:"hansen_j" csv:"hansen_j" xlsx:"stat"`
	HansenJP Number `json:"hansen_j_p" csv:"hansen_j_p" xlsx:"p"`
	Suspects Text   `json:"suspects" csv:"suspects" xlsx:"text"`
	// Elasticity with its Wald band and the hull of the Anderson-Rubin set.
	Elasticity Number `json:"elasticity" csv:"elasticity" xlsx:"elast"`
	WaldLow    Number `json:"wald_low" csv:"wald_low" xlsx:"elast"`
	WaldHigh   Number `json:"wald_high" csv:"wald_high" xlsx:"elast"`
	ARLow      Number `json:"ar_low" csv:"ar_low" xlsx:"elast"`
	ARHigh     Number `json:"ar_high" csv:"ar_high" xlsx:"elast"`
	ARShape    Text   `json:"ar_shape" csv:"ar_shape" xlsx:"text"`
	Reasons    Text   `json:"reasons" csv:"reasons" xlsx:"wide"`
}

// TermRow is one coefficient of the pooled model.
type TermRow struct {
	Term     Text   `json:"term" csv:"term" xlsx:"text"`
	Estimate Number `json:"estimate" csv:"estimate" xlsx:"coef"`
	StdError Number `json:"std_error" csv:"std_error" xlsx:"coef"`
	Low      Number `json:"low" csv:"low" xlsx:"coef"`
	High     Number `json:"high" csv:"high" xlsx:"coef"`
	PValue   Number `json:"p_value" csv:"p_value" xlsx:"p"`
}

// TruthRow compares an estimate with a known true value (the demo
// market's generator).
type TruthRow struct {
	Product Text `json:"product" csv:"product" xlsx:"text"`
	// What names the quantity: "own-price elasticity (per product)" or
	// "pooled estimand".
	What      Text   `json:"what" csv:"what" xlsx:"text"`
	TrueValue Number `json:"true_value" csv:"true_value" xlsx:"elast"`
	Estimate  Number `json:"estimate" csv:"estimate" xlsx:"elast"`
	Low       Number `json:"low" csv:"low" xlsx:"elast"`
	High      Number `json:"high" csv:"high" xlsx:"elast"`
	Covered   bool   `json:"covered" csv:"covered" xlsx:"bool"`
}

// RecordRow is one line of the run record as a table.
type RecordRow struct {
	Field Text `json:"field" csv:"field" xlsx:"text"`
	Value Text `json:"value" csv:"value" xlsx:"wide"`
}

// Section is the status of one part of a report: done, or why not.
type Section struct {
	Name  string `json:"name"`
	Title string `json:"title"`
	Done  bool   `json:"done"`
	// Reason says why the section is missing or incomplete.
	Reason string `json:"reason,omitempty"`
}

// ModelDiagnostics holds the evidence on the shifters of one model.
type ModelDiagnostics struct {
	Model       string                      `json:"model"`
	Diagnostics *supplyshifters.Diagnostics `json:"diagnostics"`
}

// CrossInfo describes how the cross-price matrix was estimated.
type CrossInfo struct {
	Products    []string `json:"products"`
	Unit        string   `json:"unit"`
	Time        string   `json:"time"`
	Keys        int      `json:"keys"`
	Complete    int      `json:"complete_keys"`
	Specific    []string `json:"product_specific_shifters"`
	Common      []string `json:"common_shifters"`
	Instruments int      `json:"instruments"`
	Estimator   string   `json:"estimator"`
	VcovDetail  string   `json:"vcov_detail"`
	// Bootstrap is the number of joint bootstrap draws of the matrix (0:
	// none), BootstrapNote how they were made.
	Bootstrap     int      `json:"bootstrap_draws"`
	BootstrapNote []string `json:"bootstrap_notes,omitempty"`
	Warnings      []string `json:"warnings"`
}

// ScreenInfo describes a screen of candidate shifters.
type ScreenInfo struct {
	Candidates   []string `json:"candidates"`
	Controls     []string `json:"controls"`
	Combinations int      `json:"combinations"`
	N            int      `json:"n"`
	Rule         string   `json:"rule"`
	Notes        []string `json:"notes"`
}

// PooledInfo describes the pooled model.
type PooledInfo struct {
	Source      string   `json:"source"`
	N           int      `json:"n"`
	Form        string   `json:"form"`
	Outcome     string   `json:"outcome"`
	Estimator   string   `json:"estimator"`
	VcovDetail  string   `json:"vcov_detail"`
	SmallSample string   `json:"small_sample"`
	Shifters    []string `json:"shifters"`
	Controls    []string `json:"controls"`
	FE          []string `json:"fixed_effects"`
	Dropped     []string `json:"dropped"`
	Notes       []string `json:"notes"`
}

// ReportData is everything a report shows, computed once by RunReport
// and written by every writer (HTML, workbook, CSV, JSON), so that the
// numbers agree across them. A section that could not be computed is
// empty and its Section entry says why.
type ReportData struct {
	Title string  `json:"title"`
	Level float64 `json:"level"`
	// Sections lists the parts in report order with their status.
	Sections []Section `json:"sections"`

	Pooled       *PooledInfo        `json:"pooled"`
	Terms        []TermRow          `json:"pooled_terms"`
	Elasticities []ElasticityRow    `json:"elasticities"`
	Cross        []CrossRow         `json:"cross_price"`
	CrossInfo    *CrossInfo         `json:"cross_price_info"`
	Shifters     []ShifterRow       `json:"shifters"`
	Tests        []TestRow          `json:"shifter_tests"`
	Markups      []MarkupRow        `json:"markups"`
	WhatIfs      []WhatIfRow        `json:"what_ifs"`
	Truth        []TruthRow         `json:"demo_truth,omitempty"`
	Screen       []ScreenRow        `json:"screen,omitempty"`
	ScreenInfo   *ScreenInfo        `json:"screen_info,omitempty"`
	Diagnostics  []ModelDiagnostics `json:"diagnostics"`

	// Warnings are findings a reader must not miss; Assumptions state
	// what the margins and what-ifs rest on; Cautions are the general
	// cautions of every priceiv output.
	Warnings    []string `json:"warnings"`
	Assumptions []string `json:"assumptions"`
	Cautions    []string `json:"cautions"`

	Record RunRecord `json:"run_record"`

	// plots holds what the pictures need beyond the tables.
	plots *plotData
}

// SectionByName returns the status of a section (Done false and a reason
// when it is unknown).
func (r *ReportData) SectionByName(name string) Section {
	for _, s := range r.Sections {
		if s.Name == name {
			return s
		}
	}
	return Section{Name: name, Reason: "not run"}
}
