package demand

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strings"
)

// stepRunner carries out a plan's statements. A printer writes them
// down (its loops run a fixed number of times); a database connection
// runs them and answers the plan's control queries.
type stepRunner interface {
	// exec runs a statement and returns the number of rows it touched.
	exec(sql string) (int64, error)
	// values runs a query that returns one row of numbers.
	values(sql string) ([]float64, error)
	// printing reports whether the statements are only written down.
	printing() bool
}

// Fixed counts of the loops of a printed script. A database connection
// loops until done instead. The moments file records what the last
// round left (singletons, unsettled labels, the last sweep's change), so
// a script that stopped too early is caught when its result is read.
const (
	printSingletonRounds = 4
	printLabelSteps      = 4
	printSweeps          = 50
)

// maxLabelSteps bounds label propagation on a connection.
const maxLabelSteps = 1000

// errNoSource is returned when neither a table nor a query is named.
var errNoSource = fmt.Errorf("%w: name the data with --table NAME or --query 'SELECT …'", ErrSpec)

// run carries out the plan on r and returns how its loops ended, from
// which final and unpivot write the final query (its rows, block, key,
// term and value, are the moments file). check, when not nil, is called
// with the query of the profile's rows as soon as they exist (a
// connection stops there when no row is usable).
func (p *sqlPlan) run(r stepRunner, check func(final string) error) (runState, error) {
	var st runState
	ex := func(sql string) error {
		_, err := r.exec(sql)
		return err
	}
	for _, s := range p.prelude() {
		if err := ex(s); err != nil {
			return st, err
		}
	}
	if err := ex(p.profile()); err != nil {
		return st, err
	}
	if check != nil {
		if err := check(p.unpivotProfile()); err != nil {
			return st, err
		}
	}
	if len(p.fes) == 0 {
		rel := "(" + p.rowsSelect() + ") AS r"
		if p.hc1 {
			if err := ex(p.create(p.t("res"), p.rowsSelect())); err != nil {
				return st, err
			}
			rel = p.t("res")
		}
		if err := p.runBlocks(ex, rel); err != nil {
			return st, err
		}
		return st, nil
	}

	if err := ex(p.create(p.t("rows"), p.rowsSelect())); err != nil {
		return st, err
	}
	if p.dialect == Postgres {
		if err := ex("ANALYZE " + p.t("rows")); err != nil {
			return st, err
		}
	}
	// Singletons, round by round, until a round deletes none.
	for round := 0; ; round++ {
		if r.printing() && round == printSingletonRounds {
			break
		}
		var deleted int64
		for e := range p.fes {
			n, err := r.exec(p.singletons(e))
			if err != nil {
				return st, err
			}
			deleted += n
		}
		if !r.printing() && deleted == 0 {
			break
		}
	}
	for e := range p.fes {
		q := fmt.Sprintf("SELECT COUNT(*) AS n FROM (SELECT k%d FROM %s GROUP BY k%d HAVING COUNT(*) = 1) AS x", e, p.t("rows"), e)
		if err := ex(p.create(p.t(fmt.Sprintf("one%d", e)), q)); err != nil {
			return st, err
		}
	}
	if err := ex(p.stat()); err != nil {
		return st, err
	}
	var sd []float64
	if !r.printing() {
		v, err := r.values("SELECT " + p.absorbedList("d") + " FROM " + p.t("stat"))
		if err != nil {
			return st, err
		}
		sd = v
	}

	// Absorption: one GROUP BY per effect per sweep.
	if len(p.fes) == 1 {
		if err := ex(p.sweep(0, 1)); err != nil {
			return st, err
		}
		st.sweeps = 1
	} else {
		for e := 1; e < len(p.fes); e++ {
			if err := ex(p.zeroCoef(e)); err != nil {
				return st, err
			}
		}
		limit := p.maxSweeps()
		if r.printing() && p.spec.MaxSweeps == 0 {
			limit = printSweeps
		}
		// The second sweep is the first whose change can be measured.
		limit = max(limit, 2)
		for s := 1; s <= limit; s++ {
			for e := range p.fes {
				if err := ex(p.sweep(e, s)); err != nil {
					return st, err
				}
			}
			st.sweeps = s
			if s < 2 || (r.printing() && s < limit) {
				p.dropSweep(ex, s-2)
				continue
			}
			// The convergence measure: the largest, over columns, of
			// the summed changes of every effect relative to the
			// column's standard deviation (a bound on the largest
			// change of any residual).
			change := make([]float64, len(sd))
			for e := range p.fes {
				if err := ex(p.change(e, s)); err != nil {
					return st, err
				}
				if !r.printing() {
					v, err := r.values("SELECT " + p.absorbedList("a") + " FROM " + p.t(fmt.Sprintf("chg%d_%d", e, s)))
					if err != nil {
						return st, err
					}
					for j, x := range v {
						change[j] += x / cmp.Or(max(sd[j], 0), 1)
					}
				}
			}
			worst := 0.0
			for _, x := range change {
				if x > worst || math.IsNaN(x) {
					worst = x
				}
			}
			p.dropSweep(ex, s-2)
			if !r.printing() && (worst <= p.tol() || math.IsNaN(worst)) {
				break // converged, or a value that is not a number: reported when read
			}
			if !r.printing() && s < limit {
				for e := range p.fes {
					if err := ex(p.drop(p.t(fmt.Sprintf("chg%d_%d", e, s)))); err != nil {
						return st, err
					}
				}
			}
		}
	}
	// Effects nested in each clustering dimension.
	for d := range p.dims() {
		for e := range p.fes {
			if err := ex(p.nested(d, e)); err != nil {
				return st, err
			}
		}
	}
	// Connected components of pairs of effects: a connection labels only
	// the pairs the degrees of freedom need (the first two effects, and
	// the first two effects nested in each clustering dimension); a
	// printed script, which cannot look, every pair.
	st.labels = map[[2]int]int{}
	st.pairs = p.pairs()
	if !r.printing() && len(st.pairs) > 1 {
		nested := make([][]bool, len(p.dims()))
		for d := range p.dims() {
			nested[d] = make([]bool, len(p.fes))
			for e := range p.fes {
				v, err := r.values("SELECT CAST(n AS DOUBLE PRECISION) FROM " + p.t(fmt.Sprintf("nest%d_%d", d, e)))
				if err != nil {
					return st, err
				}
				nested[d][e] = v[0] == 0
			}
		}
		st.pairs = neededPairs(len(p.fes), nested)
	}
	for _, pr := range st.pairs {
		for _, s := range p.edges(pr) {
			if err := ex(s); err != nil {
				return st, err
			}
		}
		for t := 1; ; t++ {
			for _, s := range p.propagate(pr, t) {
				if err := ex(s); err != nil {
					return st, err
				}
			}
			st.labels[pr] = t
			if r.printing() {
				if t == printLabelSteps {
					break
				}
				continue
			}
			v, err := r.values("SELECT CAST(n AS DOUBLE PRECISION) FROM " + p.movedTable(pr, t))
			if err != nil {
				return st, err
			}
			if v[0] == 0 || t == maxLabelSteps {
				break
			}
		}
	}
	if err := ex(p.residuals(st.sweeps)); err != nil {
		return st, err
	}
	if p.dialect == Postgres {
		if err := ex("ANALYZE " + p.t("res")); err != nil {
			return st, err
		}
	}
	if err := p.runBlocks(ex, p.t("res")); err != nil {
		return st, err
	}
	return st, nil
}

// runState records how a run's loops ended, for the final query.
type runState struct {
	sweeps int            // last sweep of the absorption
	labels map[[2]int]int // last step of label propagation, per pair of effects
	pairs  [][2]int       // the pairs labelled
}

// neededPairs lists the pairs of effects whose connected components the
// degrees of freedom use, given which effects are nested in each
// clustering dimension: the first two effects, and the first two nested
// ones of each dimension.
func neededPairs(effects int, nested [][]bool) [][2]int {
	if effects < 2 {
		return nil
	}
	out := [][2]int{{0, 1}}
	for _, nd := range nested {
		var first []int
		for e, ok := range nd {
			if ok && len(first) < 2 {
				first = append(first, e)
			}
		}
		if len(first) == 2 {
			pr := [2]int{first[0], first[1]}
			if !slices.Contains(out, pr) {
				out = append(out, pr)
			}
		}
	}
	return out
}

// dropSweep drops the effect tables of sweep s (kept one sweep longer
// than their use, for the change query).
func (p *sqlPlan) dropSweep(ex func(string) error, s int) {
	if s < 1 {
		return
	}
	for e := range p.fes {
		_ = ex(p.drop(p.coef(e, s)))
	}
}

func (p *sqlPlan) tol() float64 {
	if p.spec.Tolerance > 0 {
		return p.spec.Tolerance
	}
	return 1e-10
}

func (p *sqlPlan) maxSweeps() int {
	if p.spec.MaxSweeps > 0 {
		return p.spec.MaxSweeps
	}
	return 10000
}

// absorbedList selects, in column order, the value named prefix<j> of
// each absorbed column j: d<j> of the stat table (standard deviations),
// a<j> of a change table.
func (p *sqlPlan) absorbedList(prefix string) string {
	var s []string
	for j, c := range p.cols {
		if c.src != "" {
			s = append(s, fmt.Sprintf("CAST(%s%d AS %s)", prefix, j, dbl))
		}
	}
	return strings.Join(s, ", ")
}

// runBlocks writes the blocks (per clustering dimension, or of the whole
// sample) and, for HC1, the shape and fourth-order sums, from rel.
func (p *sqlPlan) runBlocks(ex func(string) error, rel string) error {
	if len(p.cls) == 0 {
		if err := ex(p.blocks(-1, rel)); err != nil {
			return err
		}
	}
	for d := range p.dims() {
		if err := ex(p.blocks(d, rel)); err != nil {
			return err
		}
	}
	if p.hc1 {
		if err := ex(p.shape(rel)); err != nil {
			return err
		}
		if err := ex(p.fourth(rel)); err != nil {
			return err
		}
	}
	return nil
}

// row is one SELECT of the final query.
func row(block, key, term, value, from string) string {
	s := fmt.Sprintf("SELECT %s AS block, %s AS key, %s AS term, CAST(%s AS %s) AS value", block, key, quoteLit(term), value, dbl)
	if from != "" {
		s += " FROM " + from
	}
	return s
}

// textKey is the text of a key column in the final query.
func textKey(cols []string) string {
	var s []string
	for _, c := range cols {
		s = append(s, "CAST("+c+" AS VARCHAR(1000))")
	}
	return strings.Join(s, " || '|' || ")
}

// unpivotProfile is the final query's part that reports the profile.
func (p *sqlPlan) unpivotProfile() string {
	var parts []string
	for j, c := range p.cols {
		parts = append(parts, row(quoteLit("model"), quoteLit(c.name), "column", fmt.Sprint(j), ""))
	}
	sums := []string{"miss", "SUM(n) AS n"}
	for i := range p.logs {
		sums = append(sums, fmt.Sprintf("SUM(bad%d) AS bad%d", i, i), fmt.Sprintf("MIN(low%d) AS low%d", i, i))
	}
	prof := "(SELECT " + strings.Join(sums, ", ") + " FROM " + p.t("prof") + " GROUP BY miss) AS pr"
	key := "CAST(miss AS VARCHAR(20))"
	parts = append(parts, row(quoteLit("profile"), key, "n", "n", prof))
	for i := range p.logs {
		parts = append(parts,
			row(quoteLit("profile"), key, fmt.Sprintf("bad%d", i), fmt.Sprintf("bad%d", i), prof),
			row(quoteLit("profile"), key, fmt.Sprintf("low%d", i), fmt.Sprintf("low%d", i), prof))
	}
	return strings.Join(parts, "\nUNION ALL ")
}

// unpivot is the final query: every sum the plan computed as a row
// (block, key, term, value).
func (p *sqlPlan) unpivot(st runState) string {
	parts, wide := p.final(st)
	for _, w := range wide {
		for i, t := range w.terms {
			parts = append(parts, row(quoteLit(w.block), w.key, t, w.values[i], w.table))
		}
	}
	return strings.Join(parts, "\nUNION ALL ")
}

// widePart is a table of the plan whose columns are terms of one block,
// one row per key: the final query turns each column into rows, and a
// connection reads the table as it is (fewer bytes).
type widePart struct {
	block, key, table string
	terms, values     []string
}

// sql is the query reading the part as it is: the key, then the values.
func (w widePart) sql() string {
	s := []string{w.key + " AS key"}
	for _, v := range w.values {
		s = append(s, fmt.Sprintf("CAST(%s AS %s)", v, dbl))
	}
	return "SELECT " + strings.Join(s, ", ") + " FROM " + w.table
}

// final returns the parts of the final query: SELECTs of single rows
// (block, key, term, value), and the tables read whole.
func (p *sqlPlan) final(st runState) ([]string, []widePart) {
	parts := []string{p.unpivotProfile()}
	var wide []widePart
	lit := quoteLit
	parts = append(parts, row(lit("model"), lit(p.form), "form", "0", ""))
	for e, k := range p.fes {
		parts = append(parts, row(lit("model"), lit(k.name), "effect", fmt.Sprint(e), ""))
	}
	for d, k := range p.cls {
		parts = append(parts, row(lit("model"), lit(k.name), "cluster", fmt.Sprint(d), ""))
	}
	// Blocks.
	k := len(p.cols)
	terms := []string{"n"}
	for a := 0; a < k; a++ {
		terms = append(terms, fmt.Sprintf("t%d", a))
	}
	for a := 0; a < k; a++ {
		for b := a; b < k; b++ {
			terms = append(terms, fmt.Sprintf("s%d_%d", a, b))
		}
	}
	if p.qcol != "" {
		terms = append(terms, "lq", "lp", "lplo", "lphi")
	}
	blockRows := func(block, key, from string) {
		wide = append(wide, widePart{block: block, key: key, table: from, terms: terms, values: terms})
	}
	if len(p.cls) == 0 {
		blockRows("total", "''", p.t("blk_all"))
	}
	for d, keys := range p.dims() {
		blockRows(fmt.Sprintf("cluster:%d", d), textKey(keys), p.t(fmt.Sprintf("blk%d", d)))
	}
	if len(p.fes) > 0 {
		stat := p.t("stat")
		parts = append(parts, row(lit("stat"), "''", "n", "n", stat))
		for j, c := range p.cols {
			if c.src != "" {
				parts = append(parts, row(lit("stat"), "''", fmt.Sprintf("q%d", j), fmt.Sprintf("q%d", j), stat),
					row(lit("stat"), "''", fmt.Sprintf("d%d", j), fmt.Sprintf("d%d", j), stat))
			}
		}
		for e := range p.fes {
			parts = append(parts, row(lit("stat"), "''", fmt.Sprintf("l%d", e), fmt.Sprintf("l%d", e), stat),
				row(lit("absorb"), "''", fmt.Sprintf("single%d", e), "n", p.t(fmt.Sprintf("one%d", e))))
		}
		parts = append(parts, row(lit("absorb"), "''", "sweeps", fmt.Sprint(st.sweeps), ""))
		if len(p.fes) >= 2 {
			for e := range p.fes {
				for j, c := range p.cols {
					if c.src != "" {
						parts = append(parts, row(lit("absorb"), "''", fmt.Sprintf("change%d_%d", e, j), fmt.Sprintf("a%d", j), p.t(fmt.Sprintf("chg%d_%d", e, st.sweeps))))
					}
				}
			}
		}
		for _, pr := range st.pairs {
			t := st.labels[pr]
			parts = append(parts,
				row(lit("absorb"), "''", "components"+pairName(pr), "COUNT(DISTINCT lab)", p.labelTable(pr, t)),
				row(lit("absorb"), "''", "moved"+pairName(pr), "n", p.movedTable(pr, t)))
		}
		for d := range p.dims() {
			for e := range p.fes {
				parts = append(parts, row(lit("nested"), lit(fmt.Sprint(d)), fmt.Sprintf("effect%d", e), "n", p.t(fmt.Sprintf("nest%d_%d", d, e))))
			}
		}
	}
	if p.hc1 {
		var shape []string
		for j := range p.cols {
			shape = append(shape, fmt.Sprintf("m%d", j), fmt.Sprintf("d%d", j))
		}
		wide = append(wide, widePart{block: "shape", key: "''", table: p.t("shape"), terms: shape, values: shape})
		var four []string
		for _, t := range fourthTerms(k + 1) {
			four = append(four, fmt.Sprintf("q%d", fourthIndexOf(t)))
		}
		wide = append(wide, widePart{block: "fourth", key: "''", table: p.t("four"), terms: four, values: four})
	}
	return parts, wide
}

// Script returns the SQL of a model as one script: the statements, with
// the loops of fixed-effect absorption written out a fixed number of
// times, then the query whose result is a moments file, then the DROPs
// of every table it made. hc1 adds the fourth-order sums HC1 needs.
func Script(s *Spec, src SQLSource, d Dialect, hc1 bool) (string, error) {
	p, err := newSQLPlan(s, src, d, hc1)
	if err != nil {
		return "", err
	}
	if p.from == "" {
		return "", errNoSource
	}
	pr := &printer{}
	st, err := p.run(pr, nil)
	if err != nil {
		return "", err
	}
	final := p.unpivot(st)
	var b strings.Builder
	fmt.Fprintf(&b, "-- priceiv: moment blocks of the model, computed where the data lives (%s dialect).\n", map[Dialect]string{Postgres: "postgres", ANSI: "ansi"}[d])
	fmt.Fprintf(&b, "-- Source: %s. Columns in moment order: %s.\n", src.label(), strings.Join(p.names(), ", "))
	b.WriteString("-- Run the statements in order on one connection; save the result of the final SELECT\n")
	b.WriteString("-- as CSV with a header (block,key,term,value) and give it to: priceiv estimate --moments FILE\n")
	b.WriteString("-- with the same model options. Only sums leave the engine, no rows.\n")
	if len(p.fes) >= 2 {
		fmt.Fprintf(&b, "-- The absorption sweeps are written out %d times and the component labelling %d times;\n", pr.sweeps(p), printLabelSteps)
		b.WriteString("-- the result records the last change, and priceiv refuses it when it is above the tolerance.\n")
	}
	b.WriteString("\n")
	for _, s := range pr.stmts {
		b.WriteString(s)
		b.WriteString(";\n\n")
	}
	b.WriteString("-- The moments file:\n")
	b.WriteString(final)
	b.WriteString(";\n\n")
	for _, t := range p.tables {
		fmt.Fprintf(&b, "%s;\n", p.drop(t))
	}
	return b.String(), nil
}

// printer writes statements down.
type printer struct{ stmts []string }

func (pr *printer) exec(sql string) (int64, error) {
	if strings.HasPrefix(sql, "DROP TABLE") {
		return 0, nil // the script drops every table at the end
	}
	pr.stmts = append(pr.stmts, sql)
	return 0, nil
}
func (pr *printer) values(string) ([]float64, error) { return nil, nil }
func (pr *printer) printing() bool                   { return true }
func (pr *printer) sweeps(p *sqlPlan) int {
	if p.spec.MaxSweeps > 0 {
		return max(p.spec.MaxSweeps, 2)
	}
	return printSweeps
}

// fourthIndexOf is the position of a sorted index tuple.
func fourthIndexOf(t [4]int) int {
	return t[0] + (t[1]+1)*t[1]/2 + (t[2]+2)*(t[2]+1)*t[2]/6 + (t[3]+3)*(t[3]+2)*(t[3]+1)*t[3]/24
}
