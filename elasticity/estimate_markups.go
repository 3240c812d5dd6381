package elasticity

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"

	"priceiv/demand"
)

// priceFor returns the price and unit cost to use for a product: the
// --prices row when given, else the mean price over the rows used (unit
// cost unknown).
func priceFor(product string, st demand.PriceStats, prices []PriceRow) (p, c float64, from string) {
	p, c, from = st.MeanPrice, math.NaN(), "mean price over the rows used"
	for _, r := range prices {
		if r.Product != product {
			continue
		}
		if r.Price != nil {
			p, from = *r.Price, "price from the prices file"
		}
		if r.UnitCost != nil {
			c = *r.UnitCost
		}
	}
	return p, c, from
}

// PooledMarkups returns the single-product margins implied by a pooled
// demand estimate at the mean price (or a price from the prices file,
// where the product is "all").
func PooledMarkups(r *demand.Result, prices []PriceRow) *PricingReport {
	rep := &PricingReport{Level: r.Level}
	for _, e := range r.Elasticity {
		p, c, from := priceFor(e.Product, e.PriceStats, prices)
		m := MarkupOf(OwnElasticity{Product: e.Product, E: e.OwnPrice, Lo: e.CILow, Hi: e.CIHigh, SE: e.StdError, Band: "Wald"}, p, c)
		rep.Markups = append(rep.Markups, m)
		rep.Notes = append(rep.Notes, fmt.Sprintf("%s: margins at the %s (%.4g).", e.Product, from, p))
	}
	return rep
}

// TableMarkups returns the single-product margins of every estimated
// product of a per-product table, each at its mean price (or its price in
// the prices file) with its unit cost when the prices file gives one.
func TableMarkups(t *demand.ProductTable, prices []PriceRow) *PricingReport {
	rep := &PricingReport{Level: t.Level}
	for _, e := range t.Elasticities {
		if e.Failed {
			continue
		}
		p, c, _ := priceFor(e.Product, e.PriceStats, prices)
		m := MarkupOf(OwnElasticity{Product: e.Product, E: e.OwnPrice, Lo: e.CILow, Hi: e.CIHigh, SE: e.StdError, Band: "Wald"}, p, c)
		rep.Markups = append(rep.Markups, m)
	}
	if len(prices) == 0 {
		rep.Notes = append(rep.Notes, "Margins are evaluated at each product's mean price over the rows used; give --prices FILE for current prices and unit costs.")
	}
	return rep
}

// CrossMarkups returns the product-line margins implied by a cross-price
// matrix: each owner pricing all of its products together (one firm owns
// them all unless owners are given, by the prices file's owner column or
// by owners, a map from product to owner that takes precedence), at mean
// prices and mean units per
// market-period unless the prices file gives them.
func CrossMarkups(c *demand.CrossPrice, stats map[string]demand.PriceStats, prices []PriceRow, owners map[string]string) *PricingReport {
	rep := &PricingReport{Level: c.Level}
	n := len(c.Products)
	E := mat.NewDense(n, n, nil)
	price := make([]float64, n)
	qty := make([]float64, n)
	var owner []string
	for i, p := range c.Products {
		for j := range c.Products {
			E.Set(i, j, c.Matrix[i][j])
		}
		st := stats[p]
		price[i], qty[i] = st.MeanPrice, st.MeanQuantity
		o := ""
		for _, r := range prices {
			if r.Product != p {
				continue
			}
			if r.Price != nil {
				price[i] = *r.Price
			}
			if r.Quantity != nil {
				qty[i] = *r.Quantity
			}
			o = r.Owner
		}
		if ow, ok := owners[p]; ok {
			o = ow
		}
		owner = append(owner, o)
		own := OwnElasticity{Product: p, E: c.Matrix[i][i], Lo: c.CILow[i][i], Hi: c.CIHigh[i][i], SE: c.StdErrors[i][i], Band: "Wald"}
		_, cost, _ := priceFor(p, st, prices)
		rep.Markups = append(rep.Markups, MarkupOf(own, price[i], cost))
	}
	allSame := true
	for _, o := range owner {
		allSame = allSame && o == owner[0]
	}
	pl := ProductLine{Products: c.Products, E: E, Price: price, Quantity: qty, Level: c.Level}
	if !allSame {
		pl.Owner = owner
	}
	line, err := ProductLineMarkups(pl)
	if err != nil {
		rep.LineNote = "Product-line margins not computed: " + err.Error()
	} else {
		rep.Line = line
	}
	return rep
}

// ProductStats returns each product's price and quantity statistics over
// the rows of a panel with positive price and quantity.
func ProductStats(p *demand.Panel, productCol, priceCol, qtyCol string) (map[string]demand.PriceStats, error) {
	codes, levels, err := p.IDs(productCol)
	if err != nil {
		return nil, err
	}
	pr, err := p.Float(priceCol)
	if err != nil {
		return nil, err
	}
	q, err := p.Float(qtyCol)
	if err != nil {
		return nil, err
	}
	n := make([]int, len(levels))
	sp, sq := make([]float64, len(levels)), make([]float64, len(levels))
	lo, hi := make([]float64, len(levels)), make([]float64, len(levels))
	for k := range lo {
		lo[k], hi[k] = math.Inf(1), math.Inf(-1)
	}
	for i, c := range codes {
		if c < 0 || !(pr[i] > 0) || !(q[i] > 0) {
			continue
		}
		n[c]++
		sp[c] += pr[i]
		sq[c] += q[i]
		lo[c], hi[c] = math.Min(lo[c], pr[i]), math.Max(hi[c], pr[i])
	}
	out := map[string]demand.PriceStats{}
	for k, l := range levels {
		if n[k] > 0 {
			out[l] = demand.PriceStats{MeanPrice: sp[k] / float64(n[k]), MeanQuantity: sq[k] / float64(n[k]), PriceMin: lo[k], PriceMax: hi[k]}
		}
	}
	return out, nil
}

// ProductOwners reads which owner each product belongs to from an owner
// column of the panel (one owner per product; rows with a missing owner are
// ignored). A product with two owners is an error naming both and a line.
func ProductOwners(p *demand.Panel, productCol, ownerCol string) (map[string]string, error) {
	pc, pl, err := p.IDs(productCol)
	if err != nil {
		return nil, err
	}
	oc, ol, err := p.IDs(ownerCol)
	if err != nil {
		return nil, err
	}
	out := map[string]string{}
	for i := range pc {
		if pc[i] < 0 || oc[i] < 0 {
			continue
		}
		prod, own := pl[pc[i]], ol[oc[i]]
		if prev, ok := out[prod]; ok && prev != own {
			return nil, fmt.Errorf("%s: line %d: product %q has owner %q here but %q elsewhere; --owner needs one owner per product", p.Source, p.Line(i), prod, own, prev)
		}
		out[prod] = own
	}
	return out, nil
}

// WriteCombined writes several reports as one output: text, Markdown and
// CSV one after the other; JSON as one object holding the keys of every
// part, with the "cautions" of all parts merged without repeats. In text
// the cautions block ("READ WITH CARE") is printed once, by the last part.
func WriteCombined(w io.Writer, format string, parts ...func(io.Writer, string) error) error {
	if format != "json" {
		for i, part := range parts {
			var buf bytes.Buffer
			if err := part(&buf, format); err != nil {
				return err
			}
			b := buf.Bytes()
			if len(b) == 0 {
				continue
			}
			if format == "text" && i < len(parts)-1 {
				if k := bytes.Index(b, []byte("\nREAD WITH CARE\n")); k >= 0 {
					b = b[:k+1]
				}
			}
			if i > 0 {
				io.WriteString(w, "\n")
			}
			if _, err := w.Write(b); err != nil {
				return err
			}
		}
		return nil
	}
	merged := map[string]json.RawMessage{}
	var cautions []string
	seen := map[string]bool{}
	for _, part := range parts {
		var buf bytes.Buffer
		if err := part(&buf, "json"); err != nil {
			return err
		}
		var m map[string]json.RawMessage
		if err := json.Unmarshal(buf.Bytes(), &m); err != nil {
			return fmt.Errorf("combining outputs: %w", err)
		}
		for k, v := range m {
			if k == "cautions" {
				var cs []string
				_ = json.Unmarshal(v, &cs)
				for _, c := range cs {
					if !seen[c] {
						seen[c] = true
						cautions = append(cautions, c)
					}
				}
				continue
			}
			merged[k] = v
		}
	}
	if cautions != nil {
		b, _ := json.Marshal(cautions)
		merged["cautions"] = b
	}
	keys := make([]string, 0, len(merged))
	for k := range merged {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	var out bytes.Buffer
	out.WriteString("{\n")
	for i, k := range keys {
		kb, _ := json.Marshal(k)
		var ind bytes.Buffer
		json.Indent(&ind, merged[k], "  ", "  ")
		fmt.Fprintf(&out, "  %s: %s", kb, ind.Bytes())
		if i < len(keys)-1 {
			out.WriteString(",")
		}
		out.WriteString("\n")
	}
	out.WriteString("}\n")
	_, err := w.Write(out.Bytes())
	return err
}

// CrossOwnRows returns the diagonal of a cross-price matrix as own-price
// elasticity rows, with each product's prices and units, so that an
// estimate file of a cross-price model is complete for what-ifs.
func CrossOwnRows(c *demand.CrossPrice, stats map[string]demand.PriceStats) []demand.Elasticity {
	var out []demand.Elasticity
	for i, p := range c.Products {
		out = append(out, demand.Elasticity{
			Product: p, OwnPrice: c.Matrix[i][i], StdError: c.StdErrors[i][i],
			CILow: c.CILow[i][i], CIHigh: c.CIHigh[i][i], At: "everywhere (constant elasticity)",
			N: c.N[i], PriceStats: stats[p],
		})
	}
	return out
}

// WriteJSONOnly returns a part for WriteCombined that writes v under key in
// JSON output and nothing in the other formats.
func WriteJSONOnly(key string, v any) func(io.Writer, string) error {
	return func(w io.Writer, format string) error {
		if format != "json" {
			return nil
		}
		return json.NewEncoder(w).Encode(map[string]any{key: v})
	}
}
