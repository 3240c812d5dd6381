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
