package demand

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Sentinel causes of expression evaluation errors, for errors.Is.
var (
	// ErrDivByZero: a denominator is zero on some row.
	ErrDivByZero = errors.New("division by zero")
	// ErrDomain: a function or operator has no finite result for a
	// non-missing input (square root of a negative value, overflow, a
	// negative base with a fractional exponent).
	ErrDomain = errors.New("no finite result")
)

// ExprError reports a problem in an expression, at a position of its
// source text. Pos is the 1-based character (not byte) column in Src; a
// position one past the end means the expression ended too early. Err is
// the cause when there is one (ErrUnknownColumn, ErrNonPositiveLog,
// ErrDuplicateKey, ...), for errors.Is and errors.As.
type ExprError struct {
	Src string
	Pos int
	Msg string
	Err error
}

// Error shows the message, then the expression with a caret under Pos.
func (e *ExprError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "char %d of the expression: %s\n    ", e.Pos, e.Msg)
	for _, r := range e.Src {
		switch r {
		case '\t', '\n', '\r':
			r = ' '
		}
		b.WriteRune(r)
	}
	b.WriteString("\n    ")
	if e.Pos > 1 {
		b.WriteString(strings.Repeat(" ", e.Pos-1))
	}
	b.WriteByte('^')
	return b.String()
}

func (e *ExprError) Unwrap() error { return e.Err }

// Expr is a parsed expression of the small language used by
// --derive NAME=EXPR and --where EXPR. The zero value is not usable; make
// one with ParseExpr or ParseDerive. An Expr is not modified by
// evaluation and may be evaluated on many panels.
//
// # Grammar
//
// From lowest to highest precedence:
//
//	expr    = or
//	or      = and { "||" and }                      left-associative
//	and     = cmp { "&&" cmp }                      left-associative
//	cmp     = sum [ ("=="|"!="|"<"|"<="|">"|">=") sum ]   not chained
//	sum     = product { ("+"|"-") product }         left-associative
//	product = unary { ("*"|"/") unary }             left-associative
//	unary   = ("-"|"!") unary | power
//	power   = primary [ "^" unary ]                 right-associative
//	primary = number | column | string | call | "(" expr ")"
//	call    = fn "(" expr ")" | ("lag"|"diff") "(" expr [ "," k ] ")"
//
// So ^ binds tighter than a leading minus (-2^2 is -4), 2^-1 is 0.5, and
// 2^3^2 is 2^9. A comparison cannot be chained: write a < b && b < c.
//
// # Tokens
//
//   - number: 1, 2.5, .5, 1e-3 (no sign; a leading minus is the unary
//     operator). Values beyond the float64 range are rejected.
//   - column: an identifier [A-Za-z_][A-Za-z0-9_.]*, or any name in
//     backquotes, `unit price`, for names with spaces or other characters.
//     A backquoted name cannot contain a backquote. Names are case-sensitive.
//     A function name not followed by "(" is a column name.
//   - string: "Nitro Can 250ml", used to compare text columns. Inside a
//     string, \" stands for a double quote and \\ for a backslash; any
//     other backslash is kept as written.
//   - functions: log (natural), exp, sqrt, abs, lag(x, k), diff(x, k),
//     where k is a whole number from 1 to 1000000 written as a literal;
//     lag(x) and diff(x) mean k = 1. diff(x, k) = x - lag(x, k).
//   - spaces, tabs and newlines between tokens are ignored.
//
// # Values and types
//
// Every value is a number, a condition or a text. Text
// (a text column or a string) may only appear on either side of == or !=,
// against another text; the level strings are compared. A string compared
// with a text column must be one of the column's values (a typo would
// otherwise silently match nothing); the error lists the closest values.
// Comparing text with <, <=, > or >= is an error. A condition (the
// result of a comparison, &&, || or !) counts as 1 (true) or 0 (false)
// inside arithmetic, so --derive 'hot = temp > 25' gives a 0/1 column and
// price * (promo == 1) is allowed. &&, || and ! need conditions on both
// sides; a number is not silently read as a condition.
//
// # Missing values
//
// Missing values (empty cells, NaN) propagate through arithmetic and
// functions. Comparisons use three-valued logic: a comparison with a
// missing side is missing, !missing is missing, false && missing is false,
// true || missing is true, and otherwise && and || with a missing side are
// missing. --where keeps a row only when the condition is true, so a row
// whose condition is missing is dropped. A derived condition gives 1, 0 or
// missing.
//
// Evaluation never invents missing values: a non-missing input that gives
// no finite result (log or sqrt out of domain, division by zero, overflow)
// is an error that names the rows. lag and diff are computed within each
// unit ordered by time (see PanelKeys); they give a missing value where the
// earlier period is absent.
type Expr struct {
	src     string // the text shown in errors (for a derive, NAME=EXPR)
	root    *node
	cols    []string
	panelFn bool
}

// Columns returns the names of the columns the expression reads, each
// once, in order of first appearance. The unit and time columns needed by
// lag and diff are not included (see UsesPanelFunctions).
func (e *Expr) Columns() []string { return append([]string(nil), e.cols...) }

// UsesPanelFunctions reports whether the expression calls lag or diff, and
// so needs the panel's unit and time columns.
func (e *Expr) UsesPanelFunctions() bool { return e.panelFn }

// Src returns the source text the expression was parsed from.
func (e *Expr) Src() string { return e.src }

// String returns the canonical form of the expression: single spaces
// around binary operators, only the parentheses that precedence requires,
// numbers in shortest form, lag(x) for k = 1. Parsing the canonical form
// gives the same tree.
func (e *Expr) String() string { return e.root.String() }

// ParseExpr parses src. A syntax error is an *ExprError pointing at the
// offending character.
func ParseExpr(src string) (*Expr, error) {
	return parseFrom(src, 0)
}

// ParseDerive parses the argument of --derive, NAME=EXPR. NAME must be an
// identifier ([A-Za-z_][A-Za-z0-9_.]*); spaces around it are ignored.
// Errors are *ExprError with positions counted in the whole argument.
func ParseDerive(arg string) (name string, e *Expr, err error) {
	rs := []rune(arg)
	eq := -1
	for i, r := range rs {
		if r == '=' {
			eq = i
			break
		}
	}
	if eq < 0 || (eq+1 < len(rs) && rs[eq+1] == '=') {
		p := len(rs) + 1
		if eq >= 0 {
			p = eq + 1
		}
		return "", nil, &ExprError{Src: arg, Pos: p, Msg: "a derived column is written NAME=EXPR, for example lnq=log(units)"}
	}
	start := 0
	for start < eq && isSpace(rs[start]) {
		start++
	}
	name = strings.TrimSpace(string(rs[:eq]))
	if name == "" {
		return "", nil, &ExprError{Src: arg, Pos: start + 1, Msg: "the new column needs a name before =, for example lnq=log(units)"}
	}
	if !isIdent(name) {
		return "", nil, &ExprError{Src: arg, Pos: start + 1, Msg: fmt.Sprintf("%q cannot name a new column: use letters, digits, _ and ., starting with a letter or _", name)}
	}
	e, err = parseFrom(arg, eq+1)
	if err != nil {
		return "", nil, err
	}
	return name, e, nil
}

// nodeKind tells what a node of the tree is.
type nodeKind uint8

const (
	nodeNum    nodeKind = iota // number literal
	nodeStr                    // string literal
	nodeCol                    // column reference
	nodeUnary                  // - or !
	nodeBinary                 // arithmetic, comparison or logical operator
	nodeCall                   // function call
)

// node is one element of the tree. pos is the 1-based character column of
// the token that defines it (the operator, the function or column name,
// the literal) in Expr.src.
type node struct {
	kind nodeKind
	pos  int
	op   tokKind // for nodeUnary and nodeBinary
	num  float64 // for nodeNum
	str  string  // column name, string literal, or function name
	fn   funcID  // for nodeCall
	k    int     // lag order for lag and diff
	x, y *node   // operands: x for unary and calls, x and y for binary
}

// funcID names a built-in function.
type funcID uint8

const (
	fnLog funcID = iota
	fnExp
	fnSqrt
	fnAbs
	fnLag
	fnDiff
)

var funcNames = []string{fnLog: "log", fnExp: "exp", fnSqrt: "sqrt", fnAbs: "abs", fnLag: "lag", fnDiff: "diff"}

func lookupFunc(name string) (funcID, bool) {
	for i, n := range funcNames {
		if n == name {
			return funcID(i), true
		}
	}
	return 0, false
}

// tokKind is the kind of a lexical token.
type tokKind uint8

const (
	tEOF tokKind = iota
	tNum
	tIdent  // bare identifier
	tQIdent // backquoted name
	tStr
	tLParen
	tRParen
	tComma
	tPlus
	tMinus
	tStar
	tSlash
	tCaret
	tEq
	tNe
	tLt
	tLe
	tGt
	tGe
	tAnd
	tOr
	tNot
)

var tokText = [...]string{
	tEOF: "end of expression", tNum: "number", tIdent: "name", tQIdent: "name", tStr: "string",
	tLParen: "(", tRParen: ")", tComma: ",", tPlus: "+", tMinus: "-", tStar: "*", tSlash: "/", tCaret: "^",
	tEq: "==", tNe: "!=", tLt: "<", tLe: "<=", tGt: ">", tGe: ">=", tAnd: "&&", tOr: "||", tNot: "!",
}

type token struct {
	kind tokKind
	pos  int    // 1-based character column
	text string // as written (for names: the name without backquotes; for strings: the value)
	num  float64
}

func (t token) describe() string {
	switch t.kind {
	case tNum:
		return "number " + t.text
	case tIdent:
		return "name " + t.text
	case tQIdent:
		return "name `" + t.text + "`"
	case tStr:
		return "string " + quoteStr(t.text)
	case tEOF:
		return "the end of the expression"
	}
	return "'" + tokText[t.kind] + "'"
}

func isSpace(r rune) bool { return r == ' ' || r == '\t' || r == '\n' || r == '\r' }

func isIdentStart(r rune) bool { return r == '_' || (r >= 'a' && r <= 'z') || (r >= 'A' && r <= 'Z') }

func isIdentPart(r rune) bool { return isIdentStart(r) || (r >= '0' && r <= '9') || r == '.' }

func isDigit(r rune) bool { return r >= '0' && r <= '9' }

// isIdent reports whether s is a bare identifier.
func isIdent(s string) bool {
	if s == "" {
		return false
	}
	for i, r := range s {
		if i == 0 && !isIdentStart(r) || i > 0 && !isIdentPart(r) {
			return false
		}
	}
	return true
}

// lex splits rs[start:] into tokens. Positions are rune indices in rs plus 1.
func lex(src string, rs []rune, start int) ([]token, error) {
	var toks []token
	errAt := func(i int, msg string) error { return &ExprError{Src: src, Pos: i + 1, Msg: msg} }
	i := start
	for i < len(rs) {
		r := rs[i]
		if isSpace(r) {
			i++
			continue
		}
		begin := i
		switch {
		case isDigit(r) || (r == '.' && i+1 < len(rs) && isDigit(rs[i+1])):
			for i < len(rs) && isDigit(rs[i]) {
				i++
			}
			if i < len(rs) && rs[i] == '.' {
				i++
				for i < len(rs) && isDigit(rs[i]) {
					i++
				}
			}
			if i < len(rs) && (rs[i] == 'e' || rs[i] == 'E') {
				j := i + 1
				if j < len(rs) && (rs[j] == '+' || rs[j] == '-') {
					j++
				}
				if j >= len(rs) || !isDigit(rs[j]) {
					return nil, errAt(begin, fmt.Sprintf("malformed number %q: an exponent needs digits, as in 1e-3", string(rs[begin:j])))
				}
				for j < len(rs) && isDigit(rs[j]) {
					j++
				}
				i = j
			}
			text := string(rs[begin:i])
			v, err := strconv.ParseFloat(text, 64)
			if err != nil || math.IsInf(v, 0) {
				return nil, errAt(begin, fmt.Sprintf("number %s is out of range", text))
			}
			if i < len(rs) && isIdentStart(rs[i]) {
				return nil, errAt(i, fmt.Sprintf("a name cannot follow the number %s directly; is an operator missing (2 * x for a product)?", text))
			}
			toks = append(toks, token{kind: tNum, pos: begin + 1, text: text, num: v})
		case isIdentStart(r):
			for i < len(rs) && isIdentPart(rs[i]) {
				i++
			}
			toks = append(toks, token{kind: tIdent, pos: begin + 1, text: string(rs[begin:i])})
		case r == '`':
			i++
			for i < len(rs) && rs[i] != '`' {
				i++
			}
			if i >= len(rs) {
				return nil, errAt(begin, "backquoted column name is not closed: add a closing `")
			}
			if i == begin+1 {
				return nil, errAt(begin, "empty column name ``")
			}
			toks = append(toks, token{kind: tQIdent, pos: begin + 1, text: string(rs[begin+1 : i])})
			i++
		case r == '"':
			var b strings.Builder
			i++
			for i < len(rs) && rs[i] != '"' {
				if rs[i] == '\\' && i+1 < len(rs) && (rs[i+1] == '"' || rs[i+1] == '\\') {
					i++
				}
				b.WriteRune(rs[i])
				i++
			}
			if i >= len(rs) {
				return nil, errAt(begin, `string is not closed: add a closing "`)
			}
			i++
			toks = append(toks, token{kind: tStr, pos: begin + 1, text: b.String()})
		default:
			next := rune(0)
			if i+1 < len(rs) {
				next = rs[i+1]
			}
			kind, width := tEOF, 1
			switch r {
			case '(':
				kind = tLParen
			case ')':
				kind = tRParen
			case ',':
				kind = tComma
			case '+':
				kind = tPlus
			case '-':
				kind = tMinus
			case '*':
				kind = tStar
			case '/':
				kind = tSlash
			case '^':
				kind = tCaret
			case '<':
				kind = tLt
				if next == '=' {
					kind, width = tLe, 2
				}
			case '>':
				kind = tGt
				if next == '=' {
					kind, width = tGe, 2
				}
			case '!':
				kind = tNot
				if next == '=' {
					kind, width = tNe, 2
				}
			case '=':
				if next != '=' {
					return nil, errAt(i, "a single = is not an operator: compare with ==")
				}
				kind, width = tEq, 2
			case '&':
				if next != '&' {
					return nil, errAt(i, "a single & is not an operator: write && for and")
				}
				kind, width = tAnd, 2
			case '|':
				if next != '|' {
					return nil, errAt(i, "a single | is not an operator: write || for or")
				}
				kind, width = tOr, 2
			case '\'':
				return nil, errAt(i, `strings are written in double quotes, "like this"; column names with spaces in backquotes, `+"`like this`")
			default:
				return nil, errAt(i, fmt.Sprintf("unexpected character %q; put column names with spaces or other characters in backquotes, as in `unit price`", r))
			}
			toks = append(toks, token{kind: kind, pos: i + 1})
			i += width
		}
	}
	toks = append(toks, token{kind: tEOF, pos: len(rs) + 1})
	return toks, nil
}

// maxDepth bounds the nesting of the tree so that hostile input cannot
// exhaust the stack.
const maxDepth = 200

type parser struct {
	src   string
	toks  []token
	i     int
	depth int
}

func parseFrom(src string, start int) (*Expr, error) {
	rs := []rune(src)
	toks, err := lex(src, rs, start)
	if err != nil {
		return nil, err
	}
	p := &parser{src: src, toks: toks}
	if p.peek().kind == tEOF {
		return nil, p.errAt(p.peek(), "the expression is empty")
	}
	root, err := p.parseOr()
	if err != nil {
		return nil, err
	}
	if t := p.peek(); t.kind != tEOF {
		msg := fmt.Sprintf("unexpected %s after a complete expression; is an operator missing?", t.describe())
		if t.kind == tRParen {
			msg = "this ) has no matching ("
		}
		return nil, p.errAt(t, msg)
	}
	e := &Expr{src: src, root: root}
	seen := map[string]bool{}
	root.walk(func(n *node) {
		switch {
		case n.kind == nodeCol && !seen[n.str]:
			seen[n.str] = true
			e.cols = append(e.cols, n.str)
		case n.kind == nodeCall && (n.fn == fnLag || n.fn == fnDiff):
			e.panelFn = true
		}
	})
	return e, nil
}

func (p *parser) peek() token { return p.toks[p.i] }

func (p *parser) next() token {
	t := p.toks[p.i]
	if t.kind != tEOF {
		p.i++
	}
	return t
}

func (p *parser) errAt(t token, msg string) error {
	return &ExprError{Src: p.src, Pos: t.pos, Msg: msg}
}

func (p *parser) enter(t token) error {
	p.depth++
	if p.depth > maxDepth {
		return p.errAt(t, fmt.Sprintf("the expression is nested more than %d levels deep", maxDepth))
	}
	return nil
}

func (p *parser) parseOr() (*node, error) {
	x, err := p.parseAnd()
	if err != nil {
		return nil, err
	}
	for p.peek().kind == tOr {
		t := p.next()
		y, err := p.parseAnd()
		if err != nil {
			return nil, err
		}
		x = &node{kind: nodeBinary, pos: t.pos, op: tOr, x: x, y: y}
	}
	return x, nil
}

func (p *parser) parseAnd() (*node, error) {
	x, err := p.parseCmp()
	if err != nil {
		return nil, err
	}
	for p.peek().kind == tAnd {
		t := p.next()
		y, err := p.parseCmp()
		if err != nil {
			return nil, err
		}
		x = &node{kind: nodeBinary, pos: t.pos, op: tAnd, x: x, y: y}
	}
	return x, nil
}

func isCmp(k tokKind) bool { return k >= tEq && k <= tGe }

func (p *parser) parseCmp() (*node, error) {
	x, err := p.parseSum()
	if err != nil {
		return nil, err
	}
	if !isCmp(p.peek().kind) {
		return x, nil
	}
	t := p.next()
	y, err := p.parseSum()
	if err != nil {
		return nil, err
	}
	if u := p.peek(); isCmp(u.kind) {
		return nil, p.errAt(u, "comparisons cannot be chained: write a < b && b < c")
	}
	return &node{kind: nodeBinary, pos: t.pos, op: t.kind, x: x, y: y}, nil
}

func (p *parser) parseSum() (*node, error) {
	x, err := p.parseProduct()
	if err != nil {
		return nil, err
	}
	for k := p.peek().kind; k == tPlus || k == tMinus; k = p.peek().kind {
		t := p.next()
		y, err := p.parseProduct()
		if err != nil {
			return nil, err
		}
		x = &node{kind: nodeBinary, pos: t.pos, op: t.kind, x: x, y: y}
	}
	return x, nil
}

func (p *parser) parseProduct() (*node, error) {
	x, err := p.parseUnary()
	if err != nil {
		return nil, err
	}
	for k := p.peek().kind; k == tStar || k == tSlash; k = p.peek().kind {
		t := p.next()
		y, err := p.parseUnary()
		if err != nil {
			return nil, err
		}
		x = &node{kind: nodeBinary, pos: t.pos, op: t.kind, x: x, y: y}
	}
	return x, nil
}

func (p *parser) parseUnary() (*node, error) {
	t := p.peek()
	if t.kind != tMinus && t.kind != tNot {
		return p.parsePower()
	}
	p.next()
	if err := p.enter(t); err != nil {
		return nil, err
	}
	x, err := p.parseUnary()
	p.depth--
	if err != nil {
		return nil, err
	}
	return &node{kind: nodeUnary, pos: t.pos, op: t.kind, x: x}, nil
}

func (p *parser) parsePower() (*node, error) {
	x, err := p.parsePrimary()
	if err != nil {
		return nil, err
	}
	if p.peek().kind != tCaret {
		return x, nil
	}
	t := p.next()
	if err := p.enter(t); err != nil {
		return nil, err
	}
	y, err := p.parseUnary()
	p.depth--
	if err != nil {
		return nil, err
	}
	return &node{kind: nodeBinary, pos: t.pos, op: tCaret, x: x, y: y}, nil
}

func (p *parser) parsePrimary() (*node, error) {
	t := p.next()
	switch t.kind {
	case tNum:
		return &node{kind: nodeNum, pos: t.pos, num: t.num}, nil
	case tStr:
		return &node{kind: nodeStr, pos: t.pos, str: t.text}, nil
	case tQIdent:
		return &node{kind: nodeCol, pos: t.pos, str: t.text}, nil
	case tIdent:
		if p.peek().kind == tLParen {
			return p.parseCall(t)
		}
		return &node{kind: nodeCol, pos: t.pos, str: t.text}, nil
	case tLParen:
		if err := p.enter(t); err != nil {
			return nil, err
		}
		x, err := p.parseOr()
		p.depth--
		if err != nil {
			return nil, err
		}
		if u := p.peek(); u.kind != tRParen {
			return nil, p.errAt(u, fmt.Sprintf("expected ) to close the ( at char %d, found %s", t.pos, u.describe()))
		}
		p.next()
		return x, nil
	case tEOF:
		return nil, p.errAt(t, "the expression ends too early: a number, column, string or ( is missing")
	}
	return nil, p.errAt(t, fmt.Sprintf("expected a number, column, string or (, found %s", t.describe()))
}

func (p *parser) parseCall(name token) (*node, error) {
	fn, ok := lookupFunc(name.text)
	if !ok {
		msg := fmt.Sprintf("unknown function %s; the functions are %s", name.text, strings.Join(funcNames, ", "))
		if c := closeNames(name.text, funcNames, 1); len(c) > 0 {
			msg = fmt.Sprintf("unknown function %s (did you mean %s?); the functions are %s", name.text, c[0], strings.Join(funcNames, ", "))
		}
		return nil, p.errAt(name, msg)
	}
	open := p.next() // (
	if err := p.enter(open); err != nil {
		return nil, err
	}
	x, err := p.parseOr()
	p.depth--
	if err != nil {
		return nil, err
	}
	n := &node{kind: nodeCall, pos: name.pos, fn: fn, str: name.text, x: x, k: 1}
	if fn == fnLag || fn == fnDiff {
		if p.peek().kind == tComma {
			p.next()
			k := p.next()
			const maxK = 1000000
			switch {
			case k.kind == tMinus:
				return nil, p.errAt(k, fmt.Sprintf("the order k of %s(x, k) must be a whole number of at least 1; leads (negative k) are not supported", name.text))
			case k.kind != tNum:
				return nil, p.errAt(k, fmt.Sprintf("the order k of %s(x, k) must be a whole number written as a literal, such as 1 or 4; found %s", name.text, k.describe()))
			case k.num != math.Trunc(k.num) || k.num < 1 || k.num > maxK:
				return nil, p.errAt(k, fmt.Sprintf("the order k of %s(x, k) must be a whole number from 1 to %d; found %s", name.text, maxK, k.text))
			}
			n.k = int(k.num)
		}
	}
	if u := p.peek(); u.kind != tRParen {
		msg := fmt.Sprintf("expected ) to close %s(, found %s", name.text, u.describe())
		if u.kind == tComma {
			msg = fmt.Sprintf("%s takes one argument", name.text)
			if fn == fnLag || fn == fnDiff {
				msg = fmt.Sprintf("%s takes at most two arguments, %s(x, k)", name.text, name.text)
			}
		}
		return nil, p.errAt(u, msg)
	}
	p.next()
	return n, nil
}

// walk calls f on n and its operands, depth first, left to right.
func (n *node) walk(f func(*node)) {
	f(n)
	if n.x != nil {
		n.x.walk(f)
	}
	if n.y != nil {
		n.y.walk(f)
	}
}

// Binding strength of each form, for printing with minimal parentheses.
const (
	precOr = 1 + iota
	precAnd
	precCmp
	precSum
	precProduct
	precUnary
	precPower
	precAtom
)

func (n *node) prec() int {
	switch n.kind {
	case nodeUnary:
		return precUnary
	case nodeBinary:
		switch n.op {
		case tOr:
			return precOr
		case tAnd:
			return precAnd
		case tPlus, tMinus:
			return precSum
		case tStar, tSlash:
			return precProduct
		case tCaret:
			return precPower
		default:
			return precCmp
		}
	}
	return precAtom
}

// String returns the canonical text of the subtree (see Expr.String).
func (n *node) String() string {
	var b strings.Builder
	n.write(&b)
	return b.String()
}

func (n *node) write(b *strings.Builder) {
	switch n.kind {
	case nodeNum:
		b.WriteString(strconv.FormatFloat(n.num, 'g', -1, 64))
	case nodeStr:
		b.WriteString(quoteStr(n.str))
	case nodeCol:
		b.WriteString(colName(n.str))
	case nodeUnary:
		b.WriteString(tokText[n.op])
		writeOperand(b, n.x, n.x.prec() < precUnary)
	case nodeBinary:
		p := n.prec()
		var parenX, parenY bool
		switch {
		case p == precPower: // right-associative
			parenX, parenY = n.x.prec() <= p, n.y.prec() < precUnary
		case p == precCmp: // not chained
			parenX, parenY = n.x.prec() <= p, n.y.prec() <= p
		default: // left-associative
			parenX, parenY = n.x.prec() < p, n.y.prec() <= p
		}
		writeOperand(b, n.x, parenX)
		if n.op == tCaret {
			b.WriteString("^")
		} else {
			b.WriteString(" " + tokText[n.op] + " ")
		}
		writeOperand(b, n.y, parenY)
	case nodeCall:
		b.WriteString(funcNames[n.fn])
		b.WriteByte('(')
		n.x.write(b)
		if (n.fn == fnLag || n.fn == fnDiff) && n.k != 1 {
			b.WriteString(", ")
			b.WriteString(strconv.Itoa(n.k))
		}
		b.WriteByte(')')
	}
}

func writeOperand(b *strings.Builder, n *node, paren bool) {
	if paren {
		b.WriteByte('(')
	}
	n.write(b)
	if paren {
		b.WriteByte(')')
	}
}

// colName writes a column name bare when it is an identifier, else in
// backquotes.
func colName(s string) string {
	if isIdent(s) {
		return s
	}
	return "`" + s + "`"
}

// quoteStr writes a string literal, escaping " and \.
func quoteStr(s string) string {
	var b strings.Builder
	b.WriteByte('"')
	for _, r := range s {
		if r == '"' || r == '\\' {
			b.WriteByte('\\')
		}
		b.WriteRune(r)
	}
	b.WriteByte('"')
	return b.String()
}
