package elasticity_test

import (
	"encoding/json"
	"os"
	"strings"
	"testing"
	"time"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
)

func TestScratchReport(t *testing.T) {
	m, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		t.Fatal(err)
	}
	sm := m.Truth.SuggestedModel
	pooled := demand.Spec{Data: "demo", Quantity: sm.Quantity, Price: sm.Price, Form: sm.Form, Controls: sm.Controls, Shifters: sm.Shifters, Cluster: sm.Cluster, Product: "product", Unit: "store", Time: "week"}
	for _, fe := range sm.FixedEffects {
		pooled.FE = append(pooled.FE, strings.Join(fe, "*"))
	}
	prod := pooled
	prod.Shifters = []string{demo.ColIngredient}
	prod.Controls = []string{demo.ColTemperature, demo.ColPromo, demo.ColBean, demo.ColFreight, demo.ColBottle}
	prod.FE = []string{demo.ColStore}
	cm := m.Truth.CrossPriceModel
	cross := demand.Spec{Data: "demo", Quantity: cm.Quantity, Price: cm.Price, Form: cm.Form, Product: demo.ColProduct, Shifters: cm.Shifters, Controls: cm.Controls, Cluster: cm.Cluster, Unit: demo.ColStore, Time: demo.ColWeek}
	for _, fe := range cm.FixedEffects {
		cross.FE = append(cross.FE, strings.Join(fe, "*"))
	}
	costs := map[string]float64{}
	for _, p := range m.Truth.Products {
		costs[p.Name] = p.MeanMarginalCost
	}
	t0 := time.Now()
	r, err := elasticity.RunReport(elasticity.ReportInput{Panel: m.Panel, Pooled: &pooled, ByProduct: &prod, Cross: &cross, UnitCosts: costs, CostSource: "true", Bootstrap: 199, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	t.Log(time.Since(t0))
	b, err := json.MarshalIndent(r, "", " ")
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile("/tmp/scratch/results.json", b, 0o644)
}
