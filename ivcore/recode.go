package ivcore

// Recode returns a copy of m whose clustering dimension dim is renumbered:
// cluster g becomes to[g] among G clusters, and clusters no row falls in
// get empty blocks. Models fitted on different rows of one panel (the
// equations of a cross-price system) can so share one cluster coding, so
// that bootstraps run with the same seed resample the same clusters (see
// ClusterBootstrap). Recode panics if to has the wrong length or a code
// outside [0, G). The Gram, the columns and the other dimensions are
// shared with m, not copied.
func (m *Moments) Recode(dim int, to []int32, G int) *Moments {
	cb := m.Clusters[dim]
	if len(to) != cb.Dim.G {
		panic("ivcore: recode table length differs from the number of clusters")
	}
	k := cb.k
	kk := k * k
	data := make([]float64, G*kk)
	for g := 0; g < cb.Dim.G; g++ {
		t := int(to[g])
		if t < 0 || t >= G {
			panic("ivcore: recoded cluster outside [0, G)")
		}
		blk := data[t*kk : (t+1)*kk]
		for i, v := range cb.Block(g) {
			blk[i] += v
		}
	}
	codes := make([]int32, len(cb.Dim.Codes))
	for i, c := range cb.Dim.Codes {
		codes[i] = to[c]
	}
	out := *m
	out.Clusters = append([]*ClusterBlocks(nil), m.Clusters...)
	dimv := cb.Dim
	dimv.Codes, dimv.G = codes, G
	if cb.Dim.Sizes != nil {
		dimv.Sizes = make([]int, G)
		for g, sz := range cb.Dim.Sizes {
			dimv.Sizes[to[g]] += sz
		}
	}
	out.Clusters[dim] = &ClusterBlocks{Dim: dimv, data: data, k: k}
	return &out
}
