package elasticity

// Cautions are shown under every elasticity, markup or what-if output.
var Cautions = []string{
	"These elasticities are statistical estimates: the bands show how far the true values may plausibly lie from the point estimates, and they hold only if the cost shifters are valid instruments.",
	"Margins read off an elasticity (the inverse-elasticity rule) assume a seller that maximises profit product by product and rivals that do not react; treat them as a check on current prices, not as a target.",
	"Price changes can fall under competition and consumer-protection law (for example rules on coordinated pricing, reference prices and unit-price display); defer to qualified counsel and local rules before acting.",
}
