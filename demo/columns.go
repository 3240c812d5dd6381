package demo

import (
	"fmt"

	"priceiv/demand"
)

// Column names of the panel, in order.
const (
	ColProduct     = "product"
	ColStore       = "store"
	ColRegion      = "region"
	ColWeek        = "week"
	ColUnits       = "units"
	ColPrice       = "price"
	ColPromo       = "promo"
	ColBottled     = "bottled"
	ColTemperature = "temperature"
	ColBean        = "bean_index"
	ColFreight     = "freight_index"
	ColBottle      = "bottle_index"
	ColLabel       = "label_index"
	ColIngredient  = "ingredient_index"
)

// columns collects the rows as they are drawn, plus the structural part
// of log units (ystar) and log price, which the truth needs.
type columns struct {
	product, store, region []int32
	week, units, price     []float64
	promo, bottled, temp   []float64
	bean, freight, bottle  []float64
	label, ingredient      []float64
	ystar, logP            []float64
}

func newColumns(capRows int) *columns {
	f := func() []float64 { return make([]float64, 0, capRows) }
	i := func() []int32 { return make([]int32, 0, capRows) }
	return &columns{
		product: i(), store: i(), region: i(),
		week: f(), units: f(), price: f(), promo: f(), bottled: f(), temp: f(),
		bean: f(), freight: f(), bottle: f(), label: f(), ingredient: f(),
		ystar: f(), logP: f(),
	}
}

// panel hands the columns to a demand.Panel. Text columns get their
// levels in order of first appearance, as a CSV reader would give them.
func (c *columns) panel(prods []product, nStores, nRegions int) *demand.Panel {
	n := len(c.week)
	p := demand.NewPanel("demo", n)
	names := make([]string, len(prods))
	for i, pr := range prods {
		names[i] = pr.name
	}
	storeNames := make([]string, nStores)
	for s := range storeNames {
		storeNames[s] = fmt.Sprintf("S%03d", s+1)
	}
	p.AddText(ColProduct, intern(c.product, names))
	p.AddText(ColStore, intern(c.store, storeNames))
	p.AddText(ColRegion, intern(c.region, regionNames[:nRegions]))
	p.AddNum(ColWeek, c.week)
	p.AddNum(ColUnits, c.units)
	p.AddNum(ColPrice, c.price)
	p.AddNum(ColPromo, c.promo)
	p.AddNum(ColBottled, c.bottled)
	p.AddNum(ColTemperature, c.temp)
	p.AddNum(ColBean, c.bean)
	p.AddNum(ColFreight, c.freight)
	p.AddNum(ColBottle, c.bottle)
	p.AddNum(ColLabel, c.label)
	p.AddNum(ColIngredient, c.ingredient)
	return p
}

// intern turns codes into names into a text column whose levels are in
// order of first appearance.
func intern(codes []int32, names []string) *demand.TextColumn {
	remap := make([]int32, len(names))
	for i := range remap {
		remap[i] = -1
	}
	col := &demand.TextColumn{Codes: make([]int32, len(codes))}
	for r, c := range codes {
		if remap[c] < 0 {
			remap[c] = int32(len(col.Levels))
			col.Levels = append(col.Levels, names[c])
		}
		col.Codes[r] = remap[c]
	}
	return col
}
