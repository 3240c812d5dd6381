package demand

import (
	"fmt"
	"math"

	"priceiv/ivcore"
)

// Coefficient is one estimated coefficient with its band.
type Coefficient struct {
	Name     string  `json:"name"`
	Estimate float64 `json:"estimate"`
	StdError float64 `json:"std_error"`
	CILow    float64 `json:"ci_low"`
	CIHigh   float64 `json:"ci_high"`
	PValue   float64 `json:"p_value"`
}

// FirstStageF summarises the strength of the excluded instruments for one
// endogenous regressor.
type FirstStageF struct {
	Endogenous string  `json:"endogenous"`
	FStat      float64 `json:"f_stat"`
	DF1        int     `json:"df1"`
	DF2        int     `json:"df2"`
	PValue     float64 `json:"p_value"`
	PartialR2  float64 `json:"partial_r2"`
}

// Elasticity is an own-price elasticity with its band.
type Elasticity struct {
	Product  string  `json:"product"`
	OwnPrice float64 `json:"own_price"`
	StdError float64 `json:"std_error"`
	CILow    float64 `json:"ci_low"`
	CIHigh   float64 `json:"ci_high"`
	// At says where the elasticity is evaluated: "everywhere" for
	// log-log (constant elasticity), "sample means" otherwise.
	At string `json:"at"`
	// N is the number of observations behind the estimate.
	N int `json:"n"`
	// Where the product's prices and units sit in the data (rows used).
	PriceStats
	// Bootstrap is the cluster-bootstrap percentile band, when asked for.
	Bootstrap *BootstrapBand `json:"bootstrap,omitempty"`
	// BootstrapDraws are the replicate draws of the elasticity.
	BootstrapDraws []float64 `json:"bootstrap_draws,omitempty"`
}

// PriceStats describes a product's price and quantity over the rows used.
type PriceStats struct {
	MeanPrice    float64 `json:"mean_price"`
	MeanQuantity float64 `json:"mean_quantity"`
	PriceMin     float64 `json:"price_min"`
	PriceMax     float64 `json:"price_max"`
}

// BootstrapBand is a percentile band from a cluster bootstrap.
type BootstrapBand struct {
	Low        float64 `json:"ci_low"`
	High       float64 `json:"ci_high"`
	StdError   float64 `json:"std_error"`
	Replicates int     `json:"replicates"`
	Failed     int     `json:"failed"`
	Clusters   int     `json:"clusters"`
	Seed       uint64  `json:"seed"`
	Level      float64 `json:"level"`
}

// Absorbed describes one absorbed fixed effect.
type Absorbed struct {
	Name      string `json:"name"`
	Levels    int    `json:"levels"`
	Redundant int    `json:"redundant"`
}

// AbsorptionInfo reports the convergence of the fixed-effect step.
type AbsorptionInfo struct {
	Method    string  `json:"method"`
	Sweeps    int     `json:"sweeps"`
	Converged bool    `json:"converged"`
	Tolerance float64 `json:"tolerance"`
	DoF       int     `json:"dof"`
}

// Result is the outcome of one estimation, ready for output.
type Result struct {
	Source      string          `json:"source"`
	N           int             `json:"n"`
	Form        string          `json:"form,omitempty"`
	Outcome     string          `json:"outcome"`
	Estimator   string          `json:"estimator"`
	Kappa       float64         `json:"kappa"`
	Vcov        string          `json:"vcov"`
	VcovDetail  string          `json:"vcov_detail"`
	SmallSample string          `json:"small_sample"`
	DF          int             `json:"df"`
	Clusters    []int           `json:"clusters,omitempty"`
	Level       float64         `json:"level"`
	Coeffs      []Coefficient   `json:"coefficients"`
	FirstStage  []FirstStageF   `json:"first_stage"`
	Elasticity  []Elasticity    `json:"elasticities,omitempty"`
	Dropped     []Drop          `json:"dropped"`
	Absorbed    []Absorbed      `json:"absorbed"`
	Absorption  *AbsorptionInfo `json:"absorption,omitempty"`
	Endogenous  []string        `json:"endogenous"`
	Instruments []string        `json:"instruments"`
	Controls    []string        `json:"controls"`
	SSR         float64         `json:"ssr"`
	Sigma       float64         `json:"sigma"`
	Notes       []string        `json:"notes"`
	Cautions    []string        `json:"cautions,omitempty"`
}

// Defaults returns the estimator and covariance kinds the spec asks for,
// filling the defaults: 2SLS when there are instruments (OLS otherwise),
// cluster-robust when a cluster column is set (HC1 otherwise).
func (d *Design) Defaults() (ivcore.Estimator, ivcore.VcovKind, error) {
	est := ivcore.TSLS
	if len(d.Model.Instr) == 0 && len(d.Model.Endog) == 0 {
		est = ivcore.OLS
	}
	if d.Spec.Estimator != "" {
		e, err := ivcore.ParseEstimator(d.Spec.Estimator)
		if err != nil {
			return 0, 0, fmt.Errorf("%w: %v", ErrSpec, err)
		}
		est = e
	}
	vk := ivcore.HC1
	if len(d.Spec.Cluster) > 0 {
		vk = ivcore.Cluster
	}
	if d.Spec.Vcov != "" {
		v, err := ivcore.ParseVcov(d.Spec.Vcov)
		if err != nil {
			return 0, 0, fmt.Errorf("%w: %v", ErrSpec, err)
		}
		vk = v
	}
	if vk == ivcore.Cluster && len(d.Spec.Cluster) == 0 {
		return 0, 0, fmt.Errorf("%w: --vcov cluster needs a cluster column: set --cluster (for example the store column)", ErrSpec)
	}
	return est, vk, nil
}

// Fit estimates the design with the spec's estimator and covariance and
// returns the fit and the first stages (none for OLS without instruments).
func (d *Design) Fit() (*ivcore.Fit, []ivcore.FirstStage, error) {
	est, vk, err := d.Defaults()
	if err != nil {
		return nil, nil, err
	}
	if est != ivcore.OLS && len(d.Model.Instr) == 0 {
		return nil, nil, &ivcore.OrderError{Endogenous: d.names(d.Model.Endog)}
	}
	fit, err := ivcore.Estimate(d.Moments, d.Model, est, vk)
	if err != nil {
		return nil, nil, err
	}
	var fs []ivcore.FirstStage
	if len(d.Model.Endog) > 0 && len(d.Model.Instr) > 0 {
		fs, err = ivcore.FirstStages(d.Moments, d.Model, vk)
		if err != nil {
			return nil, nil, fmt.Errorf("first stage: %w", err)
		}
	}
	return fit, fs, nil
}

func (d *Design) names(idx []int) []string {
	out := make([]string, len(idx))
	for i, j := range idx {
		out[i] = d.Names[j]
	}
	return out
}

// Summarize assembles the result of a fit for output.
func (d *Design) Summarize(fit *ivcore.Fit, fs []ivcore.FirstStage) *Result {
	r := &Result{
		Source: d.Panel.Source, N: d.N, Form: d.Form, Outcome: d.Names[d.Model.Y],
		Estimator: fit.Estimator.String(), Kappa: fit.Kappa,
		Vcov: fit.Vcov.Kind.String(), VcovDetail: fit.Vcov.Label, SmallSample: fit.Vcov.SmallSample,
		DF: fit.Vcov.DF, Clusters: fit.Vcov.Clusters, Level: d.Level,
		Dropped: d.Dropped, SSR: fit.SSR,
		Endogenous: d.names(d.Model.Endog), Instruments: d.names(d.Model.Instr),
		Coeffs: []Coefficient{}, FirstStage: []FirstStageF{}, Absorbed: []Absorbed{}, Notes: []string{},
	}
	if r.Dropped == nil {
		r.Dropped = []Drop{}
	}
	r.Controls = []string{}
	for _, j := range d.Model.Exog {
		if d.Names[j] != "intercept" {
			r.Controls = append(r.Controls, d.Names[j])
		}
	}
	r.Sigma = math.Sqrt(fit.Sigma2)
	for j, name := range fit.Names {
		lo, hi := fit.ConfInt(j, d.Level)
		r.Coeffs = append(r.Coeffs, Coefficient{Name: name, Estimate: fit.Coef[j], StdError: fit.SE(j), CILow: lo, CIHigh: hi, PValue: fit.PValue(j)})
	}
	for _, f := range fs {
		r.FirstStage = append(r.FirstStage, FirstStageF{Endogenous: f.Endogenous, FStat: f.F.F, DF1: f.F.Q, DF2: f.F.DF, PValue: f.F.P, PartialR2: f.PartialR2})
	}
	if d.Absorption != nil {
		for _, e := range d.Absorption.Effects {
			r.Absorbed = append(r.Absorbed, Absorbed{Name: e.Name, Levels: e.Levels, Redundant: e.Redundant})
		}
		r.Absorption = &AbsorptionInfo{Method: d.Absorption.Method, Sweeps: d.Absorption.Iterations, Converged: d.Absorption.Converged, Tolerance: d.Absorption.Tol, DoF: d.Absorption.DoF}
	}
	if fit.Estimator == ivcore.OLS && len(d.Model.Endog) > 0 {
		r.Notes = append(r.Notes, "OLS treats price as if it were set independently of demand; when prices respond to demand shocks the estimate is biased (usually toward zero). Use the cost shifters with 2SLS.")
	}
	if d.Form != "" {
		j := fit.Index(d.Names[d.Model.Endog[0]])
		b, se := fit.Coef[j], fit.SE(j)
		e := Elasticity{Product: "all", N: d.N, At: "everywhere (constant elasticity)", PriceStats: d.PriceStats}
		var scale float64
		switch d.Form {
		case "log-log":
			scale = 1
		case "semi-log":
			scale = d.MeanPrice
			e.At = fmt.Sprintf("sample mean price %.4g", d.MeanPrice)
		case "linear":
			scale = d.MeanPrice / d.MeanQuantity
			e.At = fmt.Sprintf("sample means (price %.4g, quantity %.4g)", d.MeanPrice, d.MeanQuantity)
		}
		// Delta method with the means held fixed: e = s·b, se(e) = |s|·se(b).
		e.OwnPrice = scale * b
		e.StdError = math.Abs(scale) * se
		c := ivcore.Critical(d.Level, fit.Vcov.DF) * e.StdError
		e.CILow, e.CIHigh = e.OwnPrice-c, e.OwnPrice+c
		r.Elasticity = []Elasticity{e}
	}
	return r
}

// ElasticityScale is the factor that turns the price coefficient into the
// elasticity: 1 for log-log, the mean price for semi-log, mean price over
// mean quantity for linear demand.
func (d *Design) ElasticityScale() float64 {
	return elasticityScale(d.Form, d.MeanPrice, d.MeanQuantity)
}
