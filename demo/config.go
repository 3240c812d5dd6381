package demo

import "fmt"

// Config sets the size of the generated market and the seed of its draws.
// The same Config always gives the same panel, byte for byte.
type Config struct {
	// Products is the number of products, taken in catalogue order
	// (Catalogue). Must be between 1 and 6.
	Products int `json:"products"`
	// Stores is the number of stores. Must be at least 2. Stores are
	// spread over up to eight regions.
	Stores int `json:"stores"`
	// Weeks is the number of weeks, numbered 1..Weeks. Must be at least 2.
	Weeks int `json:"weeks"`
	// Seed selects the random draws.
	Seed uint64 `json:"seed"`
}

// DefaultConfig returns the demo market: six products, 100 stores,
// 156 weeks (three years) and a fixed seed.
//
// The seed is one at which each product's 95% own-price band covers its
// true elasticity, so that a new user's first run agrees with the truth.
// That is a choice of draw, not a property of the estimator: at six
// products about half of all seeds have one band (of twelve, per product
// and pooled) that misses, as 95% bands should; tests/coverage_test.go
// checks the coverage rate itself across many generated markets.
func DefaultConfig() Config {
	return Config{Products: 6, Stores: 100, Weeks: 156, Seed: 20261202}
}

// maxCells bounds Products*Stores*Weeks so that a mistyped size fails
// with an error instead of exhausting memory.
const maxCells = 10_000_000

// validate reports the first problem with c, saying what was found and
// how to fix it.
func (c Config) validate() error {
	switch {
	case c.Products < 1 || c.Products > len(catalogue):
		return fmt.Errorf("demo: Products is %d; choose 1 to %d (the catalogue has %d products)", c.Products, len(catalogue), len(catalogue))
	case c.Stores < 2:
		return fmt.Errorf("demo: Stores is %d; choose at least 2 so that stores can be compared", c.Stores)
	case c.Weeks < 2:
		return fmt.Errorf("demo: Weeks is %d; choose at least 2 so that prices can move over time", c.Weeks)
	}
	if cells := float64(c.Products) * float64(c.Stores) * float64(c.Weeks); cells > maxCells {
		return fmt.Errorf("demo: Products*Stores*Weeks is %.0f; choose sizes whose product is at most %d", cells, maxCells)
	}
	return nil
}
