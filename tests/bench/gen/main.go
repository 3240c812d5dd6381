// Command gen writes the invented unbalanced store panel used by the
// side-by-side comparison (tests/bench/compare.sh): products × stores
// pairs, each sold for a random stretch of weeks, with an endogenous price
// and two cost shifters (bean, freight). The model and the columns are
// documented at tests.Unbalanced; the true own-price elasticity is -1.8.
//
// Usage:
//
//	go run ./tests/bench/gen -out panel.csv                   # 20 x 800, about 2M rows
//	go run ./tests/bench/gen -stores 4000 -out panel10m.csv   # about 10M rows
package main

import (
	"flag"
	"fmt"
	"os"

	"priceiv/tests"
)

func main() {
	c := tests.DefaultUnbalanced()
	flag.IntVar(&c.Products, "products", c.Products, "number of products")
	flag.IntVar(&c.Stores, "stores", c.Stores, "number of stores")
	flag.IntVar(&c.Weeks, "weeks", c.Weeks, "number of weeks")
	flag.IntVar(&c.MinWeeks, "min", c.MinWeeks, "shortest stretch of weeks a product is sold in a store")
	flag.IntVar(&c.MaxWeeks, "max", c.MaxWeeks, "longest stretch of weeks a product is sold in a store")
	flag.IntVar(&c.Regions, "regions", c.Regions, "number of freight regions (store s is in region s mod regions)")
	flag.Uint64Var(&c.Seed, "seed", c.Seed, "random seed")
	out := flag.String("out", "", "output CSV file (required)")
	flag.Parse()
	if *out == "" || c.Products < 1 || c.Stores < 1 || c.Weeks < 1 || c.Regions < 1 ||
		c.MinWeeks < 1 || c.MaxWeeks < c.MinWeeks || c.MaxWeeks > c.Weeks {
		fmt.Fprintln(os.Stderr, "gen: give -out FILE, positive sizes, and 1 <= -min <= -max <= -weeks")
		os.Exit(2)
	}
	if err := run(*out, c); err != nil {
		fmt.Fprintln(os.Stderr, "gen:", err)
		os.Exit(1)
	}
}

func run(path string, c tests.Unbalanced) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	rows, err := tests.WriteUnbalanced(f, c)
	if err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	fmt.Fprintf(os.Stderr, "gen: wrote %d rows to %s\n", rows, path)
	return nil
}
