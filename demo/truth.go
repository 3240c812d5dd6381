package demo

import (
	"encoding/json"
	"fmt"
	"io"
)

// Truth holds the parameters that generated a market, so that every
// estimate made from the panel can be checked against them.
type Truth struct {
	// Scenario describes the invented market in one sentence.
	Scenario string `json:"scenario"`
	// Config is the configuration that generated the panel.
	Config Config `json:"config"`
	// Rows is the number of rows of the panel.
	Rows int `json:"rows"`
	// Products lists the products in catalogue order.
	Products []ProductTruth `json:"products"`
	// CrossElasticities[i][j] is the elasticity of product i's units with
	// respect to product j's price; the diagonal holds the own
	// elasticities. A product not stocked in a store has no cross effect
	// there.
	CrossElasticities [][]float64 `json:"cross_price_elasticities"`
	// Demand holds the non-price terms of the demand equation.
	Demand DemandTruth `json:"demand"`
	// Pricing holds how shelf prices were set.
	Pricing PricingTruth `json:"pricing"`
	// Shifters describes each candidate cost shifter: whether it is a
	// valid instrument, how strong, and its true first-stage effect.
	Shifters []ShifterTruth `json:"shifters"`
	// Pooled is what the suggested pooled model estimates.
	Pooled PooledTarget `json:"pooled"`
	// OLS describes the bias of ordinary least squares.
	OLS OLSBias `json:"ols"`
	// SuggestedModel is the pooled demo model.
	SuggestedModel Model `json:"suggested_model"`
	// CrossPriceModel is a model that identifies every entry of
	// CrossElasticities.
	CrossPriceModel Model `json:"cross_price_model"`
}

// ProductTruth holds the true parameters of one product.
type ProductTruth struct {
	Name    string `json:"name"`
	Bottled bool   `json:"bottled"`
	// OwnElasticity is d log units / d log own price, other prices fixed.
	OwnElasticity float64 `json:"own_elasticity"`
	// LineMoveElasticity is the response of the product's units to a 1%
	// move of every price in the line: own plus all cross elasticities
	// of its row. A model instrumented only by shifters common to all
	// products (bean, freight) estimates about this.
	LineMoveElasticity float64 `json:"line_move_elasticity"`
	// UnitCost is marginal cost when every cost index is at 100.
	UnitCost float64 `json:"unit_cost"`
	// MeanMarginalCost is the product's true marginal cost averaged over
	// its rows.
	MeanMarginalCost float64 `json:"mean_marginal_cost"`
	// MarkupFactor is the price-to-cost factor e/(1+e) of the
	// inverse-elasticity rule, which the maker applies before store
	// effects, promotions and shocks.
	MarkupFactor float64 `json:"markup_factor"`
	// Lerner is the margin (p-mc)/p = -1/e implied by MarkupFactor.
	Lerner float64 `json:"lerner"`
	// ReferencePrice is UnitCost*MarkupFactor: the shelf price with every
	// index at 100 and no store, promotion or demand effect.
	ReferencePrice float64 `json:"reference_price"`
	// CostShares gives the share of UnitCost that moves one for one with
	// each index column; "other" is the fixed remainder.
	CostShares map[string]float64 `json:"cost_shares"`
	// Rows is the number of panel rows of the product.
	Rows int `json:"rows"`
	// StoresStocking is the number of stores that carry the product.
	StoresStocking int `json:"stores_stocking"`
}

// DemandTruth holds the non-price terms of log demand.
type DemandTruth struct {
	// Temperature is d log units / d °C.
	Temperature float64 `json:"temperature"`
	// TemperatureRef is the temperature at which the term is zero.
	TemperatureRef float64 `json:"temperature_ref"`
	// Promo is the log-units lift of a display, beyond its price cut.
	Promo float64 `json:"promo"`
	// ShockSD and ShockRho describe the product-store demand shock, an
	// AR(1) over weeks; StoreWeekSD is the shock shared by all products
	// of a store in a week.
	ShockSD     float64 `json:"shock_sd"`
	ShockRho    float64 `json:"shock_rho"`
	StoreWeekSD float64 `json:"store_week_sd"`
}

// PricingTruth holds the price-setting rule.
type PricingTruth struct {
	// Rule states the price equation.
	Rule string `json:"rule"`
	// ShockResponse is d log price / d demand shock: prices are set
	// knowing the shock, which makes price endogenous.
	ShockResponse float64 `json:"shock_response"`
	// Temperature is d log price / d °C.
	Temperature float64 `json:"temperature"`
	// Promo is the log price change during a display.
	Promo float64 `json:"promo"`
	// NoiseSD is the sd of idiosyncratic log price noise.
	NoiseSD float64 `json:"noise_sd"`
}

// ShifterTruth describes one candidate instrument column.
type ShifterTruth struct {
	Column string `json:"column"`
	// VariesBy is "week", "region x week" or "product x region x week".
	VariesBy string `json:"varies_by"`
	// Valid is false when the column also moves demand directly.
	Valid bool `json:"valid"`
	// Strength is "strong", "moderate", "weak" or "product-specific".
	Strength string `json:"strength"`
	// FirstStage maps each product name to the true average effect on
	// its log price of one index point (one °C for temperature),
	// averaged over the product's rows: d log p / d z = c_i*s_k/(100*mc).
	FirstStage map[string]float64 `json:"first_stage"`
	// PooledFirstStage is FirstStage averaged over all rows.
	PooledFirstStage float64 `json:"pooled_first_stage"`
	// Note says how the column should be used.
	Note string `json:"note"`
}

// PooledTarget is the value the suggested pooled model estimates.
//
// The bean and freight indices move every product's price together, so
// a pooled own-price model instrumented by them measures the response to
// a line-wide price move: roughly the row-weighted mean own elasticity
// plus the cross elasticities of the products stocked alongside.
// OwnElasticity is exact for this panel: it is the 2SLS estimate of the
// suggested model computed on the structural part of log units (the
// demand shocks removed), so an estimate from the data differs from it
// by sampling error only.
type PooledTarget struct {
	// Defined is false when the panel is too small for the model.
	Defined bool `json:"defined"`
	// OwnElasticity is the pooled 2SLS estimand described above.
	OwnElasticity float64 `json:"own_elasticity"`
	// MeanOwnElasticity is the own elasticity averaged over rows.
	MeanOwnElasticity float64 `json:"mean_own_elasticity"`
	// MeanCrossSum is the sum of cross elasticities over the products
	// stocked in the same store, averaged over rows.
	MeanCrossSum float64 `json:"mean_cross_sum"`
}

// OLSBias describes how least squares goes wrong on this panel.
type OLSBias struct {
	// Direction is "toward zero": prices rise with the demand shock, so
	// OLS mixes the downward-sloping demand curve with an upward price
	// response and understates how elastic demand is.
	Direction string `json:"direction"`
	// ShockTerm is the part of the OLS estimate of the suggested model
	// (same fixed effects and controls, no instruments) due to the
	// demand shocks: (x'x)^-1 x'u after absorbing fixed effects and
	// controls. OLS equals its shock-free value plus ShockTerm.
	ShockTerm float64 `json:"shock_term"`
}

// Model names the columns of a demand model.
type Model struct {
	Form     string   `json:"form"`
	Quantity string   `json:"quantity"`
	Price    string   `json:"price"`
	Controls []string `json:"controls"`
	// FixedEffects lists the absorbed effects; an entry with several
	// columns is their interaction.
	FixedEffects [][]string `json:"fixed_effects"`
	Cluster      []string   `json:"cluster"`
	Shifters     []string   `json:"shifters"`
	Note         string     `json:"note"`
}

// WriteTruthJSON writes m.Truth as indented JSON.
func (m *Market) WriteTruthJSON(w io.Writer) error {
	b, err := json.MarshalIndent(m.Truth, "", "  ")
	if err != nil {
		return fmt.Errorf("demo: encoding truth: %w", err)
	}
	b = append(b, '\n')
	if _, err := w.Write(b); err != nil {
		return fmt.Errorf("demo: writing truth: %w", err)
	}
	return nil
}
