package ivcore

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"
)

// VcovKind selects the covariance estimator.
type VcovKind int

const (
	// IID assumes homoskedastic, independent errors: σ² H⁻¹ with
	// σ² = SSR/(n-k).
	IID VcovKind = iota
	// HC1 is White's heteroskedasticity-robust sandwich with the factor
	// n/(n-k) (MacKinnon & White 1985).
	HC1
	// Cluster is the cluster-robust sandwich, one-way or two-way, with
	// the factor G/(G-1)·(n-1)/(n-k) for each way.
	Cluster
)

var vcovNames = []string{"iid", "hc1", "cluster"}

func (v VcovKind) String() string {
	if int(v) < len(vcovNames) {
		return vcovNames[v]
	}
	return fmt.Sprintf("VcovKind(%d)", int(v))
}

// ParseVcov reads "iid", "hc1" or "cluster".
func ParseVcov(s string) (VcovKind, error) {
	for i, n := range vcovNames {
		if strings.EqualFold(s, n) {
			return VcovKind(i), nil
		}
	}
	return 0, fmt.Errorf("unknown covariance %q: choose one of %s", s, strings.Join(vcovNames, ", "))
}

// VcovInfo describes the covariance estimate that was used.
type VcovInfo struct {
	Kind VcovKind
	// Label says in words what was computed.
	Label string
	// SmallSample states the small-sample factor(s) applied.
	SmallSample string
	// DF is the degrees of freedom for t and F reference distributions:
	// n-k for iid and HC1, G-1 (smallest G) for cluster-robust.
	DF int
	// Clusters is the number of clusters in each way (cluster only).
	Clusters []int
	// Clipped is true when a two-way covariance had negative eigenvalues
	// that were set to zero (Cameron, Gelbach & Miller 2011, section 2.3).
	Clipped bool
}

// Meat returns the middle of a sandwich covariance for the score columns
// w and residual combinations r, with small-sample factors applied:
//
//	HC1:      n/(n-k) Σ_i s_i s_iᵀ
//	cluster:  G/(G-1)·(n-1)/(n-k_g) Σ_g s_g s_gᵀ
//	two-way:  the sum of the two one-way terms minus the intersection term
//	          (Cameron, Gelbach & Miller 2011, JBES 29(2), 238-249)
//
// where k counts the parameters (regressors plus absorbed levels) and k_g
// leaves out absorbed levels of effects nested within the cluster.
// The scores s are those of ScoreCov. For IID, Meat returns nil.
func (m *Moments) Meat(w []int, r [][]float64, vk VcovKind, k int) (*mat.SymDense, VcovInfo, error) {
	n := m.N
	info := VcovInfo{Kind: vk, DF: n - k}
	switch vk {
	case IID:
		info.Label = "homoskedastic (iid) errors"
		info.SmallSample = fmt.Sprintf("σ² = SSR/(n-k), n = %d, k = %d", n, k)
		return nil, info, nil
	case HC1:
		s, err := m.ScoreCov(w, r, -1)
		if err != nil {
			return nil, info, err
		}
		c := float64(n) / float64(n-k)
		s.ScaleSym(c, s)
		info.Label = "heteroskedasticity-robust (HC1)"
		info.SmallSample = fmt.Sprintf("n/(n-k) = %d/%d", n, n-k)
		return s, info, nil
	case Cluster:
		if len(m.Clusters) == 0 {
			return nil, info, fmt.Errorf("cluster-robust covariance asked for, but no cluster column was given: set --cluster")
		}
		ways := len(m.Clusters)
		if ways != 1 && ways != 3 {
			panic("ivcore: clusters must be one dimension, or two and their intersection")
		}
		var total *mat.SymDense
		var notes []string
		minG := math.MaxInt
		for d, cb := range m.Clusters {
			G := cb.Dim.G
			if G < 2 {
				return nil, info, fmt.Errorf("cluster-robust covariance needs at least 2 clusters; %q has %d", cb.Dim.Name, G)
			}
			s, err := m.ScoreCov(w, r, d)
			if err != nil {
				return nil, info, err
			}
			kg := k - cb.Dim.NestedDoF
			c := float64(G) / float64(G-1) * float64(n-1) / float64(n-kg)
			sign := 1.0
			if d == 2 {
				sign = -1
			} else {
				info.Clusters = append(info.Clusters, G)
				minG = min(minG, G)
			}
			s.ScaleSym(sign*c, s)
			if total == nil {
				total = s
			} else {
				total.AddSym(total, s)
			}
			notes = append(notes, fmt.Sprintf("%s: G/(G-1)·(n-1)/(n-k) with G = %d, k = %d", cb.Dim.Name, G, kg))
		}
		info.DF = minG - 1
		if ways == 1 {
			info.Label = fmt.Sprintf("cluster-robust by %s (%d clusters)", m.Clusters[0].Dim.Name, m.Clusters[0].Dim.G)
		} else {
			info.Label = fmt.Sprintf("two-way cluster-robust by %s and %s (%d and %d clusters)",
				m.Clusters[0].Dim.Name, m.Clusters[1].Dim.Name, m.Clusters[0].Dim.G, m.Clusters[1].Dim.G)
		}
		info.SmallSample = strings.Join(notes, "; ")
		return total, info, nil
	}
	panic("ivcore: unknown covariance kind")
}

// covariance computes the coefficient covariance of a fit.
func (f *Fit) covariance(vk VcovKind) (*mat.SymDense, VcovInfo, error) {
	m, md := f.m, f.Model
	xi, zi := md.X(), md.Z()
	// Score columns: the union of X and Z.
	u := append([]int(nil), xi...)
	pos := map[int]int{}
	for i, c := range xi {
		pos[c] = i
	}
	for _, c := range zi {
		if _, ok := pos[c]; !ok {
			pos[c] = len(u)
			u = append(u, c)
		}
	}
	meat, info, err := m.Meat(u, [][]float64{f.resid}, vk, f.K)
	if err != nil {
		return nil, info, err
	}
	if meat == nil {
		cov := mat.NewSymDense(len(xi), nil)
		cov.ScaleSym(f.Sigma2, f.bread)
		return cov, info, nil
	}
	// Transform scores on U to scores of the k-class normal equations:
	// ŝ = (1-k) Xᵀe + k Πᵀ Zᵀe.
	t := mat.NewDense(len(xi), len(u), nil)
	for j := range xi {
		t.Set(j, j, (1-f.Kappa)*1)
	}
	if f.pi != nil && f.Kappa != 0 {
		for a, c := range zi {
			for j := range xi {
				t.Set(j, pos[c], t.At(j, pos[c])+f.Kappa*f.pi.At(a, j))
			}
		}
	}
	var tm, mid, tmp, cov mat.Dense
	tm.Mul(t, meat)
	mid.Mul(&tm, t.T())
	tmp.Mul(f.bread, &mid)
	cov.Mul(&tmp, f.bread)
	out := symmetrize(&cov)
	if len(m.Clusters) == 3 && vk == Cluster {
		out, info.Clipped = clipNegative(out)
	}
	return out, info, nil
}

// clipNegative sets negative eigenvalues of s to zero.
func clipNegative(s *mat.SymDense) (*mat.SymDense, bool) {
	var es mat.EigenSym
	if !es.Factorize(s, true) {
		return s, false
	}
	vals := es.Values(nil)
	neg := false
	for i, v := range vals {
		if v < 0 {
			vals[i] = 0
			neg = true
		}
	}
	if !neg {
		return s, false
	}
	var v mat.Dense
	es.VectorsTo(&v)
	n := len(vals)
	out := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			x := 0.0
			for l := 0; l < n; l++ {
				x += v.At(i, l) * vals[l] * v.At(j, l)
			}
			out.SetSym(i, j, x)
		}
	}
	return out, true
}
