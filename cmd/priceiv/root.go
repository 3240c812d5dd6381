package main

import (
	"github.com/spf13/cobra"
)

// version is the program version, printed by --version and written into
// run records.
var version = "0.1.0"

func newRootCmd() *cobra.Command {
	root := &cobra.Command{
		Use:   "priceiv",
		Short: "Price elasticities from cost shifters: IV demand estimation for pricing teams",
		Long: `priceiv estimates how sales respond to price when prices are set in
response to demand. It uses cost shifters (input costs, freight, packaging,
taxes) as instruments for price, fits log-log demand by 2SLS, LIML or Fuller
with fixed effects and clustered errors, and reports elasticities with
bands.

Start with the built-in market of a cold-brew coffee maker:

  priceiv estimate --demo`,
		Version:       version,
		SilenceErrors: false,
	}
	root.AddCommand(newEstimateCmd(), newDemoCmd(), newColumnsCmd(), newSimulateCmd(), newConvertCmd(), newScreenCmd(), newReportCmd(), newSQLCmd())
	return root
}
