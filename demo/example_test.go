package demo_test

import (
	"fmt"
	"log"
	"strings"

	"priceiv/demo"
)

// The default market: six products in 100 stores over 156 weeks, with the
// true parameters returned beside the panel.
func ExampleGenerate() {
	m, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("rows:", m.Panel.N)
	fmt.Println("products:", len(m.Truth.Products))
	for _, p := range m.Truth.Products[:2] {
		fmt.Printf("%s: bottled %v, own elasticity %.1f, unit cost %.2f\n", p.Name, p.Bottled, p.OwnElasticity, p.UnitCost)
	}
	sm := m.Truth.SuggestedModel
	fmt.Println("shifters:", strings.Join(sm.Shifters, ", "))
	fmt.Println("controls:", strings.Join(sm.Controls, ", "))
	fmt.Printf("pooled target: %.2f\n", m.Truth.Pooled.OwnElasticity)
	fmt.Println("OLS bias:", m.Truth.OLS.Direction)
	// Output:
	// rows: 83953
	// products: 6
	// Original Bottle 330ml: bottled true, own elasticity -2.4, unit cost 2.00
	// Oat Latte Can 250ml: bottled false, own elasticity -2.6, unit cost 1.90
	// shifters: bean_index, freight_index
	// controls: temperature, promo
	// pooled target: -2.13
	// OLS bias: toward zero
}
