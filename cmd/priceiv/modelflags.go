package main

import (
	"fmt"
	"strings"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"priceiv/demand"
)

// modelFlags binds the options shared by the commands that fit a model.
// Values given on the command line override those of a --spec file.
type modelFlags struct {
	spec     string
	flagSpec demand.Spec
}

func (m *modelFlags) register(fs *pflag.FlagSet) {
	s := &m.flagSpec
	fs.StringVar(&m.spec, "spec", "", "YAML spec file holding these options (flags override it)")
	fs.StringVar(&s.Data, "data", "", "panel CSV file (or give it as the argument)")
	fs.StringVar(&s.Delimiter, "delimiter", "", `field separator: "," (default), ";", "|" or "tab"`)
	fs.StringArrayVar((*[]string)(&s.Derive), "derive", nil, "derived column 'name=EXPR' (repeatable; + - * / ^ log exp sqrt abs lag(x,k) diff(x,k))")
	fs.StringVar(&s.Where, "where", "", "keep rows where EXPR holds (comparisons, && and ||), applied after --derive")
	fs.StringVar(&s.Unit, "unit", "", "panel unit column for lag and diff (e.g. store or state)")
	fs.StringVar(&s.Time, "time", "", "time column for lag and diff (e.g. week)")
	fs.StringVar(&s.Quantity, "quantity", "", "demand form: quantity column (units sold)")
	fs.StringVar(&s.Price, "price", "", "demand form: price column")
	fs.StringSliceVar((*[]string)(&s.Shifters), "shifters", nil, "demand form: cost shifters used as instruments for price")
	fs.StringSliceVar((*[]string)(&s.Controls), "controls", nil, "demand form: exogenous controls")
	fs.StringVar(&s.Form, "form", "", "demand form: log-log (default), semi-log or linear")
	fs.StringVar(&s.Product, "product", "", "product column")
	fs.StringVar(&s.By, "by", "", "one regression per level of this column (e.g. product): a table of own-price elasticities")
	fs.StringVar(&s.Interact, "interact", "", "one pooled regression with price and shifters interacted with this column, plus a test of equal elasticities")
	fs.BoolVar(&s.Cross, "cross", false, "cross-price elasticity matrix among the products, matched on --unit and --time")
	fs.StringVar(&s.Outcome, "outcome", "", "general form: outcome column")
	fs.StringSliceVar((*[]string)(&s.Endogenous), "endogenous", nil, "general form: endogenous regressors")
	fs.StringSliceVar((*[]string)(&s.Exogenous), "exogenous", nil, "general form: exogenous regressors")
	fs.StringSliceVar((*[]string)(&s.Instruments), "instruments", nil, "general form: excluded instruments")
	fs.StringSliceVar((*[]string)(&s.ExpectSign), "expect-sign", nil, "shifters expected to lower price, as name=- (cost shifters are expected to raise it)")
	fs.StringSliceVar((*[]string)(&s.FE), "fe", nil, "fixed effects to absorb (id columns; a*b for an interaction)")
	fs.StringSliceVar((*[]string)(&s.Cluster), "cluster", nil, "cluster column, or two for two-way clustering")
	fs.StringVar(&s.Vcov, "vcov", "", "covariance: iid, hc1 or cluster (default: cluster with --cluster, else hc1)")
	fs.StringVar(&s.Estimator, "estimator", "", "ols, 2sls (default), liml, fuller or gmm (two-step efficient)")
	fs.Float64Var(&s.Level, "level", 0, "confidence level of bands (default 0.95)")
	fs.IntVar(&s.MaxSweeps, "max-sweeps", 0, "most sweeps of fixed-effect absorption (default 10000)")
	fs.Float64Var(&s.Tolerance, "tolerance", 0, "absorption convergence tolerance (default 1e-10)")
}

// flagField maps each flag to the spec field it sets.
var flagField = map[string]func(dst, src *demand.Spec){
	"data":        func(d, s *demand.Spec) { d.Data = s.Data },
	"delimiter":   func(d, s *demand.Spec) { d.Delimiter = s.Delimiter },
	"derive":      func(d, s *demand.Spec) { d.Derive = s.Derive },
	"where":       func(d, s *demand.Spec) { d.Where = s.Where },
	"unit":        func(d, s *demand.Spec) { d.Unit = s.Unit },
	"time":        func(d, s *demand.Spec) { d.Time = s.Time },
	"quantity":    func(d, s *demand.Spec) { d.Quantity = s.Quantity },
	"price":       func(d, s *demand.Spec) { d.Price = s.Price },
	"shifters":    func(d, s *demand.Spec) { d.Shifters = s.Shifters },
	"controls":    func(d, s *demand.Spec) { d.Controls = s.Controls },
	"form":        func(d, s *demand.Spec) { d.Form = s.Form },
	"product":     func(d, s *demand.Spec) { d.Product = s.Product },
	"by":          func(d, s *demand.Spec) { d.By = s.By },
	"interact":    func(d, s *demand.Spec) { d.Interact = s.Interact },
	"cross":       func(d, s *demand.Spec) { d.Cross = s.Cross },
	"outcome":     func(d, s *demand.Spec) { d.Outcome = s.Outcome },
	"endogenous":  func(d, s *demand.Spec) { d.Endogenous = s.Endogenous },
	"exogenous":   func(d, s *demand.Spec) { d.Exogenous = s.Exogenous },
	"instruments": func(d, s *demand.Spec) { d.Instruments = s.Instruments },
	"fe":          func(d, s *demand.Spec) { d.FE = s.FE },
	"expect-sign": func(d, s *demand.Spec) { d.ExpectSign = s.ExpectSign },
	"cluster":     func(d, s *demand.Spec) { d.Cluster = s.Cluster },
	"vcov":        func(d, s *demand.Spec) { d.Vcov = s.Vcov },
	"estimator":   func(d, s *demand.Spec) { d.Estimator = s.Estimator },
	"level":       func(d, s *demand.Spec) { d.Level = s.Level },
	"max-sweeps":  func(d, s *demand.Spec) { d.MaxSweeps = s.MaxSweeps },
	"tolerance":   func(d, s *demand.Spec) { d.Tolerance = s.Tolerance },
}

// resolve returns the spec: the file's fields (if any) overridden by the
// flags that were set, starting from base (the demo's defaults, or empty).
func (m *modelFlags) resolve(cmd *cobra.Command, base demand.Spec) (*demand.Spec, error) {
	s := base
	if m.spec != "" {
		fileSpec, err := demand.ReadSpec(m.spec)
		if err != nil {
			return nil, err
		}
		s = *fileSpec
		if s.Data != "" && !strings.HasPrefix(s.Data, "/") {
			s.Data = joinRel(m.spec, s.Data)
		}
	}
	cmd.Flags().Visit(func(f *pflag.Flag) {
		if set, ok := flagField[f.Name]; ok {
			set(&s, &m.flagSpec)
		}
	})
	for i, d := range s.Derive {
		s.Derive[i] = strings.TrimSpace(d)
	}
	if cmd.Flags().Changed("level") && !(s.Level > 0.5 && s.Level < 1) {
		return nil, fmt.Errorf("--level %v is outside (0.5, 1): give for example 0.95 or 0.9", s.Level)
	}
	if err := s.Check(); err != nil {
		return nil, err
	}
	if _, err := s.DelimiterByte(); err != nil {
		return nil, err
	}
	if _, err := s.ExpectedSigns(); err != nil {
		return nil, err
	}
	return &s, nil
}

func joinRel(specPath, data string) string {
	i := strings.LastIndex(specPath, "/")
	if i < 0 {
		return data
	}
	return specPath[:i+1] + data
}
