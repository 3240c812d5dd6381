package main

import (
	"fmt"
	"io"
	"math"
	"slices"
	"strings"

	"github.com/spf13/cobra"

	"priceiv/elasticity"
	"priceiv/ivcore"
)

func newSimulateCmd() *cobra.Command {
	var elasticities, prices, firm, format, out string
	var changes []string
	cmd := &cobra.Command{
		Use:   "simulate --elasticities FILE --change PRODUCT=MOVE... [flags]",
		Short: "Predict units, revenue and contribution after price changes, and the margins prices imply",
		Long: `Simulate takes the elasticities of an earlier estimate (written with
priceiv estimate --format json), the current price of each product and,
optionally, its unit cost, units per period and owner (--prices), and one
or more price moves. It prints, for every product of the line, the
predicted change in units, revenue and contribution with bands, and
under it the margins the elasticities imply at current prices: the
Lerner index, the implied marginal cost and, with a unit cost, the
profit-maximising price; with cross-price elasticities, also the margins
of each owner pricing its products together.

A move is PRODUCT=+5% (raise by 5 percent), PRODUCT=-3% (cut by 3
percent) or PRODUCT=4.20 (a new price). Predictions assume constant
elasticities; moves past the prices seen in the data are extrapolation
and are flagged when the estimate file records the observed range.

The prices file is comma-separated with a header: product and price are
required; unit_cost, quantity (units per period) and owner are optional.`,
		Example: `  # raise the oat latte can by 5 percent
  priceiv estimate sales.csv --quantity units --price price --shifters bean_index \
      --fe 'product*store' --cluster store --format json --out est.json
  priceiv simulate --elasticities est.json --prices prices.csv --change 'oat_latte_can=+5%'

  # two moves at once, one to a new shelf price, as JSON for a spreadsheet tool
  priceiv simulate --elasticities est.json --prices prices.csv \
      --change 'oat_latte_can=+5%' --change 'black_bottle=2.99' --format json --out whatif.json

  # prices.csv
  #   product,price,unit_cost,quantity,owner
  #   oat_latte_can,2.49,1.10,1200,us
  #   black_bottle,3.10,1.30,800,us`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			cmd.SilenceUsage = true
			if err := elasticity.CheckFormat(format); err != nil {
				return err
			}
			rep, err := runSimulate(elasticities, prices, firm, changes)
			if err != nil {
				return err
			}
			write := func(w io.Writer) error { return elasticity.WritePricing(w, rep, format) }
			if out == "" || out == "-" {
				return write(cmd.OutOrStdout())
			}
			if err := elasticity.WriteFileAtomic(out, write); err != nil {
				return err
			}
			fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", out)
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&elasticities, "elasticities", "", "estimate file written by priceiv estimate --format json")
	f.StringVar(&prices, "prices", "", "CSV of current prices: product, price, and optionally unit_cost, quantity, owner")
	f.StringArrayVar(&changes, "change", nil, "a price move, PRODUCT=+5%, PRODUCT=-3% or PRODUCT=4.20 (repeatable)")
	f.StringVar(&firm, "firm", "", "solve product-line margins for this owner only (default: every owner)")
	f.StringVar(&format, "format", "text", "output format: text, json, csv or markdown")
	f.StringVar(&out, "out", "", "write the output to this file (written only when the run succeeds)")
	_ = cmd.MarkFlagRequired("elasticities")
	_ = cmd.MarkFlagRequired("change")
	_ = cmd.MarkFlagFilename("elasticities", "json")
	_ = cmd.MarkFlagFilename("prices", "csv")
	return cmd
}

// runSimulate reads the inputs and builds the report.
func runSimulate(estPath, pricesPath, firm string, changeArgs []string) (*elasticity.PricingReport, error) {
	file, err := elasticity.ReadEstimateFile(estPath)
	if err != nil {
		return nil, err
	}
	products := file.Products()
	var rows []elasticity.PriceRow
	if pricesPath != "" {
		if rows, err = elasticity.ReadPricesFile(pricesPath, products); err != nil {
			return nil, err
		}
	} else if file.Pooled() {
		return nil, fmt.Errorf("%s holds one elasticity for all products: give the products and their current prices with --prices FILE (columns product, price, unit_cost)", estPath)
	}
	var pooledProducts []string
	if file.Pooled() {
		for _, r := range rows {
			pooledProducts = append(pooledProducts, r.Product)
		}
	}
	est, err := file.Estimates(estPath, pooledProducts)
	if err != nil {
		return nil, err
	}
	products = est.Products
	base := file.Baseline(products)
	owners := make([]string, len(products))
	anyOwner := false
	for j, r := range rows {
		base.Price[j] = *r.Price
		if r.UnitCost != nil {
			base.UnitCost[j] = *r.UnitCost
		}
		if r.Quantity != nil {
			base.Quantity[j] = *r.Quantity
		}
		owners[j] = r.Owner
		anyOwner = anyOwner || r.Owner != ""
	}
	for j, p := range base.Price {
		if math.IsNaN(p) {
			return nil, fmt.Errorf("no current price for product %q: the estimate file does not record one, so give --prices FILE with columns product, price (and optionally unit_cost, quantity, owner)", products[j])
		}
	}

	var changes []elasticity.Change
	for _, s := range changeArgs {
		c, err := elasticity.ParseChange(s, products)
		if err != nil {
			return nil, err
		}
		changes = append(changes, c)
	}
	sim, err := elasticity.Simulate(est, base, changes)
	if err != nil {
		return nil, err
	}
	rep := &elasticity.PricingReport{Level: levelOf(est), Simulation: sim}
	for j := range products {
		rep.Markups = append(rep.Markups, elasticity.MarkupOf(est.Own(j), base.Price[j], base.UnitCost[j]))
	}

	// Product-line margins need the cross-price matrix and every quantity.
	switch {
	case !est.Cross || len(products) < 2:
		if firm != "" {
			rep.LineNote = "--firm applies to product-line margins, which need cross-price elasticities (priceiv estimate --cross); the margins shown are product by product"
		}
	case !allPositive(base.Quantity):
		rep.LineNote = "product-line margins need the units per period of every product: add a quantity column to the prices file"
	default:
		pl := elasticity.ProductLine{Products: products, E: est.E, Price: base.Price, Quantity: base.Quantity, Firm: firm, Level: rep.Level}
		if anyOwner {
			for j, o := range owners {
				if o == "" {
					owners[j] = "us"
				}
			}
			pl.Owner = owners
			if firm != "" && !slices.Contains(owners, firm) {
				return nil, fmt.Errorf("--firm %q owns no product in the prices file; the owners are %s", firm, strings.Join(uniq(owners), ", "))
			}
		} else if firm != "" {
			return nil, fmt.Errorf("--firm %q: the prices file has no owner column, so every product has one owner; add an owner column or leave --firm out", firm)
		}
		if len(est.Draws) >= ivcore.MinBootstrapReplicates {
			pl.Draws = est.Draws
		}
		line, err := elasticity.ProductLineMarkups(pl)
		if err != nil {
			rep.LineNote = "product-line margins not shown: " + err.Error()
		} else {
			rep.Line = line
		}
	}
	return rep, nil
}

func levelOf(est *elasticity.Estimates) float64 {
	if est.Level > 0 && est.Level < 1 {
		return est.Level
	}
	return 0.95
}

func uniq(s []string) []string {
	var out []string
	for _, v := range s {
		if !slices.Contains(out, v) {
			out = append(out, v)
		}
	}
	return out
}

func allPositive(x []float64) bool {
	for _, v := range x {
		if !(v > 0) {
			return false
		}
	}
	return true
}
