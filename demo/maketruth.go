package demo

import "math"

// makeTruth assembles the truth of a generated market from the catalogue
// and the per-product sums over recorded rows. The pooled target is
// filled in separately.
func makeTruth(cfg Config, prods []product, stores []store, acc *accum, rows int) Truth {
	nP := len(prods)
	t := Truth{
		Scenario: "A regional cold-brew coffee maker sells bottled and canned products in stores grouped into regions; invented data with known true parameters.",
		Config:   cfg,
		Rows:     rows,
	}
	t.CrossElasticities = make([][]float64, nP)
	for i := range t.CrossElasticities {
		t.CrossElasticities[i] = append([]float64(nil), crossElasticity[i][:nP]...)
	}
	shifters := []ShifterTruth{
		{Column: ColBean, VariesBy: "week", Valid: true, Strength: "strong",
			Note: "green-bean cost index; moves every product's cost; a valid instrument"},
		{Column: ColFreight, VariesBy: "region x week", Valid: true, Strength: "moderate",
			Note: "diesel freight index by region; moves every product's cost; a valid instrument"},
		{Column: ColBottle, VariesBy: "week", Valid: true, Strength: "product-specific",
			Note: "glass-bottle index; moves the cost of bottled products only (zero effect on cans)"},
		{Column: ColLabel, VariesBy: "week", Valid: true, Strength: "weak",
			Note: "label-printing index; a true but tiny cost share, so a weak instrument on its own"},
		{Column: ColIngredient, VariesBy: "product x region x week", Valid: true, Strength: "product-specific",
			Note: "each product's own ingredient contract index (oat milk, vanilla, cocoa, caps); moves only that product's cost, so it separates own from cross effects"},
		{Column: ColTemperature, VariesBy: "region x week", Valid: false, Strength: "strong",
			Note: "local temperature moves demand directly (see demand.temperature); a control, never a shifter: used as one it fails over-identification tests"},
	}
	for k := range shifters {
		shifters[k].FirstStage = map[string]float64{}
	}
	var total int
	var pooled [6]float64
	t.Products = make([]ProductTruth, nP)
	for i, p := range prods {
		n := acc.rows[i]
		total += n
		line := 0.0
		for j := range nP {
			line += crossElasticity[i][j]
		}
		mk := p.own / (1 + p.own)
		shares := map[string]float64{
			ColBean: shareBean, ColFreight: shareFreight, ColLabel: shareLabel, ColIngredient: p.ingShare,
		}
		otherShare := 1 - shareBean - shareFreight - shareLabel - p.ingShare
		if p.bottled {
			shares[ColBottle] = shareBottle
			otherShare -= shareBottle
		}
		shares["other"] = clean(otherShare)
		stocking := 0
		for _, st := range stores {
			if st.stocked[i] {
				stocking++
			}
		}
		pt := ProductTruth{
			Name: p.name, Bottled: p.bottled, OwnElasticity: p.own, LineMoveElasticity: clean(line),
			UnitCost: p.unitCost, MarkupFactor: mk, Lerner: -1 / p.own, ReferencePrice: p.unitCost * mk,
			CostShares: shares, Rows: n, StoresStocking: stocking,
		}
		sums := [6]float64{acc.bean[i], acc.freight[i], acc.bottle[i], acc.label[i], acc.ingredient[i], tempPrice * float64(n)}
		if n > 0 {
			pt.MeanMarginalCost = acc.mc[i] / float64(n)
			for k := range shifters {
				shifters[k].FirstStage[p.name] = sums[k] / float64(n)
			}
		}
		for k := range pooled {
			pooled[k] += sums[k]
		}
		t.Products[i] = pt
	}
	if total > 0 {
		for k := range shifters {
			shifters[k].PooledFirstStage = pooled[k] / float64(total)
		}
	}
	t.Shifters = shifters
	t.Demand = DemandTruth{
		Temperature: tempDemand, TemperatureRef: tempRef, Promo: promoDemand,
		ShockSD: shockSD, ShockRho: shockRho, StoreWeekSD: storeWeekSD,
	}
	t.Pricing = PricingTruth{
		Rule:          "price = round to cents of mc * e/(1+e) * exp(store level + shock_response*(demand shock) + temperature*(temp-15) + promo*display + noise)",
		ShockResponse: shockPrice, Temperature: tempPrice, Promo: promoPrice, NoiseSD: priceNoiseSD,
	}
	t.OLS.Direction = "toward zero"
	t.SuggestedModel = Model{
		Form: "log-log", Quantity: ColUnits, Price: ColPrice,
		Controls:     []string{ColTemperature, ColPromo},
		FixedEffects: [][]string{{ColProduct, ColStore}},
		Cluster:      []string{ColStore},
		Shifters:     []string{ColBean, ColFreight},
		Note:         "pooled own-price model; its estimand is pooled.own_elasticity (a line-wide price move)",
	}
	t.CrossPriceModel = Model{
		Form: "log-log", Quantity: ColUnits, Price: ColPrice,
		Controls:     []string{ColTemperature, ColPromo},
		FixedEffects: [][]string{{ColStore}},
		Cluster:      []string{ColStore},
		Shifters:     []string{ColIngredient, ColBottle, ColBean, ColFreight},
		Note:         "one equation per product on all products' log prices of the same store-week; instruments are every product's ingredient_index plus the common indices; estimates cross_price_elasticities",
	}
	return t
}

// clean rounds x to 12 decimals, removing the floating-point dust of sums
// of decimal parameters (-1.9000000000000001 becomes -1.9).
func clean(x float64) float64 { return math.Round(x*1e12) / 1e12 }
