package demand

import (
	"fmt"
	"math"
	"strings"

	"priceiv/ivcore"
)

// Role is the part a column plays in a model.
type Role int

const (
	RoleOutcome Role = iota
	RoleEndogenous
	RoleExogenous
	RoleInstrument
)

// Design is a model made concrete on a panel: the transformed columns
// with fixed effects absorbed, their moment blocks, and the bookkeeping of
// what was dropped and absorbed.
type Design struct {
	Spec *Spec
	// Form is the functional form in demand form ("" in general form).
	Form string
	// Model gives the column roles by index into Names.
	Model ivcore.Model
	// Names are the column names in moment order: outcome, endogenous,
	// exogenous (intercept first when there is no fixed effect),
	// instruments.
	Names []string
	// Raw holds the model columns after transformation (logs) and before
	// absorption, for the rows used.
	Raw [][]float64
	// Cols holds the same columns with fixed effects absorbed.
	Cols [][]float64
	// Moments are the cross-product blocks of Cols.
	Moments *ivcore.Moments
	// Absorption reports the fixed-effect step (nil without effects).
	Absorption *ivcore.Absorption
	// Dropped lists rows left out and why.
	Dropped []Drop
	// Rows are the panel row indices used, in order.
	Rows []int
	// N is the number of rows used.
	N int
	// Level is the confidence level.
	Level float64
	// Level means of quantity and price over the rows used (demand form),
	// where non-log forms evaluate the elasticity.
	MeanQuantity, MeanPrice float64
	// PriceStats are the level price and quantity over the rows used
	// (demand form).
	PriceStats PriceStats
	// ClusterNames are the cluster columns.
	ClusterNames []string
	// Panel is the prepared panel (after derive and filter).
	Panel *Panel
}

// Drop counts rows left out for one reason.
type Drop struct {
	Reason string `json:"reason"`
	Column string `json:"column,omitempty"`
	Rows   int    `json:"rows"`
}

// Prepare applies the spec's derived columns, in order, and then its row
// filter. It returns a new panel; p is not modified.
func Prepare(p *Panel, s *Spec) (*Panel, []Drop, error) {
	keys := PanelKeys{Unit: s.Unit, Time: s.Time}
	q := NewPanel(p.Source, p.N)
	q.Lines = p.Lines
	for _, c := range p.Columns {
		if x, ok := p.Num[c]; ok {
			q.AddNum(c, x)
		} else {
			q.AddText(c, p.Text[c])
		}
	}
	for _, d := range s.Derive {
		name, e, err := ParseDerive(d)
		if err != nil {
			return nil, nil, fmt.Errorf("--derive %q: %w", d, err)
		}
		if err := Derive(q, name, e, keys); err != nil {
			return nil, nil, fmt.Errorf("--derive %q: %w", d, err)
		}
	}
	var drops []Drop
	if strings.TrimSpace(s.Where) != "" {
		e, err := ParseExpr(s.Where)
		if err != nil {
			return nil, nil, fmt.Errorf("--where: %w", err)
		}
		f, n, err := Filter(q, e, keys)
		if err != nil {
			return nil, nil, fmt.Errorf("--where %q: %w", s.Where, err)
		}
		q = f
		if n > 0 {
			drops = append(drops, Drop{Reason: "filter", Column: s.Where, Rows: n})
		}
	}
	if q.N == 0 {
		return nil, nil, fmt.Errorf("%w: the filter %q keeps none of the %d rows of %s", ErrEmpty, s.Where, p.N, p.Source)
	}
	return q, drops, nil
}

// Build turns a prepared panel and a spec into a Design: it picks and
// transforms the model columns, drops rows with missing values (counting
// them by column), drops fixed-effect singletons, absorbs the fixed
// effects and accumulates the moment blocks (per cluster when clustering).
func Build(p *Panel, s *Spec, workers int) (*Design, error) {
	if err := s.Check(); err != nil {
		return nil, err
	}
	d := &Design{Spec: s, Panel: p, Level: s.Level, ClusterNames: s.Cluster}
	if d.Level == 0 {
		d.Level = 0.95
	}
	type col struct {
		name string
		role Role
		x    []float64
	}
	var cols []col
	get := func(name string, role Role) error {
		x, err := p.Float(name)
		if err != nil {
			return err
		}
		cols = append(cols, col{name, role, x})
		return nil
	}
	if s.DemandForm() {
		d.Form = s.Form
		if d.Form == "" {
			d.Form = "log-log"
		}
		if err := get(s.Quantity, RoleOutcome); err != nil {
			return nil, err
		}
		if err := get(s.Price, RoleEndogenous); err != nil {
			return nil, err
		}
		for _, c := range s.Controls {
			if err := get(c, RoleExogenous); err != nil {
				return nil, err
			}
		}
		for _, c := range s.Shifters {
			if err := get(c, RoleInstrument); err != nil {
				return nil, err
			}
		}
	} else {
		if err := get(s.Outcome, RoleOutcome); err != nil {
			return nil, err
		}
		for _, c := range s.Endogenous {
			if err := get(c, RoleEndogenous); err != nil {
				return nil, err
			}
		}
		for _, c := range s.Exogenous {
			if err := get(c, RoleExogenous); err != nil {
				return nil, err
			}
		}
		for _, c := range s.Instruments {
			if err := get(c, RoleInstrument); err != nil {
				return nil, err
			}
		}
	}
	seen := map[string]Role{}
	for _, c := range cols {
		if r, ok := seen[c.name]; ok {
			return nil, fmt.Errorf("%w: column %q is used twice in the model (as %s and as %s)", ErrSpec, c.name, roleName(r), roleName(c.role))
		}
		seen[c.name] = c.role
	}

	// Id columns: fixed effects and clusters.
	type idc struct {
		name   string
		codes  []int32
		levels []string
	}
	var fes, cls []idc
	for _, f := range s.FE {
		for _, part := range strings.Split(f, "*") {
			if !p.Has(strings.TrimSpace(part)) {
				return nil, p.unknown(strings.TrimSpace(part))
			}
		}
		codes, levels, err := p.IDs(f)
		if err != nil {
			return nil, err
		}
		fes = append(fes, idc{f, codes, levels})
	}
	for _, c := range s.Cluster {
		codes, levels, err := p.IDs(c)
		if err != nil {
			return nil, err
		}
		cls = append(cls, idc{c, codes, levels})
	}

	// Rows with a missing value in any used column are dropped; each
	// row is counted once, under the first column (in model order) that
	// is missing.
	keep := make([]bool, p.N)
	missing := make([]int, len(cols)+len(fes)+len(cls))
	ids := append(append([]idc(nil), fes...), cls...)
	for i := range keep {
		keep[i] = true
		for j, c := range cols {
			if math.IsNaN(c.x[i]) {
				keep[i] = false
				missing[j]++
				break
			}
		}
		if !keep[i] {
			continue
		}
		for j, f := range ids {
			if f.codes[i] < 0 {
				keep[i] = false
				missing[len(cols)+j]++
				break
			}
		}
	}
	for j, n := range missing {
		if n == 0 {
			continue
		}
		name := ""
		if j < len(cols) {
			name = cols[j].name
		} else if j < len(cols)+len(fes) {
			name = fes[j-len(cols)].name
		} else {
			name = cls[j-len(cols)-len(fes)].name
		}
		d.Dropped = append(d.Dropped, Drop{Reason: "missing value", Column: name, Rows: n})
	}

	// Transformations of the demand form (after dropping missing rows,
	// so that only used rows are checked).
	if s.DemandForm() {
		logY := d.Form == "log-log" || d.Form == "semi-log"
		logP := d.Form == "log-log"
		if logY {
			x, err := logColumn(p, cols[0].name, cols[0].x, keep, "quantity")
			if err != nil {
				return nil, err
			}
			cols[0].x = x
		}
		if logP {
			x, err := logColumn(p, cols[1].name, cols[1].x, keep, "price")
			if err != nil {
				return nil, err
			}
			cols[1].x = x
		}
	}

	// Fixed-effect singletons.
	var effects []ivcore.Effect
	for _, f := range fes {
		codes := make([]int32, p.N)
		for i, c := range f.codes {
			codes[i] = max(c, 0)
		}
		effects = append(effects, ivcore.Effect{Name: f.name, Codes: codes, Levels: len(f.levels)})
	}
	if len(effects) > 0 {
		if n := ivcore.DropSingletons(effects, keep); n > 0 {
			d.Dropped = append(d.Dropped, Drop{Reason: "singleton in a fixed effect", Rows: n})
		}
	}
	for i, k := range keep {
		if k {
			d.Rows = append(d.Rows, i)
		}
	}
	d.N = len(d.Rows)
	if d.N == 0 {
		return nil, fmt.Errorf("%w: every row of %s has a missing value in a used column (%s)", ErrEmpty, p.Source, dropSummary(d.Dropped))
	}

	// Gather the used rows.
	gather := func(x []float64) []float64 {
		y := make([]float64, d.N)
		for j, i := range d.Rows {
			y[j] = x[i]
		}
		return y
	}
	for _, c := range cols {
		d.Names = append(d.Names, c.name)
		d.Raw = append(d.Raw, gather(c.x))
	}
	if s.DemandForm() {
		q, _ := p.Float(s.Quantity)
		pr, _ := p.Float(s.Price)
		d.MeanQuantity = mean(gather(q))
		gp := gather(pr)
		d.MeanPrice = mean(gp)
		d.PriceStats = PriceStats{MeanPrice: d.MeanPrice, MeanQuantity: d.MeanQuantity, PriceMin: minOf(gp), PriceMax: maxOf(gp)}
	}
	// Order columns: outcome, endogenous, intercept (without fixed
	// effects), exogenous, instruments.
	var names []string
	var raw [][]float64
	var md ivcore.Model
	for _, role := range []Role{RoleOutcome, RoleEndogenous, RoleExogenous, RoleInstrument} {
		if role == RoleExogenous && len(fes) == 0 {
			md.Exog = append(md.Exog, len(names))
			names = append(names, "intercept")
			raw = append(raw, ones(d.N))
		}
		for o, c := range cols {
			if c.role != role {
				continue
			}
			idx := len(names)
			names = append(names, c.name)
			raw = append(raw, d.Raw[o])
			switch role {
			case RoleOutcome:
				md.Y = idx
			case RoleEndogenous:
				md.Endog = append(md.Endog, idx)
			case RoleExogenous:
				md.Exog = append(md.Exog, idx)
			case RoleInstrument:
				md.Instr = append(md.Instr, idx)
			}
		}
	}
	d.Names, d.Raw, d.Model = names, raw, md

	scale := make([]float64, len(raw))
	for j, x := range raw {
		for _, v := range x {
			scale[j] += v * v
		}
	}

	// Absorb.
	d.Cols = raw
	if len(effects) > 0 {
		ce, _ := ivcore.Compact(effects, keep)
		opts := ivcore.AbsorbOptions{Tol: s.Tolerance, MaxIter: s.MaxSweeps, Workers: workers}
		dst := make([][]float64, len(raw))
		ab, err := ivcore.Absorb(dst, raw, ce, opts)
		if err != nil {
			return nil, fmt.Errorf("absorbing fixed effects %s: %w", strings.Join(s.FE, ", "), err)
		}
		d.Absorption = ab
		d.Cols = dst
		effects = ce
	}

	// Clusters.
	var dims []ivcore.ClusterDim
	var cc [][]int32
	for _, c := range cls {
		codes, g := compactCodes(c.codes, d.Rows)
		cc = append(cc, codes)
		dims = append(dims, ivcore.ClusterDim{Name: c.name, Codes: codes, G: g})
	}
	if len(dims) == 2 {
		codes, g := pairCodes(cc[0], cc[1])
		dims = append(dims, ivcore.ClusterDim{Name: cls[0].name + "×" + cls[1].name, Codes: codes, G: g})
	}
	for j := range dims {
		for e, eff := range effects {
			if ivcore.NestedIn(eff, dims[j].Codes) {
				info := d.Absorption.Effects[e]
				dims[j].NestedDoF += info.Levels - info.Redundant
			}
		}
	}
	m := ivcore.Accumulate(d.Cols, names, dims, workers)
	m.Scale = scale
	if d.Absorption != nil {
		m.AbsorbedDoF = d.Absorption.DoF
	}
	d.Moments = m
	return d, nil
}

func roleName(r Role) string {
	return [...]string{"outcome", "endogenous regressor", "control", "instrument"}[r]
}

// logColumn returns log(x) for the kept rows, or an error counting the
// non-positive values with the first line.
func logColumn(p *Panel, name string, x []float64, keep []bool, what string) ([]float64, error) {
	y := make([]float64, len(x))
	bad, first := 0, -1
	for i, v := range x {
		if !keep[i] {
			y[i] = math.NaN()
			continue
		}
		if v <= 0 {
			bad++
			if first < 0 {
				first = i
			}
			continue
		}
		y[i] = math.Log(v)
	}
	if bad > 0 {
		return nil, fmt.Errorf("%w: %s: %d row(s) of %s column %q are zero or negative, first on line %d (value %g); a log-log model cannot use them: drop them with --where '%s > 0' if they are data errors or stock-outs, or choose --form linear",
			ErrNonPositiveLog, p.Source, bad, what, name, p.Line(first), x[first], name)
	}
	return y, nil
}

func compactCodes(codes []int32, rows []int) ([]int32, int) {
	m := map[int32]int32{}
	out := make([]int32, len(rows))
	for j, i := range rows {
		c := codes[i]
		v, ok := m[c]
		if !ok {
			v = int32(len(m))
			m[c] = v
		}
		out[j] = v
	}
	return out, len(m)
}

func pairCodes(a, b []int32) ([]int32, int) {
	type pair struct{ a, b int32 }
	m := map[pair]int32{}
	out := make([]int32, len(a))
	for i := range a {
		k := pair{a[i], b[i]}
		v, ok := m[k]
		if !ok {
			v = int32(len(m))
			m[k] = v
		}
		out[i] = v
	}
	return out, len(m)
}

func ones(n int) []float64 {
	x := make([]float64, n)
	for i := range x {
		x[i] = 1
	}
	return x
}

func minOf(x []float64) float64 {
	m := math.Inf(1)
	for _, v := range x {
		m = math.Min(m, v)
	}
	return m
}

func maxOf(x []float64) float64 {
	m := math.Inf(-1)
	for _, v := range x {
		m = math.Max(m, v)
	}
	return m
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

func dropSummary(d []Drop) string {
	var parts []string
	for _, x := range d {
		parts = append(parts, fmt.Sprintf("%s %s: %d", x.Reason, x.Column, x.Rows))
	}
	return strings.Join(parts, "; ")
}
