package main

import (
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
	"priceiv/ivcore"
	"priceiv/supplyshifters"
)

func newEstimateCmd() *cobra.Command {
	var mf modelFlags
	var db dbFlags
	var format, out string
	var useDemo bool
	var boot int
	var seed uint64
	var pricesFile, ownerCol string
	cmd := &cobra.Command{
		Use:   "estimate [PANEL.csv] [flags]",
		Short: "Estimate a demand (or any IV) model and print elasticities with bands",
		Long: `Estimate fits one model on a panel and prints the own-price elasticity
first, in words and numbers, then the terms, the strength of the cost
shifters, and what was absorbed and dropped.

A model is stated in demand form (--quantity, --price, --shifters,
--controls, --form) or in general form (--outcome, --endogenous,
--exogenous, --instruments). Options can come from a YAML --spec file;
flags override it.`,
		Example: `  # the built-in cold-brew market, no files needed
  priceiv estimate --demo

  # log-log demand with store and product effects, clustered by store
  priceiv estimate sales.csv --quantity units --price price \
      --shifters bean_index,freight_index --controls temperature \
      --fe product,store --cluster store

  # year-on-year changes within each store and product, from week 53 on
  priceiv estimate coldbrew_panel.csv --unit 'product*store' --time week \
      --derive 'dq=diff(log(units),52)' --derive 'dp=diff(log(price),52)' \
      --derive 'dbean=diff(bean_index,52)' --where 'week > 52' \
      --outcome dq --endogenous dp --instruments dbean --cluster store

  # the same options kept in a file, as JSON for another program
  priceiv estimate --spec model.yaml --format json --out result.json

  # the database computes the sums: only a few kilobytes travel
  priceiv estimate --db postgres://analyst@warehouse:5432/scanner --table coldbrew_weekly \
      --quantity units --price price --shifters bean_index,freight_index \
      --fe 'product*store',week --cluster store

  # sums computed by another engine from the SQL of 'priceiv sql'
  priceiv estimate --moments coldbrew_moments.csv --quantity units --price price \
      --shifters bean_index,freight_index --fe 'product*store',week --cluster store`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if err := elasticity.CheckFormat(format); err != nil {
				return err
			}
			cmd.SilenceUsage = true
			var spec *demand.Spec
			var panel *demand.Panel
			var err error
			if !useDemo && mf.spec != "" {
				// The spec file may name a database source.
				s, err := mf.resolve(cmd, demand.Spec{})
				if err != nil {
					return err
				}
				if err := db.fromSpec(cmd, args, s, mf.spec); err != nil {
					return err
				}
			}
			if db.active() {
				if spec, err = resolveDBSpec(cmd, &mf); err != nil {
					return err
				}
				if err := db.check(cmd, args, useDemo, spec); err != nil {
					return err
				}
			} else if spec, panel, err = loadInputs(cmd, &mf, args, useDemo); err != nil {
				return err
			}
			if err := db.checkSave(spec); err != nil {
				return err
			}
			if boot < 0 || spec.Bootstrap < 0 {
				return fmt.Errorf("--bootstrap must be 0 (off) or a number of replicates of at least %d (999 is usual)", elasticity.MinBootstrap)
			}
			// The spec file may hold these too; flags win.
			if !cmd.Flags().Changed("bootstrap") && spec.Bootstrap > 0 {
				boot = spec.Bootstrap
			}
			if !cmd.Flags().Changed("seed") && spec.Seed != 0 {
				seed = spec.Seed
			}
			if !cmd.Flags().Changed("prices") && spec.Prices != "" {
				pricesFile = spec.Prices
				if mf.spec != "" && !strings.HasPrefix(pricesFile, "/") {
					pricesFile = joinRel(mf.spec, pricesFile)
				}
			}
			if ownerCol != "" && !spec.Cross {
				return fmt.Errorf("--owner sets who prices which product in the product-line margins: use it with --cross")
			}
			switch {
			case spec.By != "" || spec.Interact != "":
				var t *demand.ProductTable
				var err error
				if db.active() {
					t, err = runProductsDB(cmd, &db, spec)
				} else {
					t, err = runProducts(panel, spec)
				}
				if err != nil {
					return err
				}
				if boot > 0 {
					tick, done := progress(boot*len(t.Fits), "bootstrap")
					err := elasticity.BootstrapTable(t, boot, seed, tick)
					done()
					if err != nil {
						return err
					}
				}
				prices, err := readPrices(pricesFile, t.Elasticities)
				if err != nil {
					return err
				}
				rep := elasticity.TableMarkups(t, prices)
				return emit(cmd, out, func(w io.Writer) error {
					return elasticity.WriteCombined(w, format,
						func(w io.Writer, f string) error { return elasticity.WriteProductTable(w, t, f) },
						func(w io.Writer, f string) error { return elasticity.WritePricing(w, rep, f) })
				})
			case spec.Cross:
				c, stats, prepared, err := runCross(panel, spec)
				if err != nil {
					return err
				}
				if boot > 0 {
					tick, done := progress(boot*len(c.Fits), "bootstrap")
					err := elasticity.BootstrapCross(c, boot, seed, tick)
					done()
					if err != nil {
						return err
					}
				}
				var prices []elasticity.PriceRow
				if pricesFile != "" {
					if prices, err = elasticity.ReadPricesFile(pricesFile, c.Products); err != nil {
						return err
					}
				}
				var owners map[string]string
				if ownerCol != "" {
					prod := spec.Product
					if prod == "" {
						prod = "product"
					}
					if owners, err = elasticity.ProductOwners(prepared, prod, ownerCol); err != nil {
						return err
					}
				}
				rep := elasticity.CrossMarkups(c, stats, prices, owners)
				return emit(cmd, out, func(w io.Writer) error {
					return elasticity.WriteCombined(w, format,
						func(w io.Writer, f string) error { return elasticity.WriteCrossPrice(w, c, f) },
						elasticity.WriteJSONOnly("elasticities", elasticity.CrossOwnRows(c, stats)),
						func(w io.Writer, f string) error { return elasticity.WritePricing(w, rep, f) })
				})
			}
			if pricesFile != "" {
				return fmt.Errorf("--prices holds prices per product: use it with --by, --interact or --cross")
			}

			var res *demand.Result
			var d *demand.Design
			var fit *ivcore.Fit
			if db.active() {
				res, d, fit, err = runEstimateDB(cmd, &db, spec)
			} else {
				res, d, fit, err = runEstimate(panel, spec)
			}
			if err != nil {
				return err
			}
			if boot > 0 {
				tick, done := progress(boot, "bootstrap")
				err := elasticity.BootstrapPooled(d, fit, res, boot, seed, tick)
				done()
				if err != nil {
					return err
				}
			}
			parts := []func(io.Writer, string) error{
				func(w io.Writer, f string) error { return elasticity.WriteEstimate(w, res, f) },
			}
			if len(d.Model.Instr) > 0 && len(d.Model.Endog) > 0 {
				dg, err := diagnose(d, fit, spec)
				if err != nil {
					return err
				}
				parts = append(parts, func(w io.Writer, f string) error { return elasticity.WriteDiagnostics(w, dg, f) })
			}
			if len(res.Elasticity) > 0 {
				rep := elasticity.PooledMarkups(res, nil)
				res.Cautions = nil // the margins section closes with them
				parts = append(parts, func(w io.Writer, f string) error { return elasticity.WritePricing(w, rep, f) })
			}
			return emit(cmd, out, func(w io.Writer) error { return elasticity.WriteCombined(w, format, parts...) })
		},
	}
	mf.register(cmd.Flags())
	db.register(cmd.Flags())
	cmd.Flags().BoolVar(&useDemo, "demo", false, "run on the built-in cold-brew market (generated in memory, fixed seed)")
	cmd.Flags().IntVar(&boot, "bootstrap", 0, "cluster-bootstrap replicates for percentile bands (0: off; 999 is usual)")
	cmd.Flags().Uint64Var(&seed, "seed", 1, "seed of the bootstrap draws (same seed, same bands on any number of cores)")
	cmd.Flags().StringVar(&pricesFile, "prices", "", "CSV of current prices per product (product, price, optional unit_cost, quantity, owner) for margins")
	cmd.Flags().StringVar(&ownerCol, "owner", "", "with --cross: panel column naming the firm that owns each product (rivals' products are priced by their owners)")
	cmd.Flags().StringVar(&format, "format", "text", "output format: text, json, csv or markdown")
	cmd.Flags().StringVar(&out, "out", "", "write the output to this file (written only when the run succeeds)")
	cmd.MarkFlagsMutuallyExclusive("demo", "data")
	cmd.MarkFlagsMutuallyExclusive("by", "interact", "cross")
	return cmd
}

// loadInputs resolves the spec and loads (or generates) the panel.
func loadInputs(cmd *cobra.Command, mf *modelFlags, args []string, useDemo bool) (*demand.Spec, *demand.Panel, error) {
	if useDemo {
		m, err := demo.Generate(demo.DefaultConfig())
		if err != nil {
			return nil, nil, err
		}
		base := demoSpec(m)
		switch {
		case cmd.Flags().Changed("cross"):
			base = demoCrossSpec(m)
		case cmd.Flags().Changed("by"), cmd.Flags().Changed("interact"):
			base = demoProductSpec(m)
		}
		spec, err := mf.resolve(cmd, base)
		if err != nil {
			return nil, nil, err
		}
		return spec, m.Panel, nil
	}
	spec, err := mf.resolve(cmd, demand.Spec{})
	if err != nil {
		return nil, nil, err
	}
	if len(args) == 1 {
		if spec.Data != "" && cmd.Flags().Changed("data") {
			return nil, nil, fmt.Errorf("the panel is given twice (argument %q and --data %q): give it once", args[0], spec.Data)
		}
		spec.Data = args[0]
	}
	if spec.Data == "" {
		return nil, nil, fmt.Errorf("no panel given: name a CSV file (priceiv %s FILE ...), set data: in the --spec file, or try --demo", cmd.Name())
	}
	delim, _ := spec.DelimiterByte()
	panel, err := demand.ReadPanelFile(spec.Data, demand.ReadOptions{Delimiter: delim})
	if err != nil {
		return nil, nil, err
	}
	return spec, panel, nil
}

// demoSpec is the model the demo market is built to identify.
func demoSpec(m *demo.Market) demand.Spec {
	sm := m.Truth.SuggestedModel
	s := demand.Spec{
		Data: "demo", Quantity: sm.Quantity, Price: sm.Price, Form: sm.Form,
		Controls: sm.Controls, Shifters: sm.Shifters, Cluster: sm.Cluster, Product: "product",
		Unit: "store", Time: "week",
	}
	for _, fe := range sm.FixedEffects {
		s.FE = append(s.FE, strings.Join(fe, "*"))
	}
	return s
}

// demoProductSpec is the demo's per-product own-price model: each
// product's price instrumented by its own ingredient cost index, with the
// line-wide cost indices as controls (they move every product's price, so
// a single-product equation must hold them fixed).
func demoProductSpec(m *demo.Market) demand.Spec {
	s := demoSpec(m)
	s.Shifters = []string{demo.ColIngredient}
	s.Controls = []string{demo.ColTemperature, demo.ColPromo, demo.ColBean, demo.ColFreight, demo.ColBottle}
	s.FE = []string{demo.ColStore}
	return s
}

// demoCrossSpec is the demo's cross-price model (Truth.CrossPriceModel),
// matched on store and week.
func demoCrossSpec(m *demo.Market) demand.Spec {
	cm := m.Truth.CrossPriceModel
	s := demand.Spec{
		Data: "demo", Quantity: cm.Quantity, Price: cm.Price, Form: cm.Form, Product: demo.ColProduct,
		Shifters: cm.Shifters, Controls: cm.Controls, Cluster: cm.Cluster,
		Unit: demo.ColStore, Time: demo.ColWeek,
	}
	for _, fe := range cm.FixedEffects {
		s.FE = append(s.FE, strings.Join(fe, "*"))
	}
	return s
}

// runProducts fits per-product elasticities (--by or --interact).
func runProducts(panel *demand.Panel, spec *demand.Spec) (*demand.ProductTable, error) {
	p, drops, err := demand.Prepare(panel, spec)
	if err != nil {
		return nil, err
	}
	s := *spec
	var t *demand.ProductTable
	if spec.By != "" {
		s.Product = spec.By
		t, err = demand.EstimateByProduct(p, &s, 0)
	} else {
		s.Product = spec.Interact
		t, err = demand.EstimateInteracted(p, &s, 0)
	}
	if err != nil {
		return nil, err
	}
	t.Dropped = append(drops, t.Dropped...)
	elasticity.FillRobust(t)
	return t, nil
}

// runCross fits the cross-price elasticity matrix (--cross) and returns
// each product's price and quantity statistics for margins, and the
// prepared panel (after --derive and --where).
func runCross(panel *demand.Panel, spec *demand.Spec) (*demand.CrossPrice, map[string]demand.PriceStats, *demand.Panel, error) {
	p, _, err := demand.Prepare(panel, spec)
	if err != nil {
		return nil, nil, nil, err
	}
	s := *spec
	if s.Product == "" {
		s.Product = "product"
	}
	c, err := demand.EstimateCross(p, &s, 0)
	if err != nil {
		return nil, nil, nil, err
	}
	stats, err := elasticity.ProductStats(p, s.Product, s.Price, s.Quantity)
	return c, stats, p, err
}

// diagnose runs the instrument diagnostics of a pooled fit.
func diagnose(d *demand.Design, fit *ivcore.Fit, spec *demand.Spec) (*supplyshifters.Diagnostics, error) {
	signs, err := spec.ExpectedSigns()
	if err != nil {
		return nil, err
	}
	dg, err := supplyshifters.Diagnose(d, fit, supplyshifters.Options{ExpectSign: signs, Level: d.Level})
	if err != nil {
		return nil, fmt.Errorf("shifter diagnostics: %w", err)
	}
	return dg, nil
}

// readPrices reads a --prices file for the products of a table.
func readPrices(path string, rows []demand.ProductElasticity) ([]elasticity.PriceRow, error) {
	if path == "" {
		return nil, nil
	}
	var products []string
	for _, r := range rows {
		products = append(products, r.Product)
	}
	return elasticity.ReadPricesFile(path, products)
}

// runEstimate prepares the panel, builds the design and fits it.
func runEstimate(panel *demand.Panel, spec *demand.Spec) (*demand.Result, *demand.Design, *ivcore.Fit, error) {
	p, drops, err := demand.Prepare(panel, spec)
	if err != nil {
		return nil, nil, nil, err
	}
	// The design is read once more, by the diagnostics: the lean one
	// holds a single copy of each model column.
	d, err := demand.BuildLean(p, spec, 0)
	if err != nil {
		return nil, nil, nil, err
	}
	d.Dropped = append(drops, d.Dropped...)
	return fitDesign(d)
}

// runEstimateDB has the database (or a moments file) compute the moment
// blocks and fits the design they give.
func runEstimateDB(cmd *cobra.Command, db *dbFlags, spec *demand.Spec) (*demand.Result, *demand.Design, *ivcore.Fit, error) {
	d, note, err := db.design(cmd, spec)
	if err != nil {
		return nil, nil, nil, err
	}
	res, d, fit, err := fitDesign(d)
	if err == nil {
		res.Notes = append(res.Notes, note)
	}
	return res, d, fit, err
}

// fitDesign fits a design and summarises the fit with the cautions.
func fitDesign(d *demand.Design) (*demand.Result, *demand.Design, *ivcore.Fit, error) {
	fit, fs, err := d.Fit()
	if err != nil {
		return nil, nil, nil, err
	}
	res := d.Summarize(fit, fs)
	res.Cautions = nil
	if len(res.Elasticity) > 0 {
		res.Cautions = elasticity.Cautions
	}
	return res, d, fit, nil
}

// emit writes to standard output, or atomically to a file.
func emit(cmd *cobra.Command, out string, write func(io.Writer) error) error {
	if out == "" || out == "-" {
		return write(cmd.OutOrStdout())
	}
	if err := elasticity.WriteFileAtomic(out, write); err != nil {
		return err
	}
	fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", out)
	return nil
}
