package demand

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"

	"priceiv/ivcore"
)

// MomentRow is one row of a moments file, as the final query of the SQL
// path returns it: a block ("total", "cluster:0", "stat", …), a key
// within the block (a cluster's key, or empty), a term ("n", "t2",
// "s0_3", …) and its value.
type MomentRow struct {
	Block, Key, Term string
	Value            float64
}

// ErrMoments marks a moments file (or database result) that does not
// fit the model.
var ErrMoments = errors.New("moments do not fit the model")

// momentSet is a moments result arranged by block, key and term.
type momentSet struct {
	columns  []string // model columns by index
	form     string
	effects  []string
	clusters []string
	blocks   map[string]map[string]map[string]float64
}

func newMomentSet(rows []MomentRow) (*momentSet, error) {
	m := &momentSet{blocks: map[string]map[string]map[string]float64{}}
	put := func(list *[]string, i float64, name string) {
		j := int(i)
		for len(*list) <= j {
			*list = append(*list, "")
		}
		(*list)[j] = name
	}
	for _, r := range rows {
		if r.Block == "model" {
			if r.Value < 0 || r.Value >= float64(len(rows)) || r.Value != math.Trunc(r.Value) {
				return nil, fmt.Errorf("%w: model row %q has position %v", ErrMoments, r.Key, r.Value)
			}
			switch r.Term {
			case "column":
				put(&m.columns, r.Value, r.Key)
			case "form":
				m.form = r.Key
			case "effect":
				put(&m.effects, r.Value, r.Key)
			case "cluster":
				put(&m.clusters, r.Value, r.Key)
			}
			continue
		}
		b := m.blocks[r.Block]
		if b == nil {
			b = map[string]map[string]float64{}
			m.blocks[r.Block] = b
		}
		k := b[r.Key]
		if k == nil {
			k = map[string]float64{}
			b[r.Key] = k
		}
		if _, dup := k[r.Term]; dup {
			return nil, fmt.Errorf("%w: block %q key %q term %q appears twice: each sum comes once (two cluster keys that read the same as text would also do this)", ErrMoments, r.Block, r.Key, r.Term)
		}
		k[r.Term] = r.Value
	}
	return m, nil
}

// get returns a term of a block's key, or an error naming what is
// missing.
func (m *momentSet) get(block, key, term string) (float64, error) {
	v, ok := m.blocks[block][key][term]
	if ok && math.IsNaN(v) {
		return 0, fmt.Errorf("%w: block %q key %q term %q is empty (NULL) or not a number", ErrMoments, block, key, term)
	}
	if !ok {
		where := fmt.Sprintf("block %q", block)
		if key != "" {
			where += fmt.Sprintf(" key %q", key)
		}
		return 0, fmt.Errorf("%w: %s has no term %q", ErrMoments, where, term)
	}
	return v, nil
}

// designFromMoments turns a moments result into a Design for the plan's
// model: it checks that the result was made for this model, reads the
// profile (rows dropped, values under a log), the blocks, the absorption
// and the fourth-order sums.
func designFromMoments(p *sqlPlan, rows []MomentRow, source string) (*Design, error) {
	m, err := newMomentSet(rows)
	if err != nil {
		return nil, err
	}
	s := p.spec
	remake := "print the SQL again with this model's options (priceiv sql …) and rerun it"
	if want := p.names(); !slices.Equal(m.columns, want) {
		return nil, fmt.Errorf("%w: %s holds sums of %s, but this model uses %s: %s", ErrMoments, source, listDiff(m.columns, want), listDiff(want, m.columns), remake)
	}
	if m.form != p.form {
		return nil, fmt.Errorf("%w: %s was made for the %q form, this model is %q: %s", ErrMoments, source, m.form, p.form, remake)
	}
	var fes, cls []string
	for _, k := range p.fes {
		fes = append(fes, k.name)
	}
	for _, k := range p.cls {
		cls = append(cls, k.name)
	}
	if !slices.Equal(m.effects, fes) {
		return nil, fmt.Errorf("%w: %s absorbed the fixed effects [%s], this model asks for [%s]: %s", ErrMoments, source, strings.Join(m.effects, ", "), strings.Join(fes, ", "), remake)
	}
	if !slices.Equal(m.clusters, cls) {
		block := "total"
		if len(cls) > 0 {
			block = "cluster:0"
		}
		return nil, fmt.Errorf("%w: %s has per-cluster blocks for [%s] but this model clusters by [%s] (block %q): %s", ErrMoments, source, strings.Join(m.clusters, ", "), strings.Join(cls, ", "), block, remake)
	}

	d := &Design{Spec: s, Form: p.form, Model: p.model, Names: p.names(), Level: s.Level, ClusterNames: s.Cluster}
	if d.Level == 0 {
		d.Level = 0.95
	}
	d.Panel = NewPanel(source, 0)
	kept, err := profileDrops(p, m, source, d)
	if err != nil {
		return nil, err
	}

	// Blocks: the whole sample, and each clustering dimension.
	k := len(p.cols)
	type blk struct {
		n     float64
		gram  []float64
		lq    float64
		lp    float64
		lo    float64
		hi    float64
		level bool
	}
	read := func(block, key string) (blk, error) {
		var b blk
		var err error
		if b.n, err = m.get(block, key, "n"); err != nil {
			return b, err
		}
		b.gram = make([]float64, k*k)
		for a := 0; a < k; a++ {
			for c := a; c < k; c++ {
				v, err := m.get(block, key, fmt.Sprintf("s%d_%d", a, c))
				if err != nil {
					return b, err
				}
				b.gram[a*k+c], b.gram[c*k+a] = v, v
			}
		}
		if p.qcol != "" {
			if b.lq, err = m.get(block, key, "lq"); err != nil {
				return b, err
			}
			if b.lp, err = m.get(block, key, "lp"); err != nil {
				return b, err
			}
			if b.lo, err = m.get(block, key, "lplo"); err != nil {
				return b, err
			}
			if b.hi, err = m.get(block, key, "lphi"); err != nil {
				return b, err
			}
		}
		return b, nil
	}
	var total blk
	type dimBlocks struct {
		keys  []string
		data  []float64
		sizes []int
	}
	var dims []dimBlocks
	if len(p.cls) == 0 {
		if _, ok := m.blocks["total"]; !ok {
			return nil, fmt.Errorf("%w: %s has no block \"total\" (the whole-sample sums): %s", ErrMoments, source, remake)
		}
		if total, err = read("total", ""); err != nil {
			return nil, err
		}
	} else {
		for dd := range p.dims() {
			name := fmt.Sprintf("cluster:%d", dd)
			bm, ok := m.blocks[name]
			if !ok || len(bm) == 0 {
				return nil, fmt.Errorf("%w: %s has no per-cluster blocks for %q (block %q): %s", ErrMoments, source, p.dimName(dd), name, remake)
			}
			var db dimBlocks
			for key := range bm {
				db.keys = append(db.keys, key)
			}
			sort.Strings(db.keys)
			for _, key := range db.keys {
				b, err := read(name, key)
				if err != nil {
					return nil, err
				}
				db.data = append(db.data, b.gram...)
				db.sizes = append(db.sizes, int(b.n))
				if dd == 0 {
					if total.gram == nil {
						total = blk{gram: make([]float64, k*k), lo: math.Inf(1), hi: math.Inf(-1)}
					}
					total.n += b.n
					for i, v := range b.gram {
						total.gram[i] += v
					}
					total.lq += b.lq
					total.lp += b.lp
					total.lo = math.Min(total.lo, b.lo)
					total.hi = math.Max(total.hi, b.hi)
				}
			}
			dims = append(dims, db)
		}
	}
	d.N = int(total.n)
	if d.N == 0 || d.N != kept && len(p.fes) == 0 {
		if d.N == 0 {
			return nil, fmt.Errorf("%w: %s: no rows are left to estimate from (%s)", ErrEmpty, source, dropSummaryOr(d.Dropped, "the query returns no rows"))
		}
		return nil, fmt.Errorf("%w: %s: the blocks hold %d rows but the profile kept %d: the result is incomplete; %s", ErrMoments, source, d.N, kept, remake)
	}
	if p.qcol != "" {
		d.MeanQuantity = total.lq / total.n
		d.MeanPrice = total.lp / total.n
		d.PriceStats = PriceStats{MeanPrice: d.MeanPrice, MeanQuantity: d.MeanQuantity, PriceMin: total.lo, PriceMax: total.hi}
	}
	mo := ivcore.FromSums(d.Names, d.N, total.gram)
	mo.Scale = make([]float64, k)
	for j := 0; j < k; j++ {
		mo.Scale[j] = total.gram[j*k+j]
	}

	if len(p.fes) > 0 {
		ab, nestedDoF, err := absorptionFromMoments(p, m, source, d, kept, mo.Scale)
		if err != nil {
			return nil, err
		}
		d.Absorption = ab
		mo.AbsorbedDoF = ab.DoF
		for dd, db := range dims {
			mo.AddClusterBlocks(ivcore.ClusterDim{Name: p.dimName(dd), G: len(db.keys), NestedDoF: nestedDoF[dd]}, db.data, db.sizes)
		}
	} else {
		for dd, db := range dims {
			mo.AddClusterBlocks(ivcore.ClusterDim{Name: p.dimName(dd), G: len(db.keys)}, db.data, db.sizes)
		}
	}

	if _, ok := m.blocks["fourth"]; ok {
		shift, scale := make([]float64, k), make([]float64, k)
		for j := 0; j < k; j++ {
			if shift[j], err = m.get("shape", "", fmt.Sprintf("m%d", j)); err != nil {
				return nil, err
			}
			if scale[j], err = m.get("shape", "", fmt.Sprintf("d%d", j)); err != nil {
				return nil, err
			}
			if !(scale[j] > 0) {
				scale[j] = 1
			}
		}
		m4 := make([]float64, ivcore.FourthLen(k))
		for _, t := range fourthTerms(k + 1) {
			i := fourthIndexOf(t)
			if m4[i], err = m.get("fourth", "", fmt.Sprintf("q%d", i)); err != nil {
				return nil, err
			}
		}
		mo.SetFourth(shift, scale, m4)
	} else if WantsHC1(s) {
		return nil, fmt.Errorf("%w: %s has no block \"fourth\", the fourth-order sums that HC1 standard errors need: print the SQL with --vcov hc1 (or estimate with --vcov iid, or --vcov cluster with --cluster)", ErrMoments, source)
	}
	d.Moments = mo
	return d, nil
}

// profileDrops reads the profile: rows dropped for a missing value (by
// column, as Build counts them) and non-positive values under a log. It
// returns the number of rows kept.
func profileDrops(p *sqlPlan, m *momentSet, source string, d *Design) (int, error) {
	// A source without rows has no profile groups at all.
	prof := m.blocks["profile"]
	kept := 0
	var keys []int
	for key := range prof {
		i, err := strconv.Atoi(key)
		if err != nil || i < 0 || i > len(p.miss) {
			return 0, fmt.Errorf("%w: %s: profile key %q is not a reason of this model", ErrMoments, source, key)
		}
		keys = append(keys, i)
	}
	sort.Ints(keys)
	for _, i := range keys {
		nv, ok := prof[strconv.Itoa(i)]["n"]
		if !ok || math.IsNaN(nv) {
			return 0, fmt.Errorf("%w: %s: profile key %d has no row count (term \"n\")", ErrMoments, source, i)
		}
		n := int(nv)
		if i == 0 {
			kept = n
			continue
		}
		d.Dropped = append(d.Dropped, Drop{Reason: "missing value", Column: p.miss[i-1].name, Rows: n})
	}
	if row := prof["0"]; row != nil {
		for li, j := range p.logs {
			bad := row[fmt.Sprintf("bad%d", li)]
			if bad > 0 {
				what := "quantity"
				if j == p.model.Endog[0] {
					what = "price"
				}
				c := p.cols[j].src
				return 0, fmt.Errorf("%w: %s: %d row(s) of %s column %q are zero or negative (smallest %g); a %s model cannot use them: leave them out in --query (WHERE %s > 0) if they are data errors or stock-outs, or choose --form linear",
					ErrNonPositiveLog, source, int(bad), what, c, row[fmt.Sprintf("low%d", li)], p.form, c)
			}
		}
	}
	if kept == 0 {
		why := "the query returns no rows"
		if len(d.Dropped) > 0 {
			why = "every row has a missing value in a used column: " + dropSummary(d.Dropped)
		}
		return 0, fmt.Errorf("%w: %s: no rows to estimate from (%s)", ErrEmpty, source, why)
	}
	return kept, nil
}

// absorptionFromMoments reads what the SQL absorption did: levels,
// redundant levels (connected components of the first two effects),
// sweeps and the last change, and the effects nested in each clustering
// dimension. It also replaces scale with the columns' Σx² before
// absorption.
func absorptionFromMoments(p *sqlPlan, m *momentSet, source string, d *Design, kept int, scale []float64) (*ivcore.Absorption, []int, error) {
	get := func(block, key, term string) (float64, error) { return m.get(block, key, term) }
	n, err := get("stat", "", "n")
	if err != nil {
		return nil, nil, err
	}
	if int(n) != d.N {
		return nil, nil, fmt.Errorf("%w: %s: the blocks hold %d rows but %d rows were absorbed: the result is incomplete or mixes two runs", ErrMoments, source, d.N, int(n))
	}
	if single := kept - int(n); single > 0 {
		d.Dropped = append(d.Dropped, Drop{Reason: "singleton in a fixed effect", Rows: single})
	}
	for j, c := range p.cols {
		if c.src == "" {
			continue
		}
		if scale[j], err = get("stat", "", fmt.Sprintf("q%d", j)); err != nil {
			return nil, nil, err
		}
	}
	ab := &ivcore.Absorption{Tol: p.tol(), Converged: true}
	sweeps, err := get("absorb", "", "sweeps")
	if err != nil {
		return nil, nil, err
	}
	ab.Iterations = int(sweeps)
	for e := range p.fes {
		one, err := get("absorb", "", fmt.Sprintf("single%d", e))
		if err != nil {
			return nil, nil, err
		}
		if one > 0 {
			return nil, nil, fmt.Errorf("%w: %s: %d level(s) of %q still hold a single row: the script's singleton rounds stopped too early; run the DELETE statements until they delete nothing", ErrMoments, source, int(one), p.fes[e].name)
		}
		l, err := get("stat", "", fmt.Sprintf("l%d", e))
		if err != nil {
			return nil, nil, err
		}
		ab.Effects = append(ab.Effects, ivcore.EffectInfo{Name: p.fes[e].name, Levels: int(l)})
	}
	if len(p.fes) == 1 {
		ab.Method = "within transformation in SQL, one GROUP BY"
	} else {
		ab.Method = "alternating projections in SQL, one GROUP BY per effect per sweep"
		worst, worstCol := 0.0, ""
		for j, c := range p.cols {
			if c.src == "" {
				continue
			}
			sd, err := get("stat", "", fmt.Sprintf("d%d", j))
			if err != nil {
				return nil, nil, err
			}
			if !(sd > 0) {
				sd = 1
			}
			sum := 0.0
			for e := range p.fes {
				v, err := get("absorb", "", fmt.Sprintf("change%d_%d", e, j))
				if err != nil {
					return nil, nil, err
				}
				sum += v / sd
			}
			if sum > worst || math.IsNaN(sum) {
				worst, worstCol = sum, c.name
			}
		}
		ab.MaxChange = worst
		if math.IsNaN(worst) {
			return nil, nil, fmt.Errorf("%w: %s: absorbing %s in SQL gave values that are not numbers in column %q: look for NaN or infinite values in it", ErrMoments, source, strings.Join(p.spec.FE, ", "), worstCol)
		}
		if worst > ab.Tol {
			fix := fmt.Sprintf("raise --max-sweeps (it was %d)", ab.Iterations)
			if p.from == "" {
				fix = fmt.Sprintf("print the SQL again with a larger --max-sweeps (the script wrote %d sweeps) and rerun it", ab.Iterations)
			}
			return nil, nil, fmt.Errorf("absorbing fixed effects %s in SQL did not converge in %d sweeps: the last sweep still moved %q by %.3g of its standard deviation, above the tolerance %.3g; %s, loosen --tolerance, or look for effects with many levels joined by few rows",
				strings.Join(p.spec.FE, ", "), ab.Iterations, worstCol, worst, ab.Tol, fix)
		}
	}
	// Effects nested in each clustering dimension.
	nested := make([][]int, len(p.dims()))
	nestedMask := make([][]bool, len(p.dims()))
	for dd := range p.dims() {
		nestedMask[dd] = make([]bool, len(p.fes))
		for e := range p.fes {
			v, err := get("nested", strconv.Itoa(dd), fmt.Sprintf("effect%d", e))
			if err != nil {
				return nil, nil, err
			}
			if v == 0 {
				nested[dd] = append(nested[dd], e)
				nestedMask[dd][e] = true
			}
		}
	}
	// Connected components of the pairs of effects the degrees of freedom
	// use (a printed script labels every pair; the others are unused).
	comps := map[[2]int]int{}
	for _, pr := range neededPairs(len(p.fes), nestedMask) {
		moved, err := get("absorb", "", "moved"+pairName(pr))
		if err != nil {
			return nil, nil, err
		}
		if moved > 0 {
			return nil, nil, fmt.Errorf("%w: %s: the labelling of connected components of %s and %s had not settled (%d labels still moving): repeat its three statements until none move", ErrMoments, source, p.fes[pr[0]].name, p.fes[pr[1]].name, int(moved))
		}
		c, err := get("absorb", "", "components"+pairName(pr))
		if err != nil {
			return nil, nil, err
		}
		comps[pr] = int(c)
	}
	// Redundant levels as feDoF counts them (ivcore/dof.go) for the
	// effects listed.
	rank := func(list []int) int {
		r := 0
		for k, e := range list {
			l := ab.Effects[e].Levels
			switch {
			case k == 1:
				l -= comps[[2]int{list[0], e}]
			case k >= 2 && l > 0:
				l--
			}
			r += l
		}
		return r
	}
	if len(p.fes) >= 2 {
		ab.Effects[1].Redundant = comps[[2]int{0, 1}]
		for e := 2; e < len(ab.Effects); e++ {
			if ab.Effects[e].Levels > 0 {
				ab.Effects[e].Redundant = 1
			}
		}
	}
	for _, e := range ab.Effects {
		ab.DoF += e.Levels - e.Redundant
	}
	// The rank of the nested effects' dummies alone, as Build counts it.
	nestedDoF := make([]int, len(p.dims()))
	for dd := range p.dims() {
		nestedDoF[dd] = rank(nested[dd])
	}
	return ab, nestedDoF, nil
}

// WantsHC1 reports whether the spec's covariance is HC1 (asked for, or
// the default without a cluster column), which the SQL path serves with
// one more pass of fourth-order sums.
func WantsHC1(s *Spec) bool {
	v := strings.ToLower(strings.TrimSpace(s.Vcov))
	if v == "" {
		return len(s.Cluster) == 0
	}
	return v == "hc1" || v == "robust"
}

func dropSummaryOr(d []Drop, empty string) string {
	if len(d) == 0 {
		return empty
	}
	return dropSummary(d)
}

// listDiff shows a list of column names, or, when it is long, its length
// and its first entry that differs from other.
func listDiff(list, other []string) string {
	if len(list) <= 20 {
		return "the columns [" + strings.Join(list, ", ") + "]"
	}
	for i, x := range list {
		if i >= len(other) || other[i] != x {
			return fmt.Sprintf("%d columns (position %d: %q)", len(list), i, x)
		}
	}
	return fmt.Sprintf("%d columns", len(list))
}
