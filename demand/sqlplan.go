package demand

import (
	"fmt"
	"strconv"
	"strings"

	"priceiv/ivcore"
)

// Dialect selects the SQL a plan is written in.
type Dialect int

const (
	// Postgres writes for PostgreSQL: temporary tables, partitionwise
	// aggregation switched on so that a table partitioned across servers
	// (postgres_fdw) has its per-partition sums computed where it lives.
	Postgres Dialect = iota
	// ANSI writes plain SQL that warehouse engines accept: ordinary
	// tables under the plan's prefix, dropped at the end, and nothing
	// beyond CREATE TABLE … AS SELECT, GROUP BY, JOIN, CASE, LN, AVG,
	// STDDEV_POP, CAST and UNION ALL.
	ANSI
)

// ParseDialect reads "postgres" or "ansi".
func ParseDialect(s string) (Dialect, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "postgres", "postgresql", "pg":
		return Postgres, nil
	case "ansi":
		return ANSI, nil
	}
	return 0, fmt.Errorf("--dialect %q: choose postgres or ansi", s)
}

// SQLSource names the data of the SQL path: a table (optionally
// schema-qualified, as schema.table) or a query of the analyst's own.
type SQLSource struct {
	Table string
	Query string
}

// label describes the source in output and errors.
func (s SQLSource) label() string {
	if s.Table != "" {
		return "table " + s.Table
	}
	return "query"
}

// sqlKey is a fixed effect or cluster: one column, or an interaction of
// several ("a*b").
type sqlKey struct {
	name  string
	parts []string
}

// sqlCol is one model column in moment order.
type sqlCol struct {
	name string // as in Design.Names
	src  string // source column ("" for the intercept)
	log  bool
}

// sqlPlan is the SQL that computes a model's moment blocks where the
// data lives. Every step writes a small table (or, with fixed effects,
// one table of the used rows) under the prefix; the final query turns
// those tables into the rows of a moments file (block, key, term, value),
// read by parseMomentRows.
type sqlPlan struct {
	spec    *Spec
	dialect Dialect
	source  SQLSource
	from    string // FROM text of the source relation

	form  string
	cols  []sqlCol
	model ivcore.Model
	fes   []sqlKey
	cls   []sqlKey
	// miss lists, in order, the conditions whose first failure names the
	// column a row is dropped for (model columns, then effects, then
	// clusters).
	miss []sqlKey
	// logs are the indices into cols taken as logs.
	logs []int
	// qcol and pcol are the level quantity and price (demand form).
	qcol, pcol string
	hc1        bool
	tables     []string // created, for the closing DROPs
}

// prefix starts the name of every table a plan creates.
const prefix = "piv_"

// maxSQLColumns bounds the model columns of the SQL path when HC1 is
// asked for: the fourth-order sums of K columns and a constant fill
// C(K+4,4) columns of one table row (1001 at K = 10, 8 bytes each;
// PostgreSQL rows hold at most about 8160 bytes).
const maxSQLColumns = 10

// maxBlockColumns bounds the model columns of the SQL path: a block row
// holds K(K+1)/2 + K + 5 sums (865 at K = 40).
const maxBlockColumns = 40

// newSQLPlan lays out the SQL of spec over the source. hc1 adds the pass
// of fourth-order sums that HC1 statistics need.
func newSQLPlan(s *Spec, src SQLSource, d Dialect, hc1 bool) (*sqlPlan, error) {
	if err := s.Check(); err != nil {
		return nil, err
	}
	if len(s.Derive) > 0 || strings.TrimSpace(s.Where) != "" {
		return nil, fmt.Errorf("%w: --derive and --where work on files; in a database write them into the SQL of --query (for example --query 'SELECT *, LN(units) AS lq FROM sales WHERE week > 52')", ErrSpec)
	}
	if s.Interact != "" || s.Cross {
		return nil, fmt.Errorf("%w: --interact and --cross read the rows of a file; from a database use --by for one model per product", ErrSpec)
	}
	p := &sqlPlan{spec: s, dialect: d, source: src, hc1: hc1}
	switch {
	case src.Table != "" && src.Query != "":
		return nil, fmt.Errorf("%w: give --table or --query, not both", ErrSpec)
	case src.Table != "":
		var parts []string
		for _, x := range strings.Split(src.Table, ".") {
			parts = append(parts, quoteIdent(x))
		}
		p.from = strings.Join(parts, ".")
	case strings.TrimSpace(src.Query) != "":
		q := strings.TrimRight(strings.TrimSpace(src.Query), "; \n\t")
		p.from = "(" + q + ") AS " + prefix + "src"
	}

	type use struct {
		name string
		role Role
	}
	var uses []use
	if s.DemandForm() {
		p.form = s.Form
		if p.form == "" {
			p.form = "log-log"
		}
		uses = append(uses, use{s.Quantity, RoleOutcome}, use{s.Price, RoleEndogenous})
		for _, c := range s.Controls {
			uses = append(uses, use{c, RoleExogenous})
		}
		for _, c := range s.Shifters {
			uses = append(uses, use{c, RoleInstrument})
		}
		p.qcol, p.pcol = s.Quantity, s.Price
	} else {
		uses = append(uses, use{s.Outcome, RoleOutcome})
		for _, c := range s.Endogenous {
			uses = append(uses, use{c, RoleEndogenous})
		}
		for _, c := range s.Exogenous {
			uses = append(uses, use{c, RoleExogenous})
		}
		for _, c := range s.Instruments {
			uses = append(uses, use{c, RoleInstrument})
		}
	}
	seen := map[string]Role{}
	for _, u := range uses {
		if r, ok := seen[u.name]; ok {
			return nil, fmt.Errorf("%w: column %q is used twice in the model (as %s and as %s)", ErrSpec, u.name, roleName(r), roleName(u.role))
		}
		seen[u.name] = u.role
		p.miss = append(p.miss, sqlKey{u.name, []string{u.name}})
	}
	for _, f := range s.FE {
		p.fes = append(p.fes, splitKey(f))
	}
	for _, c := range s.Cluster {
		p.cls = append(p.cls, splitKey(c))
	}
	p.miss = append(append(p.miss, p.fes...), p.cls...)

	// Moment order: outcome, endogenous, intercept (without effects),
	// exogenous, instruments, as in Build.
	logY := p.form == "log-log" || p.form == "semi-log"
	logP := p.form == "log-log"
	for _, role := range []Role{RoleOutcome, RoleEndogenous, RoleExogenous, RoleInstrument} {
		if role == RoleExogenous && len(p.fes) == 0 {
			p.model.Exog = append(p.model.Exog, len(p.cols))
			p.cols = append(p.cols, sqlCol{name: "intercept"})
		}
		for k, u := range uses {
			if u.role != role {
				continue
			}
			c := sqlCol{name: u.name, src: u.name}
			if s.DemandForm() && ((k == 0 && logY) || (k == 1 && logP)) {
				c.log = true
				p.logs = append(p.logs, len(p.cols))
			}
			idx := len(p.cols)
			p.cols = append(p.cols, c)
			switch role {
			case RoleOutcome:
				p.model.Y = idx
			case RoleEndogenous:
				p.model.Endog = append(p.model.Endog, idx)
			case RoleExogenous:
				p.model.Exog = append(p.model.Exog, idx)
			case RoleInstrument:
				p.model.Instr = append(p.model.Instr, idx)
			}
		}
	}
	if len(p.cols) > maxBlockColumns {
		return nil, fmt.Errorf("%w: the SQL path sums the cross-products of the %d model columns in one table row, more than the %d it allows: use fewer controls, or absorb groups of them as fixed effects", ErrSpec, len(p.cols), maxBlockColumns)
	}
	if hc1 && len(p.cols) > maxSQLColumns {
		return nil, fmt.Errorf("%w: HC1 from a database sums fourth-order products of the %d model columns, more than the %d one table can hold: use --vcov cluster (with --cluster) or --vcov iid, or fewer controls", ErrSpec, len(p.cols), maxSQLColumns)
	}
	return p, nil
}

func splitKey(name string) sqlKey {
	k := sqlKey{name: name}
	for _, part := range strings.Split(name, "*") {
		k.parts = append(k.parts, strings.TrimSpace(part))
	}
	return k
}

// names returns the model column names in moment order.
func (p *sqlPlan) names() []string {
	out := make([]string, len(p.cols))
	for j, c := range p.cols {
		out[j] = c.name
	}
	return out
}

// sourceColumns lists the distinct source columns the plan reads, with
// whether each is used as a number.
func (p *sqlPlan) sourceColumns() (names []string, numeric map[string]bool) {
	numeric = map[string]bool{}
	seen := map[string]bool{}
	add := func(n string, num bool) {
		if !seen[n] {
			seen[n] = true
			names = append(names, n)
		}
		if num {
			numeric[n] = true
		}
	}
	for _, c := range p.cols {
		if c.src != "" {
			add(c.src, true)
		}
	}
	for _, k := range append(append([]sqlKey(nil), p.fes...), p.cls...) {
		for _, part := range k.parts {
			add(part, false)
		}
	}
	return names, numeric
}

// quoteIdent quotes an SQL identifier (standard double quotes).
func quoteIdent(s string) string { return `"` + strings.ReplaceAll(s, `"`, `""`) + `"` }

// quoteLit quotes an SQL string literal.
func quoteLit(s string) string { return "'" + strings.ReplaceAll(s, "'", "''") + "'" }

const dbl = "DOUBLE PRECISION"

// t names a table of the plan.
func (p *sqlPlan) t(name string) string { return prefix + name }

// create returns CREATE TABLE name AS query, temporary in PostgreSQL, and
// records the table for the closing DROPs.
func (p *sqlPlan) create(name, query string) string {
	p.tables = append(p.tables, name)
	kw := "CREATE TABLE "
	if p.dialect == Postgres {
		kw = "CREATE TEMPORARY TABLE "
	}
	return kw + name + " AS\n" + query
}

// drop returns DROP TABLE name.
func (p *sqlPlan) drop(name string) string { return "DROP TABLE IF EXISTS " + name }

// prelude returns the connection's settings (PostgreSQL).
func (p *sqlPlan) prelude() []string {
	if p.dialect != Postgres {
		return nil
	}
	return []string{
		"SET enable_partitionwise_aggregate = on",
		"SET enable_partitionwise_join = on",
		"SET temp_buffers = '256MB'",
		// Literals are written with doubled quotes only.
		"SET standard_conforming_strings = on",
		// Compiling the wide aggregates (up to 1001 sums) costs seconds
		// and saves nothing on sums of a few columns.
		"SET jit = off",
	}
}

// colExpr is the SQL value of model column j over the source row.
func (p *sqlPlan) colExpr(j int) string {
	c := p.cols[j]
	switch {
	case c.src == "":
		return "CAST(1 AS " + dbl + ")"
	case c.log:
		return "LN(CAST(" + quoteIdent(c.src) + " AS " + dbl + "))"
	}
	return "CAST(" + quoteIdent(c.src) + " AS " + dbl + ")"
}

// keyExpr is the SQL value of an effect or cluster key: the column, or
// the parts joined with '|' as text.
func keyExpr(k sqlKey) string {
	if len(k.parts) == 1 {
		return quoteIdent(k.parts[0])
	}
	var s []string
	for _, part := range k.parts {
		s = append(s, "CAST("+quoteIdent(part)+" AS VARCHAR(1000))")
	}
	return strings.Join(s, " || '|' || ")
}

// numericMissing reports whether model column name counts as missing
// when it is not a finite number, as well as when it is NULL.
func (p *sqlPlan) numericMissing(name string) bool {
	for _, c := range p.cols {
		if c.src == name {
			return true
		}
	}
	return false
}

// finite is true for a finite number. In PostgreSQL it compares with the
// special values, which the planner estimates from the column's
// statistics (an arithmetic test is taken as highly selective and turns
// the per-cluster aggregation into a sort on disk). Elsewhere it tests
// x - x = 0: NaN - NaN and ∞ - ∞ are NaN, which equals nothing.
func (p *sqlPlan) finite(col string) string {
	x := "CAST(" + quoteIdent(col) + " AS " + dbl + ")"
	if p.dialect == Postgres {
		return x + " NOT IN ('NaN', 'Infinity', '-Infinity')"
	}
	return x + " - " + x + " = 0"
}

// keep is the WHERE condition of used rows: every used column present
// (numbers finite), columns under a log positive.
func (p *sqlPlan) keep() string {
	var c []string
	for _, k := range p.miss {
		for _, part := range k.parts {
			c = append(c, quoteIdent(part)+" IS NOT NULL")
			if p.numericMissing(part) {
				c = append(c, p.finite(part))
			}
		}
	}
	for _, j := range p.logs {
		c = append(c, quoteIdent(p.cols[j].src)+" > 0")
	}
	return strings.Join(c, "\n  AND ")
}

// profile writes, per reason a row is dropped (0: kept, i: first missing
// column i), the row count and, for columns under a log, the count of the
// non-positive values and the smallest value.
func (p *sqlPlan) profile() string {
	var cs []string
	for i, k := range p.miss {
		var conds []string
		for _, part := range k.parts {
			conds = append(conds, quoteIdent(part)+" IS NULL")
			if p.numericMissing(part) {
				conds = append(conds, "NOT ("+p.finite(part)+")")
			}
		}
		cs = append(cs, fmt.Sprintf("WHEN %s THEN %d", strings.Join(conds, " OR "), i+1))
	}
	inner := []string{"CASE " + strings.Join(cs, " ") + " ELSE 0 END AS miss"}
	outer := []string{"miss", "COUNT(*) AS n"}
	for i, j := range p.logs {
		inner = append(inner, fmt.Sprintf("CAST(%s AS %s) AS v%d", quoteIdent(p.cols[j].src), dbl, i))
		outer = append(outer,
			fmt.Sprintf("SUM(CASE WHEN v%d <= 0 THEN 1 ELSE 0 END) AS bad%d", i, i),
			fmt.Sprintf("MIN(v%d) AS low%d", i, i))
	}
	// Grouping by the first cluster's columns too lets a table
	// partitioned by them count on its shards; the final query adds the
	// groups up.
	group := []string{"miss"}
	if len(p.cls) > 0 {
		for i, part := range p.cls[0].parts {
			inner = append(inner, fmt.Sprintf("%s AS gp%d", quoteIdent(part), i))
			group = append(group, fmt.Sprintf("gp%d", i))
		}
	}
	outer[0] = strings.Join(group, ", ")
	q := "SELECT " + strings.Join(outer, ", ") + "\nFROM (SELECT " + strings.Join(inner, ",\n  ") + "\n  FROM " + p.from + ") AS r\nGROUP BY " + strings.Join(group, ", ")
	return p.create(p.t("prof"), q)
}

// rowsSelect is the select list of the used rows: model columns c0…,
// effect keys k0…, cluster keys g0…, level quantity and price.
func (p *sqlPlan) rowsSelect() string {
	var s []string
	for j := range p.cols {
		if len(p.fes) > 0 && p.cols[j].src == "" {
			continue
		}
		s = append(s, fmt.Sprintf("%s AS c%d", p.colExpr(j), j))
	}
	for e, k := range p.fes {
		s = append(s, fmt.Sprintf("%s AS k%d", keyExpr(k), e))
	}
	for d, k := range p.cls {
		s = append(s, fmt.Sprintf("%s AS g%d", keyExpr(k), d))
	}
	if p.qcol != "" {
		s = append(s, fmt.Sprintf("CAST(%s AS %s) AS lq", quoteIdent(p.qcol), dbl), fmt.Sprintf("CAST(%s AS %s) AS lp", quoteIdent(p.pcol), dbl))
	}
	return "SELECT " + strings.Join(s, ",\n  ") + "\nFROM " + p.from + "\nWHERE " + p.keep()
}

// dims lists the clustering dimensions as the cluster key columns each
// groups by: one per cluster, and for two clusters their intersection.
func (p *sqlPlan) dims() [][]string {
	var out [][]string
	for d := range p.cls {
		out = append(out, []string{fmt.Sprintf("g%d", d)})
	}
	if len(p.cls) == 2 {
		out = append(out, []string{"g0", "g1"})
	}
	return out
}

// dimName is the name of dimension d as Build gives it.
func (p *sqlPlan) dimName(d int) string {
	if d < len(p.cls) {
		return p.cls[d].name
	}
	return p.cls[0].name + "×" + p.cls[1].name
}

// blocks writes the sums of dimension d (d < 0: the whole sample): rows,
// first-order sums t_j, cross sums s_a_b (a ≤ b), and the level price and
// quantity sums of the demand form, grouped by the dimension's keys.
func (p *sqlPlan) blocks(d int, rel string) string {
	var keys []string
	name := "blk_all"
	if d >= 0 {
		keys = p.dims()[d]
		name = fmt.Sprintf("blk%d", d)
	}
	s := append([]string(nil), keys...)
	s = append(s, "COUNT(*) AS n")
	k := len(p.cols)
	col := func(j int) string {
		if len(p.fes) == 0 && p.cols[j].src == "" {
			return "1"
		}
		return fmt.Sprintf("c%d", j)
	}
	for a := 0; a < k; a++ {
		s = append(s, fmt.Sprintf("SUM(%s) AS t%d", col(a), a))
	}
	for a := 0; a < k; a++ {
		for b := a; b < k; b++ {
			s = append(s, fmt.Sprintf("SUM(%s * %s) AS s%d_%d", col(a), col(b), a, b))
		}
	}
	if p.qcol != "" {
		s = append(s, "SUM(lq) AS lq", "SUM(lp) AS lp", "MIN(lp) AS lplo", "MAX(lp) AS lphi")
	}
	q := "SELECT " + strings.Join(s, ", ") + "\nFROM " + rel
	if len(keys) > 0 {
		q += "\nGROUP BY " + strings.Join(keys, ", ")
	}
	return p.create(p.t(name), q)
}

// singletons deletes the rows of effect e's levels that hold one row.
func (p *sqlPlan) singletons(e int) string {
	r := p.t("rows")
	return fmt.Sprintf("DELETE FROM %s WHERE k%d IN (SELECT k%d FROM %s GROUP BY k%d HAVING COUNT(*) = 1)", r, e, e, r, e)
}

// stat writes the row count, Σx² and standard deviation of each model
// column of the used rows before absorption.
func (p *sqlPlan) stat() string {
	s := []string{"COUNT(*) AS n"}
	for j, c := range p.cols {
		if c.src == "" {
			continue
		}
		s = append(s, fmt.Sprintf("SUM(c%d * c%d) AS q%d", j, j, j), fmt.Sprintf("STDDEV_POP(c%d) AS d%d", j, j))
	}
	for e := range p.fes {
		s = append(s, fmt.Sprintf("COUNT(DISTINCT k%d) AS l%d", e, e))
	}
	return p.create(p.t("stat"), "SELECT "+strings.Join(s, ", ")+"\nFROM "+p.t("rows"))
}

// coef names effect e's table of sweep s.
func (p *sqlPlan) coef(e, s int) string { return p.t(fmt.Sprintf("a%d_%d", e, s)) }

// sweepSource returns the sweep (s or s-1) whose table of effect f
// effect e reads in sweep s (Gauss-Seidel order).
func sweepOf(e, f, s int) int {
	if f < e {
		return s
	}
	return s - 1
}

// zeroCoef writes effect e's table of sweep 0: zero for every level.
func (p *sqlPlan) zeroCoef(e int) string {
	s := []string{fmt.Sprintf("k%d", e)}
	for j, c := range p.cols {
		if c.src != "" {
			s = append(s, fmt.Sprintf("CAST(0 AS %s) AS a%d", dbl, j))
		}
	}
	return p.create(p.coef(e, 0), "SELECT "+strings.Join(s, ", ")+"\nFROM "+p.t("rows")+"\nGROUP BY k"+strconv.Itoa(e))
}

// sweep writes effect e's table of sweep s: the mean, within each level
// of e, of each column less the other effects' current values.
func (p *sqlPlan) sweep(e, s int) string {
	sel := []string{fmt.Sprintf("r.k%d", e)}
	var joins []string
	for f := range p.fes {
		if f == e {
			continue
		}
		joins = append(joins, fmt.Sprintf("JOIN %s x%d ON r.k%d = x%d.k%d", p.coef(f, sweepOf(e, f, s)), f, f, f, f))
	}
	for j, c := range p.cols {
		if c.src == "" {
			continue
		}
		v := fmt.Sprintf("r.c%d", j)
		for f := range p.fes {
			if f != e {
				v += fmt.Sprintf(" - x%d.a%d", f, j)
			}
		}
		sel = append(sel, fmt.Sprintf("AVG(%s) AS a%d", v, j))
	}
	q := "SELECT " + strings.Join(sel, ", ") + "\nFROM " + p.t("rows") + " r"
	if len(joins) > 0 {
		q += "\n" + strings.Join(joins, "\n")
	}
	q += fmt.Sprintf("\nGROUP BY r.k%d", e)
	return p.create(p.coef(e, s), q)
}

// change writes, for effect e, the largest change of each column's values
// between sweeps s-1 and s.
func (p *sqlPlan) change(e, s int) string {
	var sel []string
	for j, c := range p.cols {
		if c.src != "" {
			sel = append(sel, fmt.Sprintf("MAX(ABS(n.a%d - o.a%d)) AS a%d", j, j, j))
		}
	}
	q := fmt.Sprintf("SELECT %s\nFROM %s n JOIN %s o ON n.k%d = o.k%d", strings.Join(sel, ", "), p.coef(e, s), p.coef(e, s-1), e, e)
	return p.create(p.t(fmt.Sprintf("chg%d_%d", e, s)), q)
}

// pairs lists the pairs of effects whose connected components the plan
// labels: the first two (their redundant levels), and, with three or more
// effects and clusters, every pair (the rank of the effects nested in a
// cluster is counted from the first two nested ones, as Build counts it).
func (p *sqlPlan) pairs() [][2]int {
	switch {
	case len(p.fes) < 2:
		return nil
	case len(p.fes) == 2 || len(p.cls) == 0:
		return [][2]int{{0, 1}}
	}
	var out [][2]int
	for a := range p.fes {
		for b := a + 1; b < len(p.fes); b++ {
			out = append(out, [2]int{a, b})
		}
	}
	return out
}

// pairName tags the tables of a pair of effects.
func pairName(pr [2]int) string { return fmt.Sprintf("%d_%d", pr[0], pr[1]) }

// labelTable names the labels of the first effect of pair pr at step t.
func (p *sqlPlan) labelTable(pr [2]int, t int) string {
	return p.t(fmt.Sprintf("la%s_%d", pairName(pr), t))
}

// movedTable names the count of labels that moved at step t.
func (p *sqlPlan) movedTable(pr [2]int, t int) string {
	return p.t(fmt.Sprintf("mv%s_%d", pairName(pr), t))
}

// edges writes the distinct pairs of levels of the effects of pr, and the
// first labelling of the first effect's levels (the smallest level of the
// second effect each meets).
func (p *sqlPlan) edges(pr [2]int) []string {
	a, b := pr[0], pr[1]
	e := p.t("edge" + pairName(pr))
	return []string{
		p.create(e, fmt.Sprintf("SELECT DISTINCT k%d AS ka, k%d AS kb FROM %s", a, b, p.t("rows"))),
		p.create(p.labelTable(pr, 0), "SELECT ka, MIN(kb) AS lab FROM "+e+" GROUP BY ka"),
	}
}

// propagate writes step t of label propagation over the edges of pr: each
// level of the second effect takes the smallest label of its first-effect
// levels, then each first-effect level the smallest of its second-effect
// levels'. At the fixed point each connected component carries one label
// (its smallest second-effect level).
func (p *sqlPlan) propagate(pr [2]int, t int) []string {
	e := p.t("edge" + pairName(pr))
	lb := p.t(fmt.Sprintf("lb%s_%d", pairName(pr), t))
	return []string{
		p.create(lb, fmt.Sprintf("SELECT e.kb, MIN(l.lab) AS lab FROM %s e JOIN %s l ON e.ka = l.ka GROUP BY e.kb", e, p.labelTable(pr, t-1))),
		p.create(p.labelTable(pr, t), fmt.Sprintf("SELECT e.ka, MIN(l.lab) AS lab FROM %s e JOIN %s l ON e.kb = l.kb GROUP BY e.ka", e, lb)),
		p.create(p.movedTable(pr, t), fmt.Sprintf("SELECT COUNT(*) AS n FROM %s n JOIN %s o ON n.ka = o.ka WHERE n.lab <> o.lab", p.labelTable(pr, t), p.labelTable(pr, t-1))),
	}
}

// nested writes, for clustering dimension d and effect e, the number of
// e's levels whose rows fall in more than one cluster (0: e is nested in
// the dimension).
func (p *sqlPlan) nested(d, e int) string {
	var conds []string
	for _, g := range p.dims()[d] {
		conds = append(conds, fmt.Sprintf("MIN(%s) < MAX(%s)", g, g))
	}
	q := fmt.Sprintf("SELECT COUNT(*) AS n FROM (SELECT k%d FROM %s GROUP BY k%d HAVING %s) AS x", e, p.t("rows"), e, strings.Join(conds, " OR "))
	return p.create(p.t(fmt.Sprintf("nest%d_%d", d, e)), q)
}

// residuals writes the used rows with the effects' values of sweep s
// taken off each column.
func (p *sqlPlan) residuals(s int) string {
	var sel, joins []string
	for j, c := range p.cols {
		if c.src == "" {
			continue
		}
		v := fmt.Sprintf("r.c%d", j)
		for f := range p.fes {
			v += fmt.Sprintf(" - x%d.a%d", f, j)
		}
		sel = append(sel, v+fmt.Sprintf(" AS c%d", j))
	}
	for d := range p.cls {
		sel = append(sel, fmt.Sprintf("r.g%d", d))
	}
	if p.qcol != "" {
		sel = append(sel, "r.lq", "r.lp")
	}
	for f := range p.fes {
		joins = append(joins, fmt.Sprintf("JOIN %s x%d ON r.k%d = x%d.k%d", p.coef(f, s), f, f, f, f))
	}
	return p.create(p.t("res"), "SELECT "+strings.Join(sel, ", ")+"\nFROM "+p.t("rows")+" r\n"+strings.Join(joins, "\n"))
}

// shape writes the mean and standard deviation (1 when a column is
// constant) of each column of rel, the centre and scale of the fourth
// sums.
func (p *sqlPlan) shape(rel string) string {
	var sel []string
	for j, c := range p.cols {
		if len(p.fes) == 0 && c.src == "" {
			sel = append(sel, fmt.Sprintf("CAST(1 AS %s) AS m%d, CAST(1 AS %s) AS d%d", dbl, j, dbl, j))
			continue
		}
		sel = append(sel, fmt.Sprintf("AVG(c%d) AS m%d", j, j),
			fmt.Sprintf("CASE WHEN STDDEV_POP(c%d) > 0 THEN STDDEV_POP(c%d) ELSE 1 END AS d%d", j, j, j))
	}
	return p.create(p.t("shape"), "SELECT "+strings.Join(sel, ", ")+"\nFROM "+rel)
}

// fourth writes the fourth-order sums of the basis [1, b_1, …, b_K],
// b_j = (c_j - m_j)/d_j, in the order of ivcore.FourthIndex.
func (p *sqlPlan) fourth(rel string) string {
	k := len(p.cols)
	var inner []string
	for j, c := range p.cols {
		if len(p.fes) == 0 && c.src == "" {
			inner = append(inner, fmt.Sprintf("CAST(0 AS %s) AS b%d", dbl, j+1))
			continue
		}
		inner = append(inner, fmt.Sprintf("(r.c%d - s.m%d) / s.d%d AS b%d", j, j, j, j+1))
	}
	var sel []string
	for _, t := range fourthTerms(k + 1) {
		var f []string
		for _, x := range t {
			if x > 0 {
				f = append(f, fmt.Sprintf("b%d", x))
			}
		}
		v := "COUNT(*)"
		if len(f) > 0 {
			v = "SUM(" + strings.Join(f, " * ") + ")"
		}
		sel = append(sel, fmt.Sprintf("%s AS q%d", v, ivcore.FourthIndex(t[0], t[1], t[2], t[3])))
	}
	q := "SELECT " + strings.Join(sel, ", ") + "\nFROM (SELECT " + strings.Join(inner, ", ") + "\n  FROM " + rel + " r CROSS JOIN " + p.t("shape") + " s) AS b"
	return p.create(p.t("four"), q)
}

// fourthTerms lists the index tuples p ≤ q ≤ r ≤ s below k.
func fourthTerms(k int) [][4]int {
	var out [][4]int
	for s := 0; s < k; s++ {
		for r := 0; r <= s; r++ {
			for q := 0; q <= r; q++ {
				for pp := 0; pp <= q; pp++ {
					out = append(out, [4]int{pp, q, r, s})
				}
			}
		}
	}
	return out
}
