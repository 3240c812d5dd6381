package demo

// product is one line of the maker's catalogue with its true demand and
// cost parameters.
type product struct {
	name      string
	bottled   bool
	own       float64 // true own-price elasticity
	unitCost  float64 // marginal cost when every cost index is at 100
	baseUnits float64 // typical weekly units in an average store at the reference price
	ingShare  float64 // share of unit cost tied to the product's own ingredient contract
}

// catalogue lists the six products in the order Config.Products takes
// them: bottled and canned alternate, so any prefix mixes both formats.
var catalogue = []product{
	{name: "Original Bottle 330ml", bottled: true, own: -2.4, unitCost: 2.00, baseUnits: 120, ingShare: 0.16},
	{name: "Oat Latte Can 250ml", bottled: false, own: -2.6, unitCost: 1.90, baseUnits: 90, ingShare: 0.26},
	{name: "Vanilla Bottle 330ml", bottled: true, own: -2.8, unitCost: 2.20, baseUnits: 70, ingShare: 0.18},
	{name: "Black Nitro Can 250ml", bottled: false, own: -2.2, unitCost: 1.60, baseUnits: 60, ingShare: 0.14},
	{name: "Reserve Bottle 500ml", bottled: true, own: -1.8, unitCost: 3.10, baseUnits: 35, ingShare: 0.16},
	{name: "Mocha Can 250ml", bottled: false, own: -3.0, unitCost: 1.80, baseUnits: 50, ingShare: 0.24},
}

// crossElasticity[i][j] is the elasticity of product i's units with
// respect to product j's price; the diagonal repeats the own elasticity.
// Cross effects are small and positive (substitutes), larger within a
// format (bottle with bottle, can with can).
var crossElasticity = [][]float64{
	{-2.4, 0.04, 0.15, 0.04, 0.10, 0.02},
	{0.04, -2.6, 0.02, 0.10, 0.02, 0.16},
	{0.18, 0.03, -2.8, 0.02, 0.08, 0.05},
	{0.05, 0.12, 0.02, -2.2, 0.03, 0.08},
	{0.12, 0.02, 0.06, 0.03, -1.8, 0.02},
	{0.03, 0.15, 0.05, 0.06, 0.02, -3.0},
}

// regionNames names the sales regions; stores are spread over the first
// min(Stores, 8) of them.
var regionNames = []string{
	"North Coast", "Harbourside", "River Valley", "Highlands",
	"Lakeshore", "Southern Plains", "Metro East", "Metro West",
}

// Cost shares of unit cost at base index levels (every index at 100).
// Marginal cost of product i in region r, week t is
//
//	mc = c_i * (sBean*bean/100 + sFreight*freight/100 + sBottle*bottled_i*bottle/100
//	          + sLabel*label/100 + sIng_i*ingredient/100 + sOther_i)
//
// where sOther_i makes the shares at base sum to one, so mc = c_i when
// every index is 100.
const (
	shareBean    = 0.30
	shareFreight = 0.08
	shareBottle  = 0.15 // bottled products only
	shareLabel   = 0.003
)

// Demand and pricing parameters.
const (
	tempRef      = 15.0  // °C at which temperature terms are zero
	tempDemand   = 0.035 // d log units / d °C
	tempPrice    = 0.004 // d log price / d °C (stores price up in hot weeks)
	promoDemand  = 0.30  // log units lift of an in-store display
	promoPrice   = -0.15 // log price change during a display
	promoRate    = 0.08  // share of product-store-weeks on display
	shockPrice   = 0.10  // d log price / d demand shock (the source of endogeneity)
	shockSD      = 0.18  // sd of the product-store demand shock (AR(1))
	shockRho     = 0.5   // week-to-week autocorrelation of that shock
	storeWeekSD  = 0.08  // sd of the store-week demand shock shared by products
	priceNoiseSD = 0.03  // sd of idiosyncratic log price noise
	storePriceSD = 0.04  // sd of store price level (log)
	storeSizeSD  = 0.35  // sd of store size (log units)
	tasteSD      = 0.20  // sd of product-store taste (log units)
	stockRate    = 0.92  // chance a store stocks a non-flagship product
	lateOpenRate = 0.06  // chance a store opens during the sample
	outageRate   = 0.008 // chance a store-week is missing (scanner feed outage)
	lostRate     = 0.005 // chance one product-store-week record is lost
	flagships    = 2     // the first two products are stocked everywhere
)
