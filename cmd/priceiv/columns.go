package main

import (
	"fmt"
	"math"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"priceiv/demand"
)

func newColumnsCmd() *cobra.Command {
	var delimiter string
	cmd := &cobra.Command{
		Use:   "columns PANEL.csv|PANEL.parquet",
		Short: "List a panel's columns with their type, missing cells and range",
		Example: `  priceiv columns sales.csv
  priceiv columns exports/week12.csv --delimiter ';'`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cmd.SilenceUsage = true
			s := demand.Spec{Delimiter: delimiter}
			d, err := s.DelimiterByte()
			if err != nil {
				return err
			}
			p, err := demand.ReadPanelFile(args[0], demand.ReadOptions{Delimiter: d})
			if err != nil {
				return err
			}
			tw := tabwriter.NewWriter(cmd.OutOrStdout(), 0, 4, 2, ' ', 0)
			fmt.Fprintf(tw, "%s: %d rows, %d columns\n\ncolumn\tkind\tmissing\tvalues\n", p.Source, p.N, len(p.Columns))
			for _, c := range p.Columns {
				if x, ok := p.Num[c]; ok {
					lo, hi, miss := math.Inf(1), math.Inf(-1), 0
					for _, v := range x {
						if math.IsNaN(v) {
							miss++
							continue
						}
						lo, hi = math.Min(lo, v), math.Max(hi, v)
					}
					fmt.Fprintf(tw, "%s\tnumber\t%d\t%g to %g\n", c, miss, lo, hi)
					continue
				}
				t := p.Text[c]
				miss := 0
				for _, v := range t.Codes {
					if v < 0 {
						miss++
					}
				}
				fmt.Fprintf(tw, "%s\ttext\t%d\t%d distinct\n", c, miss, len(t.Levels))
			}
			return tw.Flush()
		},
	}
	cmd.Flags().StringVar(&delimiter, "delimiter", "", `field separator: "," (default), ";", "|" or "tab"`)
	return cmd
}
