package elasticity

import (
	"fmt"
	"sort"

	"gonum.org/v1/gonum/stat"

	"priceiv/demand"
	"priceiv/ivcore"
)

// MinBootstrap is the smallest number of replicates accepted: fewer give
// percentile bands whose ends rest on one or two draws.
const MinBootstrap = 50

// bootstrapFit runs the pairs cluster bootstrap of a fit on its design's
// first clustering dimension (Cameron, Gelbach & Miller 2008, "Bootstrap-
// based improvements for inference with clustered errors", REStat 90(3)),
// each replicate summing resampled per-cluster moment blocks.
func bootstrapFit(d *demand.Design, fit *ivcore.Fit, B int, seed uint64, progress func(int)) (*ivcore.Bootstrap, error) {
	if len(d.Moments.Clusters) == 0 {
		return nil, fmt.Errorf("the cluster bootstrap resamples clusters: set --cluster (for example the store column)")
	}
	if B < MinBootstrap {
		return nil, fmt.Errorf("--bootstrap %d is too few replicates: percentile bands need at least %d (999 is usual)", B, MinBootstrap)
	}
	if g := d.Moments.Clusters[0].Dim.G; g < 2 {
		return nil, fmt.Errorf("the cluster bootstrap needs at least 2 clusters; %q has %d", d.Moments.Clusters[0].Dim.Name, g)
	}
	return ivcore.ClusterBootstrap(d.Moments, 0, fit.Model, fit.Estimator, B, seed, 0, progress)
}

// elasticityBand turns the draws of coefficient j, times scale, into a
// percentile band.
func elasticityBand(bs *ivcore.Bootstrap, j int, scale, level float64) (*demand.BootstrapBand, []float64) {
	x := bs.Column(j)
	for i := range x {
		x[i] *= scale
	}
	draws := append([]float64(nil), x...)
	sort.Float64s(x)
	return &demand.BootstrapBand{
		Low:        stat.Quantile((1-level)/2, stat.Empirical, x, nil),
		High:       stat.Quantile((1+level)/2, stat.Empirical, x, nil),
		StdError:   stat.StdDev(x, nil),
		Replicates: len(x), Failed: len(bs.Failed), Clusters: bs.G, Seed: bs.Seed, Level: level,
	}, draws
}

// BootstrapPooled adds a cluster-bootstrap percentile band (B replicates,
// reproducible for a given seed on any number of cores) to the pooled
// elasticity of res.
func BootstrapPooled(d *demand.Design, fit *ivcore.Fit, res *demand.Result, B int, seed uint64, progress func(int)) error {
	if len(res.Elasticity) == 0 {
		return fmt.Errorf("--bootstrap needs the demand form (an elasticity to band)")
	}
	bs, err := bootstrapFit(d, fit, B, seed, progress)
	if err != nil {
		return err
	}
	j := fit.Index(d.Names[d.Model.Endog[0]])
	res.Elasticity[0].Bootstrap, res.Elasticity[0].BootstrapDraws = elasticityBand(bs, j, d.ElasticityScale(), d.Level)
	res.Notes = append(res.Notes, bs.Notes...)
	return nil
}

// BootstrapTable adds cluster-bootstrap bands to every estimated product
// of a per-product table. Products sharing one pooled fit (the interaction
// model) share one set of replicates.
func BootstrapTable(t *demand.ProductTable, B int, seed uint64, progress func(int)) error {
	done := map[*ivcore.Fit]*ivcore.Bootstrap{}
	var notes []string
	for i, pf := range t.Fits {
		if pf == nil {
			continue
		}
		bs, ok := done[pf.Fit]
		if !ok {
			var err error
			bs, err = bootstrapFit(pf.Design, pf.Fit, B, seed, progress)
			if err != nil {
				return fmt.Errorf("%s: %w", pf.Product, err)
			}
			done[pf.Fit] = bs
			notes = bs.Notes
		}
		row := &t.Elasticities[i]
		row.Bootstrap, row.BootstrapDraws = elasticityBand(bs, pf.Index, pf.Scale, row.Level)
	}
	t.Notes = append(t.Notes, notes...)
	return nil
}

// BootstrapCross adds cluster-bootstrap bands to a cross-price matrix.
// Every equation's cluster blocks are recoded to one coding of the
// clusters over all equations (by cluster label), and all equations are
// bootstrapped with the same seed, so replicate r resamples the same
// clusters in every equation: the draws of the whole matrix are joint
// draws, as what-ifs across products need.
func BootstrapCross(c *demand.CrossPrice, B int, seed uint64, progress func(int)) error {
	n := len(c.Products)
	if c.Form != "log-log" {
		return fmt.Errorf("--bootstrap with --cross is available for log-log demand, where the coefficients are the elasticities; this model is %s", c.Form)
	}
	if len(c.Fits) != n {
		return fmt.Errorf("--bootstrap: the cross-price matrix has %d products but %d fitted equations", n, len(c.Fits))
	}
	// One coding of cluster labels across equations.
	global := map[string]int32{}
	tos := make([][]int32, n)
	for i, pf := range c.Fits {
		d := pf.Design
		if len(d.Moments.Clusters) == 0 {
			return fmt.Errorf("the cluster bootstrap resamples clusters: set --cluster (for example the store column)")
		}
		_, labels, err := d.Panel.IDs(d.ClusterNames[0])
		if err != nil {
			return err
		}
		pcodes, _, _ := d.Panel.IDs(d.ClusterNames[0])
		cd := d.Moments.Clusters[0].Dim
		to := make([]int32, cd.G)
		for j := 0; j < d.N; j++ {
			row := j // a design that uses every row may leave Rows nil
			if d.Rows != nil {
				row = int(d.Rows[j])
			}
			lab := labels[pcodes[row]]
			g, ok := global[lab]
			if !ok {
				g = int32(len(global))
				global[lab] = g
			}
			to[cd.Codes[j]] = g
		}
		tos[i] = to
	}
	G := len(global)
	draws := make([]map[int][]float64, n)
	var total int
	for i, pf := range c.Fits {
		d := pf.Design
		m := d.Moments.Recode(0, tos[i], G)
		if B < MinBootstrap {
			return fmt.Errorf("--bootstrap %d is too few replicates: percentile bands need at least %d (999 is usual)", B, MinBootstrap)
		}
		var tick func(int)
		if progress != nil {
			base := total
			tick = func(k int) { progress(base + k) }
		}
		bs, err := ivcore.ClusterBootstrap(m, 0, pf.Fit.Model, pf.Fit.Estimator, B, seed, 0, tick)
		if err != nil {
			return fmt.Errorf("%s: %w", pf.Product, err)
		}
		total += B
		draws[i] = map[int][]float64{}
		for r, row := range bs.Draws {
			e := make([]float64, n)
			// The prices are the endogenous regressors, in product
			// order, and come first among the coefficients.
			copy(e, row[:n])
			draws[i][bs.Index[r]] = e
		}
	}
	// Keep replicates that succeeded in every equation.
	var joint [][][]float64
	for r := 0; r < B; r++ {
		mtx := make([][]float64, n)
		ok := true
		for i := range c.Fits {
			row, has := draws[i][r]
			if !has {
				ok = false
				break
			}
			mtx[i] = row
		}
		if ok {
			joint = append(joint, mtx)
		}
	}
	if len(joint) < MinBootstrap {
		return fmt.Errorf("--bootstrap: only %d of %d replicates could be estimated in every equation", len(joint), B)
	}
	cb := &demand.CrossBootstrap{Replicates: len(joint), Clusters: G, Seed: seed, Level: c.Level}
	for i := 0; i < n; i++ {
		lo, hi, se := make([]float64, n), make([]float64, n), make([]float64, n)
		for j := 0; j < n; j++ {
			x := make([]float64, len(joint))
			for r := range joint {
				x[r] = joint[r][i][j]
			}
			sort.Float64s(x)
			lo[j] = stat.Quantile((1-c.Level)/2, stat.Empirical, x, nil)
			hi[j] = stat.Quantile((1+c.Level)/2, stat.Empirical, x, nil)
			se[j] = stat.StdDev(x, nil)
		}
		cb.CILow, cb.CIHigh, cb.StdErrors = append(cb.CILow, lo), append(cb.CIHigh, hi), append(cb.StdErrors, se)
	}
	c.Bootstrap, c.BootstrapDraws = cb, joint
	return nil
}
