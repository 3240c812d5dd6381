package demand

import (
	"fmt"
	"math"
	"runtime"
	"runtime/debug"
	"slices"
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
	// absorption, for the rows used. In a design from BuildLean with
	// fixed effects, the columns the design computed itself (logs, and the
	// used rows of a column when some rows are left out) are absorbed in
	// place and their entries are nil: RawRows gives their values.
	Raw [][]float64
	// Cols holds the same columns with fixed effects absorbed.
	Cols [][]float64
	// Moments are the cross-product blocks of Cols.
	Moments *ivcore.Moments
	// Absorption reports the fixed-effect step (nil without effects).
	Absorption *ivcore.Absorption
	// Dropped lists rows left out and why.
	Dropped []Drop
	// Rows are the panel row indices used, in order. In a design from
	// BuildLean that uses every row of the panel, Rows is nil (row i of the
	// design is row i of the panel).
	Rows []int32
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
	// Panel is the prepared panel (after derive and filter). In a design
	// from BuildLean it holds only the model's columns and the cluster
	// columns.
	Panel *Panel

	// rawSrc and rawLog give, for each column (as in Names), the panel
	// column behind it (nil for the intercept) and whether the column is
	// its log, for RawRows.
	rawSrc [][]float64
	rawLog []bool
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
		return nil, nil, fmt.Errorf("%w: %s has no data rows (only a header line); check that the right file was given", ErrEmpty, p.Source)
	}
	return q, drops, nil
}

// Build turns a prepared panel and a spec into a Design: it picks and
// transforms the model columns, drops rows with missing values (counting
// them by column), drops fixed-effect singletons, absorbs the fixed
// effects and accumulates the moment blocks (per cluster when clustering).
func Build(p *Panel, s *Spec, workers int) (*Design, error) {
	return build(p, s, workers, false)
}

// BuildLean is Build for a design whose raw columns are read at most a few
// times, for the smallest peak memory: it holds one copy of each model
// column instead of two. The columns the design computes itself (logs,
// and the used rows of a column when some rows are left out) are absorbed
// in place, so their entries of Raw are nil and RawRows recomputes their
// values from the panel (the same values, bit for bit); Rows is nil when
// every row is used; Panel holds only the model's columns and the cluster
// columns of p, so that once the caller lets go of p the memory of its
// other columns is free for the absorbed ones. With fixed effects,
// BuildLean returns the memory it no longer needs to the operating system
// (debug.FreeOSMemory) just before and just after absorbing them. The
// estimates, moments and absorbed columns are those of Build.
func BuildLean(p *Panel, s *Spec, workers int) (*Design, error) {
	return build(p, s, workers, true)
}

// RawRows returns the raw values (those of Raw) of column j for the used
// rows lo, lo+1, …, lo+len(dst)-1. When Raw[j] is held it returns
// Raw[j][lo:lo+len(dst)] and leaves dst alone; otherwise it computes the
// values into dst and returns dst. RawRows panics if the rows are out of
// range.
func (d *Design) RawRows(dst []float64, j, lo int) []float64 {
	hi := lo + len(dst)
	if lo < 0 || hi > d.N {
		panic(fmt.Sprintf("demand: rows [%d,%d) outside the %d rows of the design", lo, hi, d.N))
	}
	if d.Raw[j] != nil {
		return d.Raw[j][lo:hi]
	}
	x := d.rawSrc[j]
	switch {
	case d.Rows == nil && d.rawLog[j]:
		for k, v := range x[lo:hi] {
			dst[k] = math.Log(v)
		}
	case d.Rows == nil:
		copy(dst, x[lo:hi])
	case d.rawLog[j]:
		for k, i := range d.Rows[lo:hi] {
			dst[k] = math.Log(x[i])
		}
	default:
		for k, i := range d.Rows[lo:hi] {
			dst[k] = x[i]
		}
	}
	return dst
}

// build is Build, or BuildLean when lean is true.
func build(p *Panel, s *Spec, workers int, lean bool) (*Design, error) {
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
		log  bool // taken as log(x)
	}
	var cols []col
	get := func(name string, role Role) error {
		x, err := p.Float(name)
		if err != nil {
			return err
		}
		cols = append(cols, col{name: name, role: role, x: x})
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
		levels int
	}
	var fes, cls []idc
	for _, f := range s.FE {
		for _, part := range strings.Split(f, "*") {
			if !p.Has(strings.TrimSpace(part)) {
				return nil, p.unknown(strings.TrimSpace(part))
			}
		}
		codes, levels, err := modelIDs(p, f)
		if err != nil {
			return nil, err
		}
		fes = append(fes, idc{f, codes, levels})
	}
	for _, c := range s.Cluster {
		codes, levels, err := modelIDs(p, c)
		if err != nil {
			return nil, err
		}
		cls = append(cls, idc{c, codes, levels})
	}

	// From here on a lean design reads only the model's columns and the
	// cluster columns: it lets go of the others (the fixed-effect columns
	// are coded now), so that their memory can hold the absorbed columns.
	if lean {
		var names []string
		for _, c := range cols {
			names = append(names, c.name)
		}
		p = panelOf(p, append(names, s.Cluster...))
		d.Panel = p
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
		// Checked here, on the rows kept so far; the logs are taken
		// when the used rows are gathered.
		if logY {
			if err := checkLogColumn(p, cols[0].name, cols[0].x, keep, "quantity"); err != nil {
				return nil, err
			}
			cols[0].log = true
		}
		if logP {
			if err := checkLogColumn(p, cols[1].name, cols[1].x, keep, "price"); err != nil {
				return nil, err
			}
			cols[1].log = true
		}
	}

	// Fixed-effect singletons.
	var effects []ivcore.Effect
	for _, f := range fes {
		// Rows with a missing code are already dropped; they only need
		// a code within range, so the codes are copied only when some
		// are missing.
		codes := f.codes
		if slices.ContainsFunc(codes, func(c int32) bool { return c < 0 }) {
			codes = make([]int32, p.N)
			for i, c := range f.codes {
				codes[i] = max(c, 0)
			}
		}
		effects = append(effects, ivcore.Effect{Name: f.name, Codes: codes, Levels: f.levels})
	}
	if len(effects) > 0 {
		if n := ivcore.DropSingletons(effects, keep); n > 0 {
			d.Dropped = append(d.Dropped, Drop{Reason: "singleton in a fixed effect", Rows: n})
		}
	}
	used := 0
	for _, k := range keep {
		if k {
			used++
		}
	}
	// rows lists the used rows; nil stands for all of them, in order.
	var rows []int32
	if used < p.N || !lean {
		rows = makeInt32s(used)
		j := 0
		for i, k := range keep {
			if k {
				rows[j] = int32(i)
				j++
			}
		}
	}
	d.Rows, d.N = rows, used
	if d.N == 0 {
		return nil, fmt.Errorf("%w: every row of %s has a missing value in a used column (%s)", ErrEmpty, p.Source, dropSummary(d.Dropped))
	}

	// Gather the used rows.
	// When every row is used, a column taken as it is is shared with
	// the panel rather than copied (neither is ever modified); the other
	// columns are the design's own, filled in parallel when large.
	nw := workers
	if nw <= 0 {
		nw = runtime.NumCPU()
	}
	gather := func(x []float64, log bool) []float64 {
		if !log && d.N == p.N {
			return x
		}
		y := makeFloats(d.N)
		forChunks(d.N, make([]badRows, nw), func(_, lo, hi int) {
			switch {
			case rows == nil:
				for i, v := range x[lo:hi] {
					y[lo+i] = math.Log(v)
				}
			case log:
				for j, i := range rows[lo:hi] {
					y[lo+j] = math.Log(x[i])
				}
			default:
				for j, i := range rows[lo:hi] {
					y[lo+j] = x[i]
				}
			}
		})
		return y
	}
	owned := make([]bool, len(cols))
	for o, c := range cols {
		d.Names = append(d.Names, c.name)
		d.Raw = append(d.Raw, gather(c.x, c.log))
		owned[o] = c.log || d.N < p.N
	}
	if s.DemandForm() {
		// The same sums, minimum and maximum as mean, minOf and maxOf
		// over the gathered columns, in the same order, without them.
		q, _ := p.Float(s.Quantity)
		pr, _ := p.Float(s.Price)
		sq, sp := 0.0, 0.0
		lo, hi := math.Inf(1), math.Inf(-1)
		add := func(i int) {
			sq += q[i]
			sp += pr[i]
			lo, hi = math.Min(lo, pr[i]), math.Max(hi, pr[i])
		}
		if rows == nil {
			for i := range d.N {
				add(i)
			}
		} else {
			for _, i := range rows {
				add(int(i))
			}
		}
		d.MeanQuantity = sq / float64(d.N)
		d.MeanPrice = sp / float64(d.N)
		d.PriceStats = PriceStats{MeanPrice: d.MeanPrice, MeanQuantity: d.MeanQuantity, PriceMin: lo, PriceMax: hi}
	}
	// Order columns: outcome, endogenous, intercept (without fixed
	// effects), exogenous, instruments.
	var names []string
	var raw [][]float64
	var inPlace []bool // absorbed in place (lean)
	var md ivcore.Model
	for _, role := range []Role{RoleOutcome, RoleEndogenous, RoleExogenous, RoleInstrument} {
		if role == RoleExogenous && len(fes) == 0 {
			md.Exog = append(md.Exog, len(names))
			names = append(names, "intercept")
			raw = append(raw, ones(d.N))
			d.rawSrc, d.rawLog, inPlace = append(d.rawSrc, nil), append(d.rawLog, false), append(inPlace, false)
		}
		for o, c := range cols {
			if c.role != role {
				continue
			}
			idx := len(names)
			names = append(names, c.name)
			raw = append(raw, d.Raw[o])
			d.rawSrc, d.rawLog = append(d.rawSrc, c.x), append(d.rawLog, c.log)
			inPlace = append(inPlace, lean && owned[o])
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

	// Absorb: into new columns, or, in a lean design, in place for the
	// columns the design owns.
	d.Cols = raw
	if len(effects) > 0 {
		ce := compactEffects(effects, rows, d.N)
		opts := ivcore.AbsorbOptions{Tol: s.Tolerance, MaxIter: s.MaxSweeps, Workers: workers}
		dst := make([][]float64, len(raw))
		for j := range dst {
			if inPlace[j] {
				dst[j] = raw[j]
			} else {
				dst[j] = makeFloats(d.N)
			}
		}
		if lean {
			// The memory let go so far (the panel's other columns, the
			// row mask) goes back to the system before the absorbed
			// columns are written, and the absorption's own scratch after.
			debug.FreeOSMemory()
		}
		ab, err := ivcore.Absorb(dst, raw, ce, opts)
		if err != nil {
			return nil, fmt.Errorf("absorbing fixed effects %s: %w", strings.Join(s.FE, ", "), err)
		}
		for j := range raw {
			if inPlace[j] {
				raw[j] = nil
			}
		}
		if lean {
			debug.FreeOSMemory()
		}
		d.Absorption = ab
		d.Cols = dst
		effects = ce
	}

	// Clusters.
	var dims []ivcore.ClusterDim
	var cc [][]int32
	for _, c := range cls {
		codes, g := compactCodes(c.codes, c.levels, rows, d.N)
		cc = append(cc, codes)
		dims = append(dims, ivcore.ClusterDim{Name: c.name, Codes: codes, G: g})
	}
	if len(dims) == 2 {
		codes, g := pairCodes(cc[0], cc[1])
		dims = append(dims, ivcore.ClusterDim{Name: cls[0].name + "×" + cls[1].name, Codes: codes, G: g})
	}
	// Absorbed parameters of effects nested within a clustering dimension
	// leave k of that dimension's small-sample factor. They are counted
	// as the rank of the nested effects' dummies alone, so the count does
	// not depend on the order of --fe (redundant levels are charged to the
	// second of two effects, which may be the nested one).
	for j := range dims {
		var nested []ivcore.Effect
		for _, eff := range effects {
			if ivcore.NestedIn(eff, dims[j].Codes) {
				nested = append(nested, eff)
			}
		}
		if len(nested) > 0 {
			ab, err := ivcore.Absorb(nil, nil, nested, ivcore.AbsorbOptions{})
			if err != nil {
				return nil, err
			}
			dims[j].NestedDoF = ab.DoF
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

// panelOf returns a panel with p's source, rows and lines that holds the
// columns of p named in names (each part of an interaction "a*b"), in p's
// order, shared with p.
func panelOf(p *Panel, names []string) *Panel {
	want := map[string]bool{}
	for _, name := range names {
		for _, part := range strings.Split(name, "*") {
			want[strings.TrimSpace(part)] = true
		}
	}
	q := NewPanel(p.Source, p.N)
	q.Lines = p.Lines
	for _, c := range p.Columns {
		if !want[c] {
			continue
		}
		if x, ok := p.Num[c]; ok {
			q.AddNum(c, x)
		} else if t, ok := p.Text[c]; ok {
			q.AddText(c, t)
		}
	}
	return q
}

func roleName(r Role) string {
	return [...]string{"outcome", "endogenous regressor", "control", "instrument"}[r]
}

// checkLogColumn returns logColumn's error for x without computing the
// logs.
func checkLogColumn(p *Panel, name string, x []float64, keep []bool, what string) error {
	bad, first := 0, -1
	for i, v := range x {
		if keep[i] && v <= 0 {
			bad++
			if first < 0 {
				first = i
			}
		}
	}
	if bad > 0 {
		return logError(p, name, x, bad, first, what)
	}
	return nil
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
		return nil, logError(p, name, x, bad, first, what)
	}
	return y, nil
}

// logError says that bad values of column name, the first at row first,
// are not positive.
func logError(p *Panel, name string, x []float64, bad, first int, what string) error {
	return fmt.Errorf("%w: %s: %d row(s) of %s column %q are zero or negative, first on line %d (value %g); a log-log model cannot use them: drop them with --where '%s > 0' if they are data errors or stock-outs, or choose --form linear",
		ErrNonPositiveLog, p.Source, bad, what, name, p.Line(first), x[first], name)
}

// modelIDs returns the codes of an id column or an interaction "a*b*…"
// and its number of levels: the codes Panel.IDs gives, found without maps
// in the common cases. A text column gives its codes; a numeric column
// whose values are whole numbers spanning at most idSpan gives the rank
// of each value among the distinct values (what IDs gives by sorting); an
// interaction numbers the pairs of codes of its parts in order of first
// appearance through a table of all pairs, when there are at most idSpan.
// Anything else is left to Panel.IDs.
func modelIDs(p *Panel, name string) ([]int32, int, error) {
	slow := func() ([]int32, int, error) {
		codes, levels, err := p.IDs(name)
		return codes, len(levels), err
	}
	var codes []int32
	levels := 0
	for k, part := range strings.Split(name, "*") {
		c, l, ok := denseIDs(p, strings.TrimSpace(part))
		if !ok {
			return slow()
		}
		if k == 0 {
			codes, levels = c, l
			continue
		}
		if int64(levels)*int64(l) > idSpan {
			return slow()
		}
		table := make([]int32, levels*l)
		for i := range table {
			table[i] = -1
		}
		out := makeInt32s(len(codes))
		var next int32
		for i, a := range codes {
			b := c[i]
			if a < 0 || b < 0 {
				out[i] = -1
				continue
			}
			t := &table[int(a)*l+int(b)]
			if *t < 0 {
				*t = next
				next++
			}
			out[i] = *t
		}
		codes, levels = out, int(next)
	}
	return codes, levels, nil
}

// idSpan bounds the tables of modelIDs.
const idSpan = 1 << 24

// denseIDs is Panel.IDs for one column that is text, or numeric with whole
// values spanning at most idSpan; ok is false otherwise.
func denseIDs(p *Panel, name string) (codes []int32, levels int, ok bool) {
	if t, ok := p.Text[name]; ok {
		return t.Codes, len(t.Levels), true
	}
	x, ok := p.Num[name]
	if !ok {
		return nil, 0, false
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range x {
		if math.IsNaN(v) {
			continue
		}
		if v != math.Trunc(v) || math.IsInf(v, 0) {
			return nil, 0, false
		}
		lo, hi = math.Min(lo, v), math.Max(hi, v)
	}
	if lo > hi { // every cell missing
		codes = make([]int32, len(x))
		for i := range codes {
			codes[i] = -1
		}
		return codes, 0, true
	}
	if hi-lo >= idSpan {
		return nil, 0, false
	}
	rank := make([]int32, int(hi-lo)+1)
	for _, v := range x {
		if !math.IsNaN(v) {
			rank[int(v-lo)] = 1
		}
	}
	var next int32
	for i, r := range rank {
		if r != 0 {
			rank[i] = next
			next++
		} else {
			rank[i] = -1
		}
	}
	codes = makeInt32s(len(x))
	for i, v := range x {
		if math.IsNaN(v) {
			codes[i] = -1
		} else {
			codes[i] = rank[int(v-lo)]
		}
	}
	return codes, int(next), true
}

// compactCodes renumbers the codes (all in [0, levels)) of the n rows
// used, listed in rows (nil: all rows, n = len(codes)), 0…G-1 in order of
// first appearance. When the rows are all the rows (rows holds increasing
// indices, so it is then 0…len(codes)-1) and the codes are already so
// numbered, codes itself is returned: the same values, without a copy
// (codes are never modified).
func compactCodes(codes []int32, levels int, rows []int32, n int) ([]int32, int) {
	if n == len(codes) {
		var next int32
		ok := true
		for _, c := range codes {
			if c > next || c < 0 {
				ok = false
				break
			}
			if c == next {
				next++
			}
		}
		if ok {
			return codes, int(next)
		}
	}
	remap := make([]int32, levels)
	for l := range remap {
		remap[l] = -1
	}
	out := makeInt32s(n)
	var next int32
	for j := range out {
		c := codes[j]
		if rows != nil {
			c = codes[rows[j]]
		}
		if remap[c] < 0 {
			remap[c] = next
			next++
		}
		out[j] = remap[c]
	}
	return out, int(next)
}

// compactEffects is ivcore.Compact for the n kept rows listed in rows (nil:
// all rows): each effect restricted to those rows, its codes renumbered
// 0…L-1 in order of first appearance. It gives the same effects as Compact
// without building the row list again.
func compactEffects(effects []ivcore.Effect, rows []int32, n int) []ivcore.Effect {
	out := make([]ivcore.Effect, len(effects))
	for k, e := range effects {
		codes, l := compactCodes(e.Codes, e.Levels, rows, n)
		out[k] = ivcore.Effect{Name: e.Name, Codes: codes, Levels: l}
	}
	return out
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
