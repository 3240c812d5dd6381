package main

import (
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"priceiv/demand"
)

func newSQLCmd() *cobra.Command {
	var mf modelFlags
	var table, query, dialect, out string
	cmd := &cobra.Command{
		Use:   "sql --table NAME|--query 'SELECT …' [model flags]",
		Short: "Print the SQL that computes a model's moment blocks where the data lives",
		Long: `sql prints the statements that compute the moment blocks of a model
(the cross-product sums every estimate, band and shifter test is made
from) inside a database or warehouse engine, followed by the query whose
result is a moments file. Run the script on one connection, save the final
result as CSV (header block,key,term,value) and estimate from it with
'priceiv estimate --moments FILE' and the same model options. Only sums
leave the engine; no row does.

--dialect postgres writes temporary tables and switches on partitionwise
aggregation (what 'priceiv estimate --db' runs); --dialect ansi writes
plain tables under the piv_ prefix and drops them at the end. Fixed
effects are absorbed by alternating projections, one GROUP BY per effect
per sweep; the script writes the sweeps out a fixed number of times
(--max-sweeps, default 50) and the result records the last change, which
estimate checks against the tolerance.`,
		Example: `  # the SQL for a warehouse, log-log demand with two absorbed effects
  priceiv sql --dialect ansi --table sales.coldbrew_weekly \
      --quantity units --price price --shifters bean_index,freight_index \
      --fe 'product*store',week --cluster store --out moments.sql

  # then, with the CSV the engine returned
  priceiv estimate --moments moments.csv --quantity units --price price \
      --shifters bean_index,freight_index --fe 'product*store',week --cluster store`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			d, err := demand.ParseDialect(dialect)
			if err != nil {
				return err
			}
			cmd.SilenceUsage = true
			spec, err := resolveDBSpec(cmd, &mf)
			if err != nil {
				return err
			}
			src := dbFlags{table: table, query: query}
			if err := src.fromSpec(cmd, args, spec, mf.spec); err != nil {
				return err
			}
			table, query = src.table, src.query
			if spec.By != "" {
				return fmt.Errorf("the script computes one model: for --by, print it once per product with --query '… WHERE %s = …'", spec.By)
			}
			script, err := demand.Script(spec, demand.SQLSource{Table: table, Query: query}, d, demand.WantsHC1(spec))
			if err != nil {
				return err
			}
			return emit(cmd, out, func(w io.Writer) error {
				_, err := io.WriteString(w, script)
				return err
			})
		},
	}
	mf.register(cmd.Flags())
	cmd.Flags().StringVar(&table, "table", "", "the table holding the panel (schema.table for another schema)")
	cmd.Flags().StringVar(&query, "query", "", "a SELECT giving the panel, instead of --table")
	cmd.Flags().StringVar(&dialect, "dialect", "postgres", "SQL dialect: postgres or ansi")
	cmd.Flags().StringVar(&out, "out", "", "write the script to this file")
	cmd.MarkFlagsMutuallyExclusive("table", "query")
	return cmd
}
