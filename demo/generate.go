package demo

import (
	"math"
	"math/rand/v2"

	"priceiv/demand"
)

// Market is a generated panel with the parameters that produced it.
type Market struct {
	// Panel has one row per product x store x week that was recorded.
	Panel *demand.Panel
	// Truth holds the true parameters.
	Truth Truth
	// Config is the configuration used.
	Config Config
}

// Each part of the market draws from its own PCG stream of the seed, so
// that, for instance, the cost series do not change when Stores does.
const (
	streamSeries uint64 = 0x7365726965730001
	streamStores uint64 = 0x73746f7265730002
	streamRows   uint64 = 0x726f777300000003
)

// store holds the fixed attributes of one store.
type store struct {
	region  int
	size    float64 // log units offset
	level   float64 // log price offset
	open    int     // first week (0-based) with sales
	stocked []bool  // by product
	taste   []float64
}

// Generate draws a market of the given size. The same Config always gives
// the same panel and truth.
//
// Log units of product i in store s, week t follow
//
//	ln q = a_is + e_i*(ln p_i - ln pref_i) + Σ_{j≠i, j stocked in s} c_ij*(ln p_j - ln pref_j)
//	       + βT*(temp - 15) + βP*promo + u_ist + ω_st
//
// with u an AR(1) over weeks and ω a store-week shock. Shelf prices are
//
//	p = round2( mc_irt * e_i/(1+e_i) * exp(level_s + γ*(u+ω) + γT*(temp-15) + δ*promo + η) )
//
// where mc depends on the cost indices (see the package documentation),
// so price responds to the demand shock (γ > 0) and to the cost shifters.
// Units are exp(ln q) rounded to a whole number, at least 1.
func Generate(cfg Config) (*Market, error) {
	if err := cfg.validate(); err != nil {
		return nil, err
	}
	nP, nS, nW := cfg.Products, cfg.Stores, cfg.Weeks
	nR := min(len(regionNames), nS)
	prods := catalogue[:nP]

	ser := makeSeries(rand.New(rand.NewPCG(cfg.Seed, streamSeries)), nP, nR, nW)
	stores := makeStores(rand.New(rand.NewPCG(cfg.Seed, streamStores)), nP, nS, nR, nW)
	rng := rand.New(rand.NewPCG(cfg.Seed, streamRows))

	markup := make([]float64, nP)
	logRef := make([]float64, nP)
	logBase := make([]float64, nP)
	other := make([]float64, nP)
	for i, p := range prods {
		markup[i] = p.own / (1 + p.own)
		logRef[i] = math.Log(p.unitCost * markup[i])
		logBase[i] = math.Log(p.baseUnits)
		other[i] = 1 - shareBean - shareFreight - shareLabel - p.ingShare
		if p.bottled {
			other[i] -= shareBottle
		}
	}

	c := newColumns(nP * nS * nW)
	acc := newAccum(nP)

	u := make([]float64, nP)
	price := make([]float64, nP)
	logP := make([]float64, nP)
	promo := make([]float64, nP)
	mc := make([]float64, nP)
	innov := math.Sqrt(1-shockRho*shockRho) * shockSD
	for s, st := range stores {
		r := st.region
		for i := range u {
			u[i] = shockSD * rng.NormFloat64()
		}
		for t := 0; t < nW; t++ {
			if t > 0 {
				for i := range u {
					u[i] = shockRho*u[i] + innov*rng.NormFloat64()
				}
			}
			omega := storeWeekSD * rng.NormFloat64()
			outage := rng.Float64() < outageRate
			if t < st.open {
				continue
			}
			temp := ser.temp[r][t]
			bean, freight, bottle, label := ser.bean[t], ser.freight[r][t], ser.bottle[t], ser.label[t]
			for i, p := range prods {
				if !st.stocked[i] {
					continue
				}
				promo[i] = 0
				if rng.Float64() < promoRate {
					promo[i] = 1
				}
				eta := priceNoiseSD * rng.NormFloat64()
				idx := shareBean*bean + shareFreight*freight + shareLabel*label + p.ingShare*ser.ingredient[i][r][t]
				if p.bottled {
					idx += shareBottle * bottle
				}
				mc[i] = p.unitCost * (idx/100 + other[i])
				lp := math.Log(mc[i]*markup[i]) + st.level + shockPrice*(u[i]+omega) +
					tempPrice*(temp-tempRef) + promoPrice*promo[i] + eta
				price[i] = math.Max(0.01, round2(math.Exp(lp)))
				logP[i] = math.Log(price[i])
			}
			for i, p := range prods {
				if !st.stocked[i] {
					continue
				}
				lost := rng.Float64() < lostRate
				ystar := logBase[i] + st.size + st.taste[i] + p.own*(logP[i]-logRef[i]) +
					tempDemand*(temp-tempRef) + promoDemand*promo[i]
				cross := 0.0
				for j := range prods {
					if j != i && st.stocked[j] {
						ystar += crossElasticity[i][j] * (logP[j] - logRef[j])
						cross += crossElasticity[i][j]
					}
				}
				units := math.Max(1, math.Round(math.Exp(ystar+u[i]+omega)))
				if outage || lost {
					continue
				}
				c.product = append(c.product, int32(i))
				c.store = append(c.store, int32(s))
				c.region = append(c.region, int32(r))
				c.week = append(c.week, float64(t+1))
				c.units = append(c.units, units)
				c.price = append(c.price, price[i])
				c.promo = append(c.promo, promo[i])
				c.bottled = append(c.bottled, b2f(p.bottled))
				c.temp = append(c.temp, temp)
				c.bean = append(c.bean, bean)
				c.freight = append(c.freight, freight)
				c.bottle = append(c.bottle, bottle)
				c.label = append(c.label, label)
				c.ingredient = append(c.ingredient, ser.ingredient[i][r][t])
				c.ystar = append(c.ystar, ystar)
				c.logP = append(c.logP, logP[i])
				acc.add(i, p, mc[i], cross)
			}
		}
	}

	m := &Market{Config: cfg, Panel: c.panel(prods, nS, nR)}
	m.Truth = makeTruth(cfg, prods, stores, acc, m.Panel.N)
	m.Truth.Pooled, m.Truth.OLS = pooledTarget(c, nP, nS, acc)
	return m, nil
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// makeStores draws store attributes: region, size, price level, opening
// week, assortment and product tastes.
func makeStores(rng *rand.Rand, nP, nS, nR, nW int) []store {
	stores := make([]store, nS)
	for s := range stores {
		st := &stores[s]
		if s < nR {
			st.region = s
		} else {
			st.region = rng.IntN(nR)
		}
		st.size = storeSizeSD * rng.NormFloat64()
		st.level = storePriceSD * rng.NormFloat64()
		late := rng.Float64() < lateOpenRate
		if late && nW >= 12 {
			st.open = nW/6 + rng.IntN(nW/3)
		}
		st.stocked = make([]bool, nP)
		st.taste = make([]float64, nP)
		for i := range st.stocked {
			st.stocked[i] = i < flagships || rng.Float64() < stockRate
			st.taste[i] = tasteSD * rng.NormFloat64()
		}
	}
	return stores
}
