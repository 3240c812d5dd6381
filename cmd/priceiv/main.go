// Command priceiv estimates price elasticities of demand with cost shifters
// as instruments and turns them into tables for pricing decisions.
package main

import (
	"os"
)

func main() {
	if err := newRootCmd().Execute(); err != nil {
		os.Exit(1)
	}
}
