package main

import (
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
)

// demoBootstrap is the number of bootstrap replicates of the demo report.
const demoBootstrap = 199

func newReportCmd() *cobra.Command {
	var mf modelFlags
	var out, prices, title string
	var whatifs []string
	var useDemo bool
	var boot int
	var seed uint64
	cmd := &cobra.Command{
		Use:   "report (--spec FILE | --demo | PANEL.csv [model flags]) --out DIR",
		Short: "Run the whole workflow of a spec and write the meeting pack: HTML report, workbook, CSV and JSON",
		Long: `Report runs everything a pricing meeting needs from one spec: the pooled
model with the evidence on its cost shifters, one model per product with
weak-instrument-robust bands, the cross-price matrix, the margins each
elasticity implies at current prices, product-line margins, and price
what-ifs. It writes into DIR:

  report.html      one self-contained page: summary, pictures, evidence,
                   cautions and the run record (prints cleanly)
  tables.xlsx      one sheet per table, numbers as numbers
  *.csv            the same tables as CSV files
  results.json     every number of the report
  run_record.json  inputs (SHA-256 and size), specs as used, version,
                   seeds, start and wall time

Every file is written to a temporary file and renamed only when all of
them are ready, so a failed run leaves an earlier pack as it was; other
files in DIR are never touched.

The per-product models use the spec's product column (product:), the
cross-price matrix also needs unit: and time:. Current prices, unit costs
and units per period come from prices: (a CSV with product, price and
optionally unit_cost, quantity, owner); without it the mean prices of the
data are used and no unit cost is known. What-ifs come from whatifs:
(one scenario per entry, "PRODUCT=+5%"), or +5% on each product alone.`,
		Example: `  # the built-in cold-brew market: every section, with true unit costs
  priceiv report --demo --out ./meeting

  # your own spec (keys as for priceiv estimate, plus the report keys)
  priceiv report --spec model.yaml --out ./meeting

  # model.yaml
  #   data: sales.csv
  #   quantity: units
  #   price: price
  #   shifters: [bean_index, ingredient_index]
  #   controls: [temperature, promo]
  #   product: product
  #   unit: store
  #   time: week
  #   fe: [product*store]
  #   cluster: [store]
  #   title: Cold-brew line, spring review
  #   prices: prices.csv
  #   whatifs: ["Oat Latte Can 250ml=+5%", "Mocha Can 250ml=-3%; Oat Latte Can 250ml=-3%"]
  #   bootstrap: 199
  #   seed: 7`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cmd.SilenceUsage = true
			if st, err := os.Stat(out); err == nil && !st.IsDir() {
				return fmt.Errorf("--out %s is a file, not a folder: give a folder for the report (it is created if missing)", out)
			}
			rec := elasticity.NewRunRecord("priceiv", version)
			rec.Command = commandLine(cmd, args)
			var in elasticity.ReportInput
			var err error
			if useDemo {
				in, err = demoReportInput(cmd, &mf, &rec)
			} else {
				in, err = specReportInput(cmd, &mf, args, &rec)
			}
			if err != nil {
				return err
			}
			f := cmd.Flags()
			if f.Changed("title") {
				in.Title = title
			}
			if f.Changed("prices") {
				if in.Prices, err = readPricesFor(prices, &rec); err != nil {
					return err
				}
				in.PricesSource = "prices file " + filepath.Base(prices)
			}
			if f.Changed("whatif") {
				in.WhatIfs = whatifs
			}
			if f.Changed("bootstrap") {
				in.Bootstrap = boot
			}
			if f.Changed("seed") {
				in.Seed = seed
			}
			if in.Seed == 0 {
				in.Seed = 1
			}
			in.Record = rec
			data, err := elasticity.RunReport(in)
			if err != nil {
				return err
			}
			data.Record.Finish()
			if err := elasticity.WriteReport(out, data); err != nil {
				return err
			}
			w := cmd.OutOrStdout()
			fmt.Fprintf(w, "wrote %s: %s\n", out, strings.Join(data.ReportFiles(), ", "))
			for _, s := range data.Sections {
				if !s.Done {
					fmt.Fprintf(w, "  not in the report: %s (%s)\n", s.Title, s.Reason)
				}
			}
			if n := len(data.Warnings); n > 0 {
				fmt.Fprintf(w, "  %d warning(s): read them under \"Read with care\" in %s\n", n, filepath.Join(out, elasticity.ReportHTMLFile))
			}
			return nil
		},
	}
	mf.register(cmd.Flags())
	f := cmd.Flags()
	f.BoolVar(&useDemo, "demo", false, "report on the built-in cold-brew market (generated in memory, fixed seed), with its true unit costs")
	f.StringVar(&out, "out", "", "folder to write the report into (created if missing)")
	f.StringVar(&title, "title", "", "title of the report (default: the spec's title:)")
	f.StringVar(&prices, "prices", "", "CSV of current prices per product: product, price, optional unit_cost, quantity, owner (default: the spec's prices:)")
	f.StringArrayVar(&whatifs, "whatif", nil, "a price move to simulate, PRODUCT=+5%, PRODUCT=-3% or PRODUCT=4.20, several joined by '; ' (repeatable; default: the spec's whatifs:)")
	f.IntVar(&boot, "bootstrap", 0, "cluster-bootstrap replicates of the cross-price matrix for what-if and margin bands (0: none; default: the spec's bootstrap:)")
	f.Uint64Var(&seed, "seed", 1, "seed of the bootstrap draws (default: the spec's seed:, else 1)")
	_ = cmd.MarkFlagRequired("out")
	_ = cmd.MarkFlagFilename("spec", "yaml", "yml")
	_ = cmd.MarkFlagFilename("prices", "csv")
	cmd.MarkFlagsMutuallyExclusive("demo", "data")
	cmd.MarkFlagsMutuallyExclusive("demo", "spec")
	return cmd
}

// commandLine writes the command as run: its path, arguments and the
// flags that were set.
func commandLine(cmd *cobra.Command, args []string) string {
	parts := []string{cmd.CommandPath()}
	parts = append(parts, args...)
	cmd.Flags().Visit(func(f *pflag.Flag) {
		if sv, ok := f.Value.(pflag.SliceValue); ok {
			for _, v := range sv.GetSlice() {
				parts = append(parts, fmt.Sprintf("--%s=%q", f.Name, v))
			}
			return
		}
		if f.Value.Type() == "bool" {
			parts = append(parts, "--"+f.Name)
			return
		}
		parts = append(parts, fmt.Sprintf("--%s=%q", f.Name, f.Value.String()))
	})
	return strings.Join(parts, " ")
}

// demoReportInput sets up the report of the demo market: the pooled,
// per-product and cross-price models the market is built to identify,
// the generator's true unit costs, and the true elasticities to compare
// with. Model flags given on the command line override each model.
func demoReportInput(cmd *cobra.Command, mf *modelFlags, rec *elasticity.RunRecord) (elasticity.ReportInput, error) {
	cfg := demo.DefaultConfig()
	m, err := demo.Generate(cfg)
	if err != nil {
		return elasticity.ReportInput{}, err
	}
	var specs [3]*demand.Spec
	for i, base := range []demand.Spec{demoSpec(m), demoProductSpec(m), demoCrossSpec(m)} {
		if specs[i], err = mf.resolve(cmd, base); err != nil {
			return elasticity.ReportInput{}, err
		}
	}
	specs[1].By = specs[1].Product
	in := elasticity.ReportInput{
		Title: "Cold-brew line: price response and margins (demo market)", Panel: m.Panel,
		Pooled: specs[0], ByProduct: specs[1], Cross: specs[2], Screen: demoScreenSpec(*specs[0]),
		UnitCosts: map[string]float64{}, CostSource: "the demo generator's true marginal cost (mean over the product's rows)",
		Bootstrap: demoBootstrap, Seed: 1,
		Truth: &elasticity.KnownTruth{Own: map[string]float64{}, Pooled: m.Truth.Pooled.OwnElasticity, PooledDefined: m.Truth.Pooled.Defined},
	}
	for _, p := range m.Truth.Products {
		in.UnitCosts[p.Name] = p.MeanMarginalCost
		in.Truth.Own[p.Name] = p.OwnElasticity
	}
	h, err := elasticity.HashWritten("panel", "demo market (generated in memory; hash of its CSV as priceiv demo writes it)", m.WriteCSV)
	if err != nil {
		return elasticity.ReportInput{}, err
	}
	rec.Inputs = append(rec.Inputs, h)
	rec.DataSeed = cfg.Seed
	return in, nil
}

// demoScreenCandidates are the demo market's candidate cost shifters:
// the pooled model's, the bottle and label indices, and the temperature,
// which moves demand itself (an invalid instrument the screen must flag).
var demoScreenCandidates = []string{demo.ColBean, demo.ColFreight, demo.ColBottle, demo.ColLabel, demo.ColTemperature}

// demoScreenSpec is the pooled model with every candidate as a shifter
// (the temperature moved from the controls).
func demoScreenSpec(pooled demand.Spec) *demand.Spec {
	s := pooled
	s.Shifters = demoScreenCandidates
	s.Controls = nil
	for _, c := range pooled.Controls {
		if !slices.Contains(demoScreenCandidates, c) {
			s.Controls = append(s.Controls, c)
		}
	}
	return &s
}

// specReportInput sets up the report of a spec (file and flags): its
// model pooled, per product when it names the product column, and as a
// cross-price matrix when it also names the market and time columns.
func specReportInput(cmd *cobra.Command, mf *modelFlags, args []string, rec *elasticity.RunRecord) (elasticity.ReportInput, error) {
	spec, panel, err := loadInputs(cmd, mf, args, false)
	if err != nil {
		return elasticity.ReportInput{}, err
	}
	if mf.spec != "" {
		h, err := elasticity.HashFile("spec", mf.spec)
		if err != nil {
			return elasticity.ReportInput{}, err
		}
		rec.Inputs = append(rec.Inputs, h)
	}
	h, err := elasticity.HashFile("panel", spec.Data)
	if err != nil {
		return elasticity.ReportInput{}, err
	}
	rec.Inputs = append(rec.Inputs, h)
	in := elasticity.ReportInput{Title: spec.Title, Panel: panel, WhatIfs: spec.WhatIfs, Bootstrap: spec.Bootstrap, Seed: spec.Seed,
		Skip: map[string]string{}}
	if spec.Prices != "" {
		path := spec.Prices
		if mf.spec != "" && !filepath.IsAbs(path) {
			path = filepath.Join(filepath.Dir(mf.spec), path)
		}
		if in.Prices, err = readPricesFor(path, rec); err != nil {
			return elasticity.ReportInput{}, err
		}
		in.PricesSource = "prices file " + filepath.Base(path)
	}
	product := spec.Product
	for _, c := range []string{spec.By, spec.Interact} {
		if c != "" {
			product = c
		}
	}
	pooled := *spec
	pooled.By, pooled.Interact, pooled.Cross = "", "", false
	in.Pooled = &pooled
	if len(pooled.Shifters) >= 2 || len(pooled.Instruments) >= 2 {
		screen := pooled
		in.Screen = &screen
	} else {
		in.Skip[elasticity.SectionScreen] = "the spec names fewer than two shifters, so there are no combinations to compare"
	}
	switch {
	case !spec.DemandForm():
		why := "the spec states a general IV model (outcome, endogenous, instruments); per-product and cross-price elasticities need the demand form (quantity, price, shifters)"
		in.Skip[elasticity.SectionProducts], in.Skip[elasticity.SectionCross] = why, why
		return in, nil
	case product == "":
		why := "the spec names no product column: set product: (for example product: product)"
		in.Skip[elasticity.SectionProducts], in.Skip[elasticity.SectionCross] = why, why
		return in, nil
	}
	pooled.Product = product
	by := pooled
	by.By = product
	in.ByProduct = &by
	if spec.Unit == "" || spec.Time == "" {
		in.Skip[elasticity.SectionCross] = "the cross-price matrix matches products by market and period: set unit: (for example store) and time: (for example week) in the spec"
		return in, nil
	}
	cross := pooled
	cross.Cross = true
	in.Cross = &cross
	return in, nil
}

// readPricesFor reads a prices file and records it as an input.
func readPricesFor(path string, rec *elasticity.RunRecord) ([]elasticity.PriceRow, error) {
	rows, err := elasticity.ReadPricesFile(path, nil)
	if err != nil {
		return nil, err
	}
	h, err := elasticity.HashFile("prices", path)
	if err != nil {
		return nil, err
	}
	rec.Inputs = append(rec.Inputs, h)
	return rows, nil
}
