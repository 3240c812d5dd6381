package demand

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"sync"
)

// PanelKeys names the unit and time columns that lag and diff work with.
// Either may be empty when the expression calls neither.
//
// Within each unit, rows are ordered by time. When the time column is
// numeric (a year, a week counter), lag(x, k) on a row with time t is the
// value of x on the row of the same unit with time exactly t - k, and
// missing when that period is absent from the data; so gaps in an
// unbalanced panel give missing values rather than a shifted period. A
// numeric time must therefore count periods in steps of 1 (use 2024 or a
// week number, not 202401). When the time column is text, its values are
// sorted as strings (use labels that sort in time order, such as
// 2024-03-01 or 2024-W09) and lag(x, k) is the value k positions earlier in
// the unit's own sorted rows. Rows with a missing unit or time get a
// missing lag. Two rows with the same unit and time are an error wrapping
// ErrDuplicateKey.
type PanelKeys struct {
	Unit, Time string
}

// EvalFloat evaluates e on every row of p and returns a new slice of p.N
// values, NaN where the result is missing. A condition gives 1, 0 or NaN
// (see Expr). Errors are *ExprError pointing at the part of the
// expression concerned; they wrap ErrUnknownColumn (as
// *UnknownColumnError), ErrNotNumeric, ErrNonPositiveLog, ErrDivByZero,
// ErrDomain or ErrDuplicateKey when one of those is the cause.
func (e *Expr) EvalFloat(p *Panel, keys PanelKeys) ([]float64, error) {
	ev := &evaluator{e: e, p: p, keys: keys}
	k, err := ev.check(e.root)
	if err != nil {
		return nil, err
	}
	if k == kindText {
		return nil, ev.errAt(e.root, "the expression gives text, not a number; compare it with == or != to make a condition", nil)
	}
	v, owned, err := ev.eval(e.root)
	if err != nil {
		return nil, err
	}
	if !owned {
		v = append([]float64(nil), v...)
	}
	return v, nil
}

// EvalMask evaluates the condition e on every row of p, for --where. A
// row is true only when the condition is true; a condition that is missing
// on a row (a comparison with a missing value, see Expr) is false. An
// expression that gives a number rather than a condition is an error.
func (e *Expr) EvalMask(p *Panel, keys PanelKeys) ([]bool, error) {
	v, err := e.evalCond(p, keys)
	if err != nil {
		return nil, err
	}
	mask := make([]bool, len(v))
	for i, x := range v {
		mask[i] = x == 1
	}
	return mask, nil
}

func (e *Expr) evalCond(p *Panel, keys PanelKeys) ([]float64, error) {
	ev := &evaluator{e: e, p: p, keys: keys}
	k, err := ev.check(e.root)
	if err != nil {
		return nil, err
	}
	if k != kindBool {
		return nil, ev.errAt(e.root, fmt.Sprintf("a filter needs a condition such as units > 0 or product == \"Nitro Can 250ml\", but %s gives a %s", e.root, k), nil)
	}
	v, _, err := ev.eval(e.root)
	return v, err
}

// Derive evaluates e on p and adds the result to p as the numeric column
// name. It is an error if p already has a column of that name: derived
// columns never replace source columns or earlier derived ones.
func Derive(p *Panel, name string, e *Expr, keys PanelKeys) error {
	if name == "" {
		return fmt.Errorf("the derived column %s needs a name", e.src)
	}
	if p.Has(name) {
		return fmt.Errorf("%s already has a column named %q; choose another name for the derived column, such as %s_2", sourceName(p), name, name)
	}
	v, err := e.EvalFloat(p, keys)
	if err != nil {
		return err
	}
	p.AddNum(name, v)
	return nil
}

// Filter returns a new panel holding the rows of p where the condition e
// is true (see EvalMask), and the number of rows dropped. p is not
// modified. It is an error, wrapping ErrEmpty, when no row is kept.
func Filter(p *Panel, e *Expr, keys PanelKeys) (*Panel, int, error) {
	v, err := e.evalCond(p, keys)
	if err != nil {
		return nil, 0, err
	}
	keep := make([]bool, len(v))
	kept, missing := 0, 0
	for i, x := range v {
		keep[i] = x == 1
		if keep[i] {
			kept++
		} else if math.IsNaN(x) {
			missing++
		}
	}
	if kept == 0 && p.N > 0 {
		return nil, 0, fmt.Errorf("no row of %s meets the condition %s (%d false, %d missing): %w",
			sourceName(p), e.root, p.N-missing, missing, ErrEmpty)
	}
	return p.Subset(keep), p.N - kept, nil
}

func sourceName(p *Panel) string {
	if p.Source == "" {
		return "the panel"
	}
	return p.Source
}

// vkind is the type of a value: number, condition or text.
type vkind uint8

const (
	kindNum vkind = iota
	kindBool
	kindText
)

func (k vkind) String() string {
	return [...]string{"number", "condition", "text"}[k]
}

// evaluator holds the state of one evaluation of an expression on a panel:
// a pool of row buffers and the lag indexes built so far.
type evaluator struct {
	e     *Expr
	p     *Panel
	keys  PanelKeys
	free  [][]float64
	order *panelOrder
	lags  map[int][]int32
	parts []badRows // per-chunk records of rows without a finite result
}

func (ev *evaluator) errAt(n *node, msg string, cause error) error {
	return &ExprError{Src: ev.e.src, Pos: n.pos, Msg: msg, Err: cause}
}

// get returns a buffer of p.N values from the pool; its contents are
// arbitrary.
func (ev *evaluator) get() []float64 {
	if k := len(ev.free); k > 0 {
		v := ev.free[k-1]
		ev.free = ev.free[:k-1]
		return v
	}
	return make([]float64, ev.p.N)
}

func (ev *evaluator) put(v []float64) { ev.free = append(ev.free, v) }

// check types the tree against the panel's columns before any row is
// computed, so that mistakes are reported at their place in the
// expression.
func (ev *evaluator) check(n *node) (vkind, error) {
	switch n.kind {
	case nodeNum:
		return kindNum, nil
	case nodeStr:
		return kindText, nil
	case nodeCol:
		if _, ok := ev.p.Num[n.str]; ok {
			return kindNum, nil
		}
		if _, ok := ev.p.Text[n.str]; ok {
			return kindText, nil
		}
		err := ev.p.unknown(n.str)
		return 0, ev.errAt(n, err.Error(), err)
	case nodeUnary:
		k, err := ev.check(n.x)
		if err != nil {
			return 0, err
		}
		if n.op == tNot {
			return kindBool, ev.needCond(n, n.x, k)
		}
		return kindNum, ev.needNumber(n, n.x, k)
	case nodeCall:
		k, err := ev.check(n.x)
		if err != nil {
			return 0, err
		}
		if n.fn == fnLag || n.fn == fnDiff {
			if ev.keys.Unit == "" || ev.keys.Time == "" {
				missing := "--unit and --time"
				if ev.keys.Unit != "" {
					missing = "--time"
				} else if ev.keys.Time != "" {
					missing = "--unit"
				}
				return 0, ev.errAt(n, fmt.Sprintf("%s works within each unit ordered by time: set %s (for example --unit store --time week)", n.str, missing), nil)
			}
		}
		return kindNum, ev.needNumber(n, n.x, k)
	}
	// nodeBinary
	kx, err := ev.check(n.x)
	if err != nil {
		return 0, err
	}
	ky, err := ev.check(n.y)
	if err != nil {
		return 0, err
	}
	switch {
	case n.op == tAnd || n.op == tOr:
		if err := ev.needCond(n, n.x, kx); err != nil {
			return 0, err
		}
		return kindBool, ev.needCond(n, n.y, ky)
	case isCmp(n.op):
		if kx == kindText || ky == kindText {
			return kindBool, ev.checkTextCmp(n, kx, ky)
		}
		return kindBool, nil
	}
	if err := ev.needNumber(n, n.x, kx); err != nil {
		return 0, err
	}
	return kindNum, ev.needNumber(n, n.y, ky)
}

// needNumber checks that operand x of parent, of kind k, can be used as a
// number (conditions count as 0/1).
func (ev *evaluator) needNumber(parent, x *node, k vkind) error {
	if k != kindText {
		return nil
	}
	if x.kind == nodeStr {
		return ev.errAt(x, fmt.Sprintf("the string %s is used as a number; strings can only be compared with a text column using == or !=", quoteStr(x.str)), nil)
	}
	if x.kind == nodeCol {
		_, err := ev.p.Float(x.str)
		var nn *NotNumericError
		if errors.As(err, &nn) {
			msg := err.Error()
			if nn.NumericCells == 0 || nn.Cell.Line == 0 {
				example := "..."
				if lv := ev.p.Text[x.str].Levels; len(lv) > 0 {
					example = lv[0]
				}
				msg += fmt.Sprintf("; in an expression, a text column can only be compared with == or != to a string, as in %s == %s", colName(x.str), quoteStr(example))
			}
			return ev.errAt(x, msg, err)
		}
	}
	return ev.errAt(parent, fmt.Sprintf("%s gives text, which cannot be used as a number here", x), nil)
}

// needCond checks that operand x of a logical operator is a condition.
func (ev *evaluator) needCond(parent, x *node, k vkind) error {
	if k == kindBool {
		return nil
	}
	return ev.errAt(parent, fmt.Sprintf("%s needs a condition, such as units > 0, but %s is a %s", tokText[parent.op], x, k), nil)
}

// checkTextCmp checks a comparison with a text operand: both sides text,
// == or != only, and a string compared with a column must be one of its
// values.
func (ev *evaluator) checkTextCmp(n *node, kx, ky vkind) error {
	if n.op != tEq && n.op != tNe {
		return ev.errAt(n, fmt.Sprintf("text can only be compared with == or !=, not %s", tokText[n.op]), nil)
	}
	if kx != ky {
		num, txt := n.x, n.y
		if kx == kindText {
			num, txt = n.y, n.x
		}
		if txt.kind == nodeStr && num.kind == nodeCol {
			return ev.errAt(txt, fmt.Sprintf("column %s is numeric; compare it with a number, not with the string %s", colName(num.str), quoteStr(txt.str)), nil)
		}
		return ev.errAt(n, fmt.Sprintf("cannot compare the %s %s with the text %s", kindName(ev, num), num, txt), nil)
	}
	col, lit := n.x, n.y
	if col.kind == nodeStr {
		col, lit = n.y, n.x
	}
	if col.kind != nodeCol || lit.kind != nodeStr {
		return nil
	}
	levels := ev.p.Text[col.str].Levels
	if slices.Contains(levels, lit.str) {
		return nil
	}
	msg := fmt.Sprintf("no row of column %s holds the value %s", colName(col.str), quoteStr(lit.str))
	if c := closeNames(lit.str, levels, 3); len(c) > 0 {
		for i := range c {
			c[i] = quoteStr(c[i])
		}
		msg += "; closest values: " + strings.Join(c, ", ")
	}
	return ev.errAt(lit, msg, nil)
}

func kindName(ev *evaluator, n *node) string {
	k, _ := ev.check(n)
	return k.String()
}

// eval computes a number or condition node for every row. owned reports
// whether v is a pool buffer the caller may overwrite; otherwise v belongs
// to the panel and must not be modified.
func (ev *evaluator) eval(n *node) (v []float64, owned bool, err error) {
	switch n.kind {
	case nodeNum:
		v = ev.get()
		for i := range v {
			v[i] = n.num
		}
		return v, true, nil
	case nodeCol:
		return ev.p.Num[n.str], false, nil
	case nodeUnary:
		return ev.unary(n)
	case nodeCall:
		if n.fn == fnLag || n.fn == fnDiff {
			return ev.lag(n)
		}
		return ev.call(n)
	}
	if isCmp(n.op) && (n.x.kind == nodeStr || n.y.kind == nodeStr || ev.isTextCol(n.x) || ev.isTextCol(n.y)) {
		return ev.textCmp(n), true, nil
	}
	return ev.binary(n)
}

func (ev *evaluator) isTextCol(n *node) bool {
	if n.kind != nodeCol {
		return false
	}
	_, ok := ev.p.Text[n.str]
	return ok
}

// operand evaluates x and returns it with a destination buffer for the
// result of its parent: x's own buffer when it is owned.
func (ev *evaluator) operand(x *node) (v, dst []float64, err error) {
	v, owned, err := ev.eval(x)
	if err != nil {
		return nil, nil, err
	}
	if owned {
		return v, v, nil
	}
	return v, ev.get(), nil
}

func (ev *evaluator) unary(n *node) ([]float64, bool, error) {
	a, dst, err := ev.operand(n.x)
	if err != nil {
		return nil, false, err
	}
	if n.op == tMinus {
		for i, x := range a {
			dst[i] = -x
		}
		return dst, true, nil
	}
	for i, x := range a {
		dst[i] = 1 - x // NaN stays NaN
	}
	return dst, true, nil
}

// bad reports whether r is not a finite number although no input was
// missing.
func bad(r, x, y float64) bool {
	return math.IsInf(r, 0) || (r != r && x == x && y == y)
}

// badRows records the rows of one chunk where an operation gave no finite
// result: their count, the first of them and its inputs.
type badRows struct {
	cnt, first int
	x, y       float64
}

func (b *badRows) note(i int, x, y float64) {
	if b.cnt == 0 {
		b.first, b.x, b.y = i, x, y
	}
	b.cnt++
}

// mergeBad sums the chunks' counts and keeps the earliest row.
func mergeBad(parts []badRows) badRows {
	var m badRows
	for _, b := range parts {
		if b.cnt > 0 && m.cnt == 0 {
			m = b
		} else {
			m.cnt += b.cnt
		}
	}
	return m
}

// parallelMin is the number of rows from which row loops are split
// across runtime.NumCPU() goroutines.
const parallelMin = 1 << 15

// forChunks calls f on consecutive ranges [lo, hi) covering [0, n), one
// goroutine each when n is large, and returns the number of chunks; c
// numbers the chunk from 0. It allocates per call, never per row.
func forChunks(n int, parts []badRows, f func(c, lo, hi int)) int {
	nc := 1
	if n >= parallelMin {
		nc = min(len(parts), n/(parallelMin/2))
	}
	if nc <= 1 {
		f(0, 0, n)
		return 1
	}
	size := (n + nc - 1) / nc
	var wg sync.WaitGroup
	for c := range nc {
		lo, hi := c*size, min(n, (c+1)*size)
		wg.Go(func() { f(c, lo, hi) })
	}
	wg.Wait()
	return nc
}

// chunkState returns zeroed per-chunk records, one per CPU.
func (ev *evaluator) chunkState() []badRows {
	if ev.parts == nil {
		ev.parts = make([]badRows, runtime.NumCPU())
	}
	clear(ev.parts)
	return ev.parts
}

func (ev *evaluator) binary(n *node) ([]float64, bool, error) {
	a, ao, err := ev.eval(n.x)
	if err != nil {
		return nil, false, err
	}
	b, bo, err := ev.eval(n.y)
	if err != nil {
		return nil, false, err
	}
	if n.op == tSlash {
		if cnt, first := countRows(a, b, func(x, y float64) bool { return y == 0 && x == x }); cnt > 0 {
			return nil, false, ev.errAt(n, fmt.Sprintf("%s: %s by zero (first: %s, where %s = 0); remove those rows from the input file or divide by a column that is never zero",
				n, rowsVerb(cnt, "divides", "divide"), ev.where(first), n.y), ErrDivByZero)
		}
	}
	var dst []float64
	switch {
	case ao:
		dst = a
	case bo:
		dst = b
	default:
		dst = ev.get()
	}
	parts := ev.chunkState()
	nc := forChunks(len(dst), parts, func(c, lo, hi int) {
		binaryRows(n.op, a[lo:hi], b[lo:hi], dst[lo:hi], lo, &parts[c])
	})
	if ao && bo {
		ev.put(b)
	}
	if m := mergeBad(parts[:nc]); m.cnt > 0 {
		return nil, false, ev.errAt(n, fmt.Sprintf("%s: %s no finite result (first: %s, where %s = %g and %s = %g)",
			n, rowsVerb(m.cnt, "gives", "give"), ev.where(m.first), n.x, m.x, n.y, m.y), ErrDomain)
	}
	return dst, true, nil
}

// binaryRows applies op row by row; dst may alias a or b. Rows with no
// finite result from non-missing inputs are noted in bad, with row
// numbers offset by off.
func binaryRows(op tokKind, a, b, dst []float64, off int, bd *badRows) {
	switch op {
	case tPlus:
		for i := range dst {
			x, y := a[i], b[i]
			r := x + y
			if bad(r, x, y) {
				bd.note(off+i, x, y)
			}
			dst[i] = r
		}
	case tMinus:
		for i := range dst {
			x, y := a[i], b[i]
			r := x - y
			if bad(r, x, y) {
				bd.note(off+i, x, y)
			}
			dst[i] = r
		}
	case tStar:
		for i := range dst {
			x, y := a[i], b[i]
			r := x * y
			if bad(r, x, y) {
				bd.note(off+i, x, y)
			}
			dst[i] = r
		}
	case tSlash:
		for i := range dst {
			x, y := a[i], b[i]
			r := x / y
			if bad(r, x, y) {
				bd.note(off+i, x, y)
			}
			dst[i] = r
		}
	case tCaret:
		for i := range dst {
			x, y := a[i], b[i]
			r := math.NaN() // math.Pow(NaN, 0) is 1; missing must stay missing
			if x == x && y == y {
				r = math.Pow(x, y)
				if bad(r, x, y) {
					bd.note(off+i, x, y)
				}
			}
			dst[i] = r
		}
	case tAnd:
		for i := range dst {
			x, y := a[i], b[i]
			switch {
			case x == 0 || y == 0:
				dst[i] = 0
			case x != x || y != y:
				dst[i] = math.NaN()
			default:
				dst[i] = 1
			}
		}
	case tOr:
		for i := range dst {
			x, y := a[i], b[i]
			switch {
			case x == 1 || y == 1:
				dst[i] = 1
			case x != x || y != y:
				dst[i] = math.NaN()
			default:
				dst[i] = 0
			}
		}
	default: // numeric comparison
		cmpRows(op, a, b, dst)
	}
}

// cmpRows writes 1, 0 or NaN (either side missing) for a numeric
// comparison.
func cmpRows(op tokKind, a, b, dst []float64) {
	for i := range dst {
		x, y := a[i], b[i]
		var t bool
		switch op {
		case tEq:
			t = x == y
		case tNe:
			t = x != y
		case tLt:
			t = x < y
		case tLe:
			t = x <= y
		case tGt:
			t = x > y
		case tGe:
			t = x >= y
		}
		switch {
		case x != x || y != y:
			dst[i] = math.NaN()
		case t:
			dst[i] = 1
		default:
			dst[i] = 0
		}
	}
}

// textOperand is one side of a text comparison: a column (codes into
// levels, -1 missing) or a string literal.
type textOperand struct {
	codes  []int32
	levels []string
	lit    string
	isLit  bool
}

func (ev *evaluator) textOperand(n *node) textOperand {
	if n.kind == nodeStr {
		return textOperand{lit: n.str, isLit: true}
	}
	t := ev.p.Text[n.str]
	return textOperand{codes: t.Codes, levels: t.Levels}
}

// textCmp compares two text operands (checked to be == or !=) by their
// strings.
func (ev *evaluator) textCmp(n *node) []float64 {
	a, b := ev.textOperand(n.x), ev.textOperand(n.y)
	if a.isLit && !b.isLit {
		a, b = b, a
	}
	eq, ne := 1.0, 0.0
	if n.op == tNe {
		eq, ne = 0, 1
	}
	dst := ev.get()
	switch {
	case a.isLit: // both literals
		r := ne
		if a.lit == b.lit {
			r = eq
		}
		for i := range dst {
			dst[i] = r
		}
	case b.isLit:
		want := int32(slices.Index(a.levels, b.lit))
		for i, c := range a.codes {
			switch {
			case c < 0:
				dst[i] = math.NaN()
			case c == want:
				dst[i] = eq
			default:
				dst[i] = ne
			}
		}
	default: // two columns: map a's levels to b's codes
		idx := make(map[string]int32, len(b.levels))
		for j, s := range b.levels {
			idx[s] = int32(j)
		}
		m := make([]int32, len(a.levels))
		for j, s := range a.levels {
			if k, ok := idx[s]; ok {
				m[j] = k
			} else {
				m[j] = -1
			}
		}
		for i, c := range a.codes {
			d := b.codes[i]
			switch {
			case c < 0 || d < 0:
				dst[i] = math.NaN()
			case m[c] == d:
				dst[i] = eq
			default:
				dst[i] = ne
			}
		}
	}
	return dst
}

func (ev *evaluator) call(n *node) ([]float64, bool, error) {
	a, dst, err := ev.operand(n.x)
	if err != nil {
		return nil, false, err
	}
	switch n.fn {
	case fnLog:
		if cnt, first := countRows(a, nil, func(x, _ float64) bool { return x <= 0 }); cnt > 0 {
			return nil, false, ev.errAt(n, fmt.Sprintf("%s: %s a zero or negative value under the log (first: %s, where %s = %g); "+
				"rows with zero or negative values (such as periods with zero sales) cannot enter a log: remove them from the input file, "+
				"or take the log of a column that is positive on every row; write log(x + 1) only if that is the model you mean "+
				"(--where filters rows after --derive, so it cannot remove them first)",
				n, rowsVerb(cnt, "has", "have"), ev.where(first), n.x, a[first]), ErrNonPositiveLog)
		}
	case fnSqrt:
		if cnt, first := countRows(a, nil, func(x, _ float64) bool { return x < 0 }); cnt > 0 {
			return nil, false, ev.errAt(n, fmt.Sprintf("%s: %s a negative value under the square root (first: %s, where %s = %g); remove those rows from the input file or take the root of a column that is never negative",
				n, rowsVerb(cnt, "has", "have"), ev.where(first), n.x, a[first]), ErrDomain)
		}
	}
	parts := ev.chunkState()
	nc := forChunks(len(dst), parts, func(c, lo, hi int) {
		callRows(n.fn, a[lo:hi], dst[lo:hi], lo, &parts[c])
	})
	// The domains of log and sqrt were checked above, so only an overflow
	// (or an infinite input) is left.
	if m := mergeBad(parts[:nc]); m.cnt > 0 {
		return nil, false, ev.errAt(n, fmt.Sprintf("%s: %s no finite result (first: %s, where %s = %g)",
			n, rowsVerb(m.cnt, "gives", "give"), ev.where(m.first), n.x, m.x), ErrDomain)
	}
	return dst, true, nil
}

// callRows applies a one-argument function row by row; dst may alias a.
func callRows(fn funcID, a, dst []float64, off int, bd *badRows) {
	var f func(float64) float64
	switch fn {
	case fnLog:
		f = math.Log
	case fnSqrt:
		f = math.Sqrt
	case fnExp:
		f = math.Exp
	case fnAbs:
		f = math.Abs
	}
	for i, x := range a {
		r := f(x)
		if math.IsInf(r, 0) {
			bd.note(off+i, x, x)
		}
		dst[i] = r
	}
}

// countRows counts the rows where f(a[i], b[i]) holds (b may be nil) and
// returns the first of them.
func countRows(a, b []float64, f func(x, y float64) bool) (cnt, first int) {
	first = -1
	for i, x := range a {
		y := 0.0
		if b != nil {
			y = b[i]
		}
		if f(x, y) {
			if cnt == 0 {
				first = i
			}
			cnt++
		}
	}
	return cnt, first
}

func rowsVerb(n int, one, many string) string {
	if n == 1 {
		return "1 row " + one
	}
	return strconv.Itoa(n) + " rows " + many
}

// where names row i by its source line.
func (ev *evaluator) where(i int) string {
	if ev.p.Source == "" {
		return fmt.Sprintf("line %d", ev.p.Line(i))
	}
	return fmt.Sprintf("line %d of %s", ev.p.Line(i), ev.p.Source)
}

// lag computes lag(x, k) or diff(x, k) = x - lag(x, k).
func (ev *evaluator) lag(n *node) ([]float64, bool, error) {
	prev, err := ev.lagIndex(n)
	if err != nil {
		return nil, false, err
	}
	v, owned, err := ev.eval(n.x)
	if err != nil {
		return nil, false, err
	}
	dst := ev.get()
	if n.fn == fnLag {
		for i, j := range prev {
			if j < 0 {
				dst[i] = math.NaN()
			} else {
				dst[i] = v[j]
			}
		}
	} else {
		cnt, first := 0, -1
		for i, j := range prev {
			if j < 0 {
				dst[i] = math.NaN()
				continue
			}
			x, y := v[i], v[j]
			r := x - y
			if bad(r, x, y) {
				if cnt == 0 {
					first = i
				}
				cnt++
			}
			dst[i] = r
		}
		if cnt > 0 {
			return nil, false, ev.errAt(n, fmt.Sprintf("%s: %s no finite result (first: %s)",
				n, rowsVerb(cnt, "gives", "give"), ev.where(first)), ErrDomain)
		}
	}
	if owned {
		ev.put(v)
	}
	return dst, true, nil
}

// panelOrder is the sort of the panel's rows by unit and time.
type panelOrder struct {
	order   []int32   // rows with unit and time present, sorted by (unit, time)
	unit    []int32   // unit code per row, -1 missing
	numTime []float64 // time per row when the time column is numeric
	rank    []int32   // rank of the time label per row when it is text, -1 missing
}

// lagIndex returns, for every row, the row holding the same unit k periods
// earlier, or -1.
func (ev *evaluator) lagIndex(n *node) ([]int32, error) {
	if prev, ok := ev.lags[n.k]; ok {
		return prev, nil
	}
	if ev.order == nil {
		o, err := ev.buildOrder(n)
		if err != nil {
			return nil, err
		}
		ev.order = o
		ev.lags = map[int][]int32{}
	}
	o := ev.order
	prev := make([]int32, ev.p.N)
	for i := range prev {
		prev[i] = -1
	}
	k := n.k
	b := 0 // start of the current unit's block in o.order
	for s, row := range o.order {
		if o.unit[row] != o.unit[o.order[b]] {
			b = s
		}
		if o.numTime != nil {
			target := o.numTime[row] - float64(k)
			// Earliest position in [b, s) whose time is >= target.
			lo, hi := b, s
			for lo < hi {
				m := int(uint(lo+hi) >> 1)
				if o.numTime[o.order[m]] < target {
					lo = m + 1
				} else {
					hi = m
				}
			}
			if lo < s && o.numTime[o.order[lo]] == target {
				prev[row] = o.order[lo]
			}
		} else if s-k >= b {
			prev[row] = o.order[s-k]
		}
	}
	ev.lags[k] = prev
	return prev, nil
}

func (ev *evaluator) buildOrder(n *node) (*panelOrder, error) {
	p, keys := ev.p, ev.keys
	unit, unitLevels, err := p.IDs(keys.Unit)
	if err != nil {
		return nil, ev.errAt(n, fmt.Sprintf("unit column (--unit) for %s: %v", n.str, err), err)
	}
	o := &panelOrder{unit: unit}
	var timeLevels []string
	if x, ok := p.Num[keys.Time]; ok {
		o.numTime = x
	} else if t, ok := p.Text[keys.Time]; ok {
		if t.NumericCells > 0 && t.FirstNonNumber.Line > 0 {
			_, err := p.Float(keys.Time)
			return nil, ev.errAt(n, fmt.Sprintf("time column (--time) for %s looks numeric but has text: %v", n.str, err), err)
		}
		timeLevels = t.Levels
		byName := make([]int32, len(t.Levels))
		for i := range byName {
			byName[i] = int32(i)
		}
		slices.SortFunc(byName, func(a, b int32) int { return strings.Compare(t.Levels[a], t.Levels[b]) })
		rankOf := make([]int32, len(t.Levels))
		for r, l := range byName {
			rankOf[l] = int32(r)
		}
		o.rank = make([]int32, p.N)
		for i, c := range t.Codes {
			o.rank[i] = -1
			if c >= 0 {
				o.rank[i] = rankOf[c]
			}
		}
	} else {
		err := p.unknown(keys.Time)
		return nil, ev.errAt(n, fmt.Sprintf("time column (--time) for %s: %v", n.str, err), err)
	}
	o.order = make([]int32, 0, p.N)
	for i := 0; i < p.N; i++ {
		if unit[i] < 0 || (o.numTime != nil && math.IsNaN(o.numTime[i])) || (o.rank != nil && o.rank[i] < 0) {
			continue
		}
		o.order = append(o.order, int32(i))
	}
	cmpTime := func(a, b int32) int {
		if o.numTime != nil {
			return cmp.Compare(o.numTime[a], o.numTime[b])
		}
		return cmp.Compare(o.rank[a], o.rank[b])
	}
	slices.SortFunc(o.order, func(a, b int32) int {
		if c := cmp.Compare(unit[a], unit[b]); c != 0 {
			return c
		}
		if c := cmpTime(a, b); c != 0 {
			return c
		}
		return cmp.Compare(a, b)
	})
	for s := 1; s < len(o.order); s++ {
		a, b := o.order[s-1], o.order[s]
		if unit[a] != unit[b] || cmpTime(a, b) != 0 {
			continue
		}
		tv := ""
		if o.numTime != nil {
			tv = strconv.FormatFloat(o.numTime[a], 'g', -1, 64)
		} else {
			tv = strconv.Quote(timeLevels[p.Text[keys.Time].Codes[a]])
		}
		uv := unitLevels[unit[a]]
		if _, ok := p.Text[keys.Unit]; ok {
			uv = strconv.Quote(uv)
		}
		return nil, ev.errAt(n, fmt.Sprintf("%s needs at most one row per unit and period, but %s = %s, %s = %s appears on %s and on line %d; check --unit and --time (the unit may need to be finer, such as product by store) or remove the duplicate row",
			n.str, colName(keys.Unit), uv, colName(keys.Time), tv, ev.where(int(a)), p.Line(int(b))), ErrDuplicateKey)
	}
	return o, nil
}
