package supplyshifters

import (
	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// scoreBank holds the sandwich meat of regressions on the instruments Z
// for several residual combinations at once,
//
//	M_pq = c Σ_u (Z_uᵀe_p,u)(Z_uᵀe_q,u)ᵀ,   e_p = A r_p
//
// so that every robust statistic of the diagnostics shares one pass over
// the rows (HC1) or comes from the cluster blocks. The small-sample factor
// c is that of ivcore.Moments.Meat with k = |Z| + absorbed levels (the
// parameters of a regression on Z); raw blocks leave it out. Under iid
// errors the blocks are
//
//	M_pq = (e_pᵀe_q / (n - k)) ZᵀZ,   raw: (e_pᵀe_q / n) ZᵀZ
//
// so that B M_pq B, with B = (ZᵀZ)⁻¹, is in every case the covariance of
// the coefficients of the regressions of e_p and e_q on Z.
type scoreBank struct {
	m   *ivcore.Moments
	z   []int
	vk  ivcore.VcovKind
	k   int
	res [][]float64

	meat, raw *mat.SymDense // (R·|Z|)², nil under iid
	zz        *mat.SymDense // ZᵀZ (iid)
	info      ivcore.VcovInfo
}

// add registers a residual combination and returns its index. All
// residuals must be added before compute.
func (b *scoreBank) add(r []float64) int {
	b.res = append(b.res, r)
	return len(b.res) - 1
}

// compute forms the meat: one pass over the rows for HC1, the cluster
// blocks otherwise.
func (b *scoreBank) compute() error {
	var err error
	kz := len(b.z)
	switch b.vk {
	case ivcore.IID:
		_, b.info, _ = b.m.Meat(b.z, nil, ivcore.IID, b.k)
		b.zz = subSym(b.m.Gram, b.z)
	case ivcore.HC1:
		if len(b.res) == 0 { // nothing needs the rows
			b.info = ivcore.VcovInfo{Kind: ivcore.HC1, DF: b.m.N - b.k}
			return nil
		}
		b.meat, b.info, err = b.m.Meat(b.z, b.res, ivcore.HC1, b.k)
		if err != nil {
			return err
		}
		b.raw = mat.NewSymDense(kz*len(b.res), nil)
		b.raw.ScaleSym(float64(b.m.N-b.k)/float64(b.m.N), b.meat)
	case ivcore.Cluster:
		if len(b.res) == 0 {
			b.res = append(b.res, make([]float64, len(b.m.Names)))
		}
		b.meat, b.info, err = b.m.Meat(b.z, b.res, ivcore.Cluster, b.k)
		if err != nil {
			return err
		}
		for d := range b.m.Clusters {
			s, err := b.m.ScoreCov(b.z, b.res, d)
			if err != nil {
				return err
			}
			if d == 2 {
				s.ScaleSym(-1, s)
			}
			if b.raw == nil {
				b.raw = s
			} else {
				b.raw.AddSym(b.raw, s)
			}
		}
	}
	return nil
}

// block returns the |Z|×|Z| meat block M_pq (raw: without the
// small-sample factor).
func (b *scoreBank) block(p, q int, raw bool) *mat.Dense {
	kz := len(b.z)
	out := mat.NewDense(kz, kz, nil)
	if b.vk == ivcore.IID {
		den := float64(b.m.N - b.k)
		if raw {
			den = float64(b.m.N)
		}
		c := b.m.Cross(b.res[p], b.res[q]) / den
		for i := 0; i < kz; i++ {
			for j := 0; j < kz; j++ {
				out.Set(i, j, c*b.zz.At(i, j))
			}
		}
		return out
	}
	src := b.meat
	if raw {
		src = b.raw
	}
	for i := 0; i < kz; i++ {
		for j := 0; j < kz; j++ {
			out.Set(i, j, src.At(p*kz+i, q*kz+j))
		}
	}
	return out
}
