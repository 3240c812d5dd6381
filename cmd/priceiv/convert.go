package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"priceiv/demand"
	"priceiv/elasticity"
)

func newConvertCmd() *cobra.Command {
	var out, delimiter string
	cmd := &cobra.Command{
		Use:   "convert PANEL.csv [--out PANEL.parquet]",
		Short: "Write a Parquet copy of a CSV panel for faster repeated runs",
		Long: `Convert reads a panel CSV file once and writes the same columns to a
Parquet file: numbers as doubles, text as strings, empty cells as nulls.
estimate reads a file whose name ends in .parquet (or .pq) as Parquet, and
gives the same estimates as from the CSV file, without parsing text again.

The copy is written to a temporary file and renamed, so a failed run never
leaves a half-written file. Without --out the copy goes beside the CSV
file, with the extension .parquet. Messages about rows of the copy count
them as lines of a CSV file with a header (row 1 is line 2); they match the
CSV file's lines unless it had blank lines or quoted line breaks.`,
		Example: `  priceiv convert sales.csv --out sales.parquet
  priceiv estimate sales.parquet --quantity units --price price \
      --shifters bean_index,freight_index --fe 'product*store,week' --cluster store

  # a semicolon-separated export, copy written beside it as week12.parquet
  priceiv convert exports/week12.csv --delimiter ';'`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cmd.SilenceUsage = true
			in := args[0]
			if out == "" {
				out = strings.TrimSuffix(in, filepath.Ext(in)) + ".parquet"
			}
			if !demand.IsParquetPath(out) {
				return fmt.Errorf("--out %s: give the Parquet copy a name ending in .parquet, so that estimate reads it as Parquet", out)
			}
			if same, err := samePath(in, out); err != nil {
				return err
			} else if same {
				return fmt.Errorf("--out %s is the input file itself; give the copy another name", out)
			}
			s := demand.Spec{Delimiter: delimiter}
			d, err := s.DelimiterByte()
			if err != nil {
				return err
			}
			p, err := demand.ReadPanelFile(in, demand.ReadOptions{Delimiter: d})
			if err != nil {
				return err
			}
			if err := elasticity.WriteFileAtomic(out, func(w io.Writer) error { return demand.WriteParquet(w, p) }); err != nil {
				return err
			}
			st, err := os.Stat(out)
			if err != nil {
				return err
			}
			text := len(p.Text)
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "wrote %s: %d rows, %d columns (%d numeric, %d text), %d bytes\n",
				out, p.N, len(p.Columns), len(p.Columns)-text, text, st.Size())
			return err
		},
	}
	cmd.Flags().StringVar(&out, "out", "", "Parquet file to write (default: the input's name with .parquet)")
	cmd.Flags().StringVar(&delimiter, "delimiter", "", `field separator of the CSV file: "," (default), ";", "|" or "tab"`)
	return cmd
}

// samePath reports whether a and b name the same existing file (b may not
// exist yet).
func samePath(a, b string) (bool, error) {
	sa, err := os.Stat(a)
	if err != nil {
		return false, fmt.Errorf("reading panel: %w", err)
	}
	sb, err := os.Stat(b)
	if err != nil {
		return false, nil
	}
	return os.SameFile(sa, sb), nil
}
