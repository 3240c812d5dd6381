// Package demo generates an invented market with known true parameters, so
// that every step of a demand analysis can be shown and checked.
//
// # Scenario
//
// A regional cold-brew coffee maker sells six products, three bottled and
// three canned, in about a hundred stores grouped into eight regions, over
// three years of weeks (1..156). The products, in catalogue order:
//
//	Original Bottle 330ml   own elasticity -2.4   unit cost 2.00
//	Oat Latte Can 250ml                    -2.6             1.90
//	Vanilla Bottle 330ml                   -2.8             2.20
//	Black Nitro Can 250ml                  -2.2             1.60
//	Reserve Bottle 500ml                   -1.8             3.10
//	Mocha Can 250ml                        -3.0             1.80
//
// Cross-price elasticities are small and positive (substitutes), larger
// within a format; Truth.CrossElasticities holds the full matrix.
//
// # Columns
//
// One row per product x store x week that was recorded:
//
//	product           text, product name
//	store             text, "S001".."S100"
//	region            text, sales region of the store
//	week              1..Weeks
//	units             units sold, a whole number >= 1
//	price             shelf price in currency, rounded to cents
//	promo             1 when the product is on in-store display (exogenous; a control)
//	bottled           1 for bottled products, 0 for cans
//	temperature       local temperature in °C, region x week; moves demand (a control, an INVALID shifter)
//	bean_index        green-bean cost index, national, week (strong shifter)
//	freight_index     diesel freight index, region x week (moderate shifter)
//	bottle_index      glass-bottle index, national, week; moves bottled products' cost only
//	label_index       label-printing index, national, week; tiny cost share (weak shifter)
//	ingredient_index  the product's own ingredient contract index, product x region x week;
//	                  moves only that product's cost (separates own from cross effects)
//
// The panel is unbalanced as real scanner data are: some stores do not
// stock some products (the first two products are stocked everywhere),
// a few stores open during the sample, about 1% of store-weeks are lost
// to feed outages and about 0.5% of single records are lost. A lost
// record still existed in the market: its price had its cross effects.
//
// # How the data are generated
//
// Marginal cost of product i in region r, week t (indices are 100 at base):
//
//	mc = c_i * (0.30*bean/100 + 0.08*freight/100 + 0.15*bottled_i*bottle/100
//	          + 0.003*label/100 + s_i*ingredient_i/100 + rest_i)
//
// with rest_i making the shares sum to one, so mc = c_i (Truth unit cost)
// when every index is 100. Shelf prices apply the inverse-elasticity markup
// and respond to demand:
//
//	p = round2( mc * e_i/(1+e_i) * exp(level_s + 0.10*(u+ω) + 0.004*(temp-15) - 0.15*promo + η) )
//
// Log demand, with prices measured from the reference price
// pref_i = c_i*e_i/(1+e_i):
//
//	ln q = a_is + e_i*ln(p_i/pref_i) + Σ_{j≠i stocked} c_ij*ln(p_j/pref_j)
//	       + 0.035*(temp-15) + 0.30*promo + u_ist + ω_st
//
// u is an AR(1) over weeks (sd 0.18, autocorrelation 0.5) and ω a
// store-week shock (sd 0.08). Because prices rise with u+ω, price is
// endogenous and least squares is biased toward zero (Truth.OLS).
//
// # What the truth says
//
// The bean and freight indices move every product's price together, so a
// pooled own-price model instrumented by them estimates the response to a
// line-wide price move: about the mean own elasticity plus the cross
// elasticities of the products on the same shelf. Truth.Pooled gives the
// exact value for the panel at hand (the 2SLS estimand of the suggested
// model with the demand shocks removed) and its two parts. Separating own
// from cross effects needs product-specific shifters: every product's
// ingredient_index, and bottle_index for the bottled ones
// (Truth.CrossPriceModel).
//
// Temperature moves both demand and price: in the first stage it looks
// strong, but used as a shifter beside bean_index and freight_index it
// fails over-identification tests. label_index is a true cost shifter
// whose share is so small that on its own it is a weak instrument.
//
// # Suggested model
//
// Log units on log price; controls temperature and promo; fixed effects
// product x store; errors clustered by store; shifters bean_index and
// freight_index (Truth.SuggestedModel).
//
// # Reproducibility
//
// Generate draws from math/rand/v2 PCG sources seeded by Config.Seed, one
// stream per part of the market (cost series, stores, rows), so the same
// Config gives the same panel and the same bytes from WriteCSV and
// WriteTruthJSON for a given Go release and architecture.
//
// All names, products, stores and numbers are invented.
package demo
