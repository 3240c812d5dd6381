package main

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"priceiv/demo"
	"priceiv/elasticity"
)

func newDemoCmd() *cobra.Command {
	cfg := demo.DefaultConfig()
	var out string
	cmd := &cobra.Command{
		Use:   "demo --out DIR [flags]",
		Short: "Write the built-in cold-brew market as a panel CSV with its true parameters",
		Long: `Demo writes an invented market: a regional cold-brew coffee maker selling
bottled and canned products in about a hundred stores over three years,
with cost shifters of known strength and validity. It writes two files
into DIR: coldbrew_panel.csv and coldbrew_truth.json (the true
elasticities and shifter effects the generator used), so the tool's
estimates can be compared with the truth.`,
		Example: `  priceiv demo --out ./coldbrew
  priceiv demo --out ./small --products 3 --stores 20 --weeks 52 --seed 7
  priceiv estimate ./coldbrew/coldbrew_panel.csv --quantity units --price price \
      --shifters bean_index,freight_index --controls temperature --fe 'product*store' --cluster store`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			cmd.SilenceUsage = true
			if st, err := os.Stat(out); err == nil && !st.IsDir() {
				return fmt.Errorf("--out %s is a file; give a folder", out)
			}
			if err := os.MkdirAll(out, 0o755); err != nil {
				return err
			}
			m, err := demo.Generate(cfg)
			if err != nil {
				return err
			}
			panelPath := filepath.Join(out, "coldbrew_panel.csv")
			truthPath := filepath.Join(out, "coldbrew_truth.json")
			var panelCSV, truth bytes.Buffer
			if err := m.WriteCSV(&panelCSV); err != nil {
				return err
			}
			if err := m.WriteTruthJSON(&truth); err != nil {
				return err
			}
			// Both files or neither: a panel never sits beside another
			// panel's truth.
			if err := elasticity.WriteFilesAtomic(out, []elasticity.NamedFile{
				{Name: filepath.Base(panelPath), Data: panelCSV.Bytes()},
				{Name: filepath.Base(truthPath), Data: truth.Bytes()},
			}); err != nil {
				return err
			}
			w := cmd.OutOrStdout()
			fmt.Fprintf(w, "wrote %s (%d rows) and %s\n", panelPath, m.Panel.N, truthPath)
			return printSuggested(w, m, panelPath)
		},
	}
	cmd.Flags().StringVar(&out, "out", "", "folder to write into (created if missing)")
	cmd.Flags().IntVar(&cfg.Products, "products", cfg.Products, "number of products (1-6)")
	cmd.Flags().IntVar(&cfg.Stores, "stores", cfg.Stores, "number of stores")
	cmd.Flags().IntVar(&cfg.Weeks, "weeks", cfg.Weeks, "number of weeks")
	cmd.Flags().Uint64Var(&cfg.Seed, "seed", cfg.Seed, "random seed (same seed, same market)")
	_ = cmd.MarkFlagRequired("out")
	return cmd
}

func printSuggested(w io.Writer, m *demo.Market, path string) error {
	s := demoSpec(m)
	_, err := fmt.Fprintf(w, "try: priceiv estimate %s --quantity %s --price %s --shifters %s --controls %s --fe %s --cluster %s\n",
		path, s.Quantity, s.Price, join(s.Shifters), join(s.Controls), shellQuote(join(s.FE)), join(s.Cluster))
	return err
}

// shellQuote quotes a flag value that a shell would otherwise expand.
func shellQuote(v string) string {
	if strings.ContainsAny(v, "*?[ ") {
		return "'" + v + "'"
	}
	return v
}

func join(s []string) string {
	out := ""
	for i, x := range s {
		if i > 0 {
			out += ","
		}
		out += x
	}
	return out
}
