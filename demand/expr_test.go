package demand

import (
	"errors"
	"math"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// exprSexpr writes a tree fully parenthesised, prefix form, to show its shape.
func exprSexpr(n *node) string {
	switch n.kind {
	case nodeNum:
		return strconv.FormatFloat(n.num, 'g', -1, 64)
	case nodeStr:
		return quoteStr(n.str)
	case nodeCol:
		return colName(n.str)
	case nodeUnary:
		if n.op == tMinus {
			return "(neg " + exprSexpr(n.x) + ")"
		}
		return "(not " + exprSexpr(n.x) + ")"
	case nodeCall:
		name := funcNames[n.fn]
		if n.fn == fnLag || n.fn == fnDiff {
			name += ":" + strconv.Itoa(n.k)
		}
		return "(" + name + " " + exprSexpr(n.x) + ")"
	}
	return "(" + tokText[n.op] + " " + exprSexpr(n.x) + " " + exprSexpr(n.y) + ")"
}

// exprSameTree reports whether two trees are equal apart from positions.
func exprSameTree(a, b *node) bool {
	if a == nil || b == nil {
		return a == b
	}
	if a.kind != b.kind || a.op != b.op || a.str != b.str || a.fn != b.fn || a.k != b.k {
		return false
	}
	if a.kind == nodeNum && a.num != b.num {
		return false
	}
	return exprSameTree(a.x, b.x) && exprSameTree(a.y, b.y)
}

// exprTextCol interns values in order of first appearance ("" is missing)
// and fills FirstNonNumber and NumericCells as a CSV reader does, row i
// being on line i+2.
func exprTextCol(vals ...string) *TextColumn {
	c := &TextColumn{Codes: make([]int32, len(vals))}
	numeric := 0
	for i, v := range vals {
		if v == "" {
			c.Codes[i] = -1
			continue
		}
		if _, err := strconv.ParseFloat(v, 64); err == nil {
			numeric++
		} else if c.FirstNonNumber.Line == 0 {
			c.FirstNonNumber = CellRef{Line: i + 2, Text: v}
		}
		j := slices.Index(c.Levels, v)
		if j < 0 {
			j = len(c.Levels)
			c.Levels = append(c.Levels, v)
		}
		c.Codes[i] = int32(j)
	}
	if c.FirstNonNumber.Line > 0 {
		c.NumericCells = numeric
	}
	return c
}

// exprFloatsNear compares element by element within tol; NaN equals NaN.
func exprFloatsNear(got, want []float64, tol float64) bool {
	if len(got) != len(want) {
		return false
	}
	for i := range got {
		if math.IsNaN(want[i]) != math.IsNaN(got[i]) {
			return false
		}
		if !math.IsNaN(want[i]) && math.Abs(got[i]-want[i]) > tol*math.Max(1, math.Abs(want[i])) {
			return false
		}
	}
	return true
}

var exprNaN = math.NaN()

func TestParseExprShape(t *testing.T) {
	// Precedence and associativity as documented on Expr (common practice
	// for arithmetic: ^ right-associative and above unary minus).
	for i, test := range []struct {
		src, want string
	}{
		{"1 + 2 * 3", "(+ 1 (* 2 3))"},
		{"(1 + 2) * 3", "(* (+ 1 2) 3)"},
		{"a - b - c", "(- (- a b) c)"},
		{"a / b / c", "(/ (/ a b) c)"},
		{"a / b * c", "(* (/ a b) c)"},
		{"2^3^2", "(^ 2 (^ 3 2))"},
		{"-2^2", "(neg (^ 2 2))"},
		{"2^-1", "(^ 2 (neg 1))"},
		{"-a * b", "(* (neg a) b)"},
		{"a * -b", "(* a (neg b))"},
		{"--x", "(neg (neg x))"},
		{"a < b && c >= d || !e", "(|| (&& (< a b) (>= c d)) (not e))"},
		{"a || b && c", "(|| a (&& b c))"},
		{"a && b && c", "(&& (&& a b) c)"},
		{"!(a > 1)", "(not (> a 1))"},
		{"!a == b", "(== (not a) b)"},
		{"x == 1 + 2", "(== x (+ 1 2))"},
		{"x != 1", "(!= x 1)"},
		{"x <= -1", "(<= x (neg 1))"},
		{"log(price/cpi)", "(log (/ price cpi))"},
		{"exp(abs(sqrt(x)))", "(exp (abs (sqrt x)))"},
		{"lag(x)", "(lag:1 x)"},
		{"lag( x , 4 )", "(lag:4 x)"},
		{"diff(log(AvgPrs / CPI), 10)", "(diff:10 (log (/ AvgPrs CPI)))"},
		{"`unit price` * 2", "(* `unit price` 2)"},
		{"x.y_1 + _z", "(+ x.y_1 _z)"},
		{"log + 1", "(+ log 1)"},
		{`product == "Nitro Can 250ml"`, `(== product "Nitro Can 250ml")`},
		{`name == "a \"b\" \\ c\d"`, `(== name "a \"b\" \\ c\\d")`},
		{"1e-3 + .5 + 2.5E2 + 3.", "(+ (+ (+ 0.001 0.5) 250) 3)"},
		{"\tprice\n*\r2 ", "(* price 2)"},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Errorf("%d %q: unexpected error: %v", i, test.src, err)
			continue
		}
		if got := exprSexpr(e.root); got != test.want {
			t.Errorf("%d %q: got %s, want %s", i, test.src, got, test.want)
		}
	}
}

func TestExprString(t *testing.T) {
	// Canonical form: minimal parentheses, shortest numbers (design of this
	// package, see Expr.String).
	for i, test := range []struct {
		src, want string
	}{
		{"((a+b))*c", "(a + b) * c"},
		{"a-(b-c)", "a - (b - c)"},
		{"(a-b)-c", "a - b - c"},
		{"a/(b*c)", "a / (b * c)"},
		{"(-2)^2", "(-2)^2"},
		{"-2^2", "-2^2"},
		{"2^(3^2)", "2^3^2"},
		{"(2^3)^2", "(2^3)^2"},
		{"2^-1", "2^-1"},
		{"2^(-x^2)", "2^-x^2"},
		{"-(a+b)", "-(a + b)"},
		{"!(a>b)", "!(a > b)"},
		{"(a==b)==c", "(a == b) == c"},
		{"a==(b==c)", "a == (b == c)"},
		{"a||(b||c)", "a || (b || c)"},
		{"(a||b)&&c", "(a || b) && c"},
		{"lag(x,1)", "lag(x)"},
		{"diff(x , 4)", "diff(x, 4)"},
		{"`a b` + 1", "`a b` + 1"},
		{"1000000*x", "1e+06 * x"},
		{"0.000010", "1e-05"},
		{`p=="say \"hi\""`, `p == "say \"hi\""`},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Errorf("%d %q: unexpected error: %v", i, test.src, err)
			continue
		}
		got := e.String()
		if got != test.want {
			t.Errorf("%d %q: got %q, want %q", i, test.src, got, test.want)
		}
		again, err := ParseExpr(got)
		if err != nil || !exprSameTree(e.root, again.root) {
			t.Errorf("%d %q: canonical form %q does not re-parse to the same tree (err %v)", i, test.src, got, err)
		}
	}
}

func TestParseExprErrors(t *testing.T) {
	// Pos is the 1-based character column of the offending token
	// (convention of encoding/csv.ParseError, 1-based columns).
	deep := strings.Repeat("(", 300) + "1" + strings.Repeat(")", 300)
	for i, test := range []struct {
		src  string
		pos  int
		want string
	}{
		{"", 1, "empty"},
		{"   ", 4, "empty"},
		{"1 +", 4, "ends too early"},
		{"(1 + 2", 7, "expected ) to close the ( at char 1"},
		{"1 + 2)", 6, "no matching ("},
		{"a = 1", 3, "compare with =="},
		{"a & b", 3, "&&"},
		{"a | b", 3, "||"},
		{"a < b < c", 7, "cannot be chained"},
		{"lg(x)", 1, "unknown function lg (did you mean log?)"},
		{"lag(x, 0)", 8, "from 1 to"},
		{"lag(x, -1)", 8, "leads"},
		{"lag(x, 1.5)", 8, "whole number"},
		{"lag(x, k)", 8, "literal"},
		{"log(x, 2)", 6, "log takes one argument"},
		{"diff(x, 1, 2)", 10, "at most two arguments"},
		{"log(x", 6, "expected ) to close log("},
		{`p == "abc`, 6, "string is not closed"},
		{"`abc + 1", 1, "not closed"},
		{"`` + 1", 1, "empty column name"},
		{"2x", 2, "cannot follow the number 2"},
		{"1e + 2", 1, "exponent"},
		{"1e999", 1, "out of range"},
		{"a # b", 3, "unexpected character '#'"},
		{"p == 'Nitro'", 6, "double quotes"},
		{"a b", 3, "operator missing"},
		{"* a", 1, "expected a number, column, string or ("},
		{"`é` + 1 +", 10, "ends too early"}, // 9 characters, 11 bytes
		{"é", 1, "backquotes"},
		{deep, 201, "nested more than 200"},
		{strings.Repeat("-", 300) + "1", 201, "nested more than 200"},
	} {
		_, err := ParseExpr(test.src)
		var ee *ExprError
		if !errors.As(err, &ee) {
			t.Errorf("%d %q: got %v, want an *ExprError", i, test.src, err)
			continue
		}
		if ee.Pos != test.pos || !strings.Contains(ee.Msg, test.want) || ee.Src != test.src {
			t.Errorf("%d %q: got pos %d msg %q, want pos %d and %q", i, test.src, ee.Pos, ee.Msg, test.pos, test.want)
		}
	}
}

func TestExprErrorCaret(t *testing.T) {
	// The message, then the expression, then a caret under the position.
	_, err := ParseExpr("log(x))")
	want := "char 7 of the expression: this ) has no matching (\n" +
		"    log(x))\n" +
		"          ^"
	if err == nil || err.Error() != want {
		t.Errorf("got\n%v\nwant\n%s", err, want)
	}
}

func TestParseDerive(t *testing.T) {
	for i, test := range []struct {
		arg, name, expr string
		pos             int // 0: no error
		want            string
	}{
		{arg: "lnq=log(units)", name: "lnq", expr: "log(units)"},
		{arg: " lnP = log(AvgPrs / CPI) ", name: "lnP", expr: "log(AvgPrs / CPI)"},
		{arg: "d.lnP=diff(log(p),10)", name: "d.lnP", expr: "diff(log(p), 10)"},
		{arg: "lnq", pos: 4, want: "NAME=EXPR"},
		{arg: "a==b", pos: 2, want: "NAME=EXPR"},
		{arg: "=log(x)", pos: 1, want: "needs a name"},
		{arg: "  1q=x", pos: 3, want: "cannot name a new column"},
		{arg: "unit price=x", pos: 1, want: "cannot name a new column"},
		{arg: "lnq=log(units", pos: 14, want: "expected ) to close log("},
		{arg: "lnq=", pos: 5, want: "empty"},
		{arg: "lnq = a = b", pos: 9, want: "compare with =="},
	} {
		name, e, err := ParseDerive(test.arg)
		if test.pos == 0 {
			if err != nil {
				t.Errorf("%d %q: unexpected error: %v", i, test.arg, err)
				continue
			}
			if name != test.name || e.String() != test.expr || e.Src() != test.arg {
				t.Errorf("%d %q: got %q = %q (src %q), want %q = %q", i, test.arg, name, e.String(), e.Src(), test.name, test.expr)
			}
			continue
		}
		var ee *ExprError
		if !errors.As(err, &ee) {
			t.Errorf("%d %q: got %v, want an *ExprError", i, test.arg, err)
			continue
		}
		if ee.Pos != test.pos || !strings.Contains(ee.Msg, test.want) || ee.Src != test.arg {
			t.Errorf("%d %q: got pos %d msg %q, want pos %d and %q", i, test.arg, ee.Pos, ee.Msg, test.pos, test.want)
		}
	}
}

func TestExprColumns(t *testing.T) {
	for i, test := range []struct {
		src     string
		cols    []string
		panelFn bool
	}{
		{"log(b) + a * b - lag(c, 2)", []string{"b", "a", "c"}, true},
		{`product == "x" && units > 0`, []string{"product", "units"}, false},
		{"diff(`unit price`)", []string{"unit price"}, true},
		{"1 + 2", nil, false},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Fatalf("%d: %v", i, err)
		}
		if got := e.Columns(); !slices.Equal(got, test.cols) || e.UsesPanelFunctions() != test.panelFn {
			t.Errorf("%d %q: got %q %v, want %q %v", i, test.src, got, e.UsesPanelFunctions(), test.cols, test.panelFn)
		}
	}
}

// exprSalesPanel is a five-row panel; row i sits on line i+2 of sales.csv.
func exprSalesPanel() *Panel {
	p := NewPanel("sales.csv", 5)
	p.AddNum("units", []float64{10, 0, 5, exprNaN, 2})
	p.AddNum("price", []float64{2, 4, 1, 3, 8})
	p.AddNum("stock", []float64{3, 0, -1, exprNaN, 4})
	p.AddText("product", exprTextCol("Nitro Can 250ml", "Oat Latte 330ml", "", "Nitro Can 250ml", "Black 1l"))
	p.AddText("featured", exprTextCol("Black 1l", "Oat Latte 330ml", "Black 1l", "", "Black 1l"))
	p.AddNum("unit price", []float64{1, 2, 3, 4, 5})
	p.AddText("cost", exprTextCol("1.5", "2", "n/a", "3", ""))
	return p
}

func TestEvalFloat(t *testing.T) {
	// Expected values worked out by hand from the definitions on Expr
	// (arithmetic, 1/0 conditions, three-valued logic with missing).
	const tol = 1e-15
	for i, test := range []struct {
		src  string
		want []float64
	}{
		{"units", []float64{10, 0, 5, exprNaN, 2}},
		{"units * price", []float64{20, 0, 5, exprNaN, 16}},
		{"units / price", []float64{5, 0, 5, exprNaN, 0.25}},
		{"units - price - 1", []float64{7, -5, 3, exprNaN, -7}},
		{"-price^2", []float64{-4, -16, -1, -9, -64}},
		{"price^2^-1", []float64{math.Sqrt2, 2, 1, math.Sqrt(3), math.Sqrt(8)}},
		{"2^-1 * price", []float64{1, 2, 0.5, 1.5, 4}},
		{"units^0", []float64{1, 1, 1, exprNaN, 1}}, // missing stays missing, unlike math.Pow(NaN, 0)
		{"log(price)", []float64{math.Ln2, 2 * math.Ln2, 0, math.Log(3), 3 * math.Ln2}},
		{"exp(log(price))", []float64{2, 4, 1, 3, 8}},
		{"abs(-price) + sqrt(4) + exp(0)", []float64{5, 7, 4, 6, 11}},
		{"sqrt(units)", []float64{math.Sqrt(10), 0, math.Sqrt(5), exprNaN, math.Sqrt2}},
		{"`unit price` * 10", []float64{10, 20, 30, 40, 50}},
		{"7", []float64{7, 7, 7, 7, 7}},
		{"units > 3", []float64{1, 0, 1, exprNaN, 0}},
		{"units >= 5", []float64{1, 0, 1, exprNaN, 0}},
		{"units < 5", []float64{0, 1, 0, exprNaN, 1}},
		{"units <= 0", []float64{0, 1, 0, exprNaN, 0}},
		{"units == 2", []float64{0, 0, 0, exprNaN, 1}},
		{"units != 2", []float64{1, 1, 1, exprNaN, 0}},
		{"price * (units > 3)", []float64{2, 0, 1, exprNaN, 0}},
		{"units > 3 && price < 2", []float64{0, 0, 1, 0, 0}},       // false && missing = false
		{"units > 3 || price < 2", []float64{1, 0, 1, exprNaN, 0}}, // false || missing = missing
		{"units > 3 || price > 2", []float64{1, 1, 1, 1, 1}},       // missing || true = true
		{"!(units > 3)", []float64{0, 1, 0, exprNaN, 1}},
		{"!!(units > 3)", []float64{1, 0, 1, exprNaN, 0}},
		{`product == "Nitro Can 250ml"`, []float64{1, 0, exprNaN, 1, 0}},
		{`"Nitro Can 250ml" == product`, []float64{1, 0, exprNaN, 1, 0}},
		{`product != "Nitro Can 250ml"`, []float64{0, 1, exprNaN, 0, 1}},
		{`product == featured`, []float64{0, 1, exprNaN, exprNaN, 1}},
		{`product != featured`, []float64{1, 0, exprNaN, exprNaN, 0}},
		{`cost == "n/a"`, []float64{0, 0, 1, 0, exprNaN}},
		{`"a" == "a"`, []float64{1, 1, 1, 1, 1}},
		{`"a" != "a"`, []float64{0, 0, 0, 0, 0}},
		{`product == "Black 1l" || units > 3 && !(price == 2)`, []float64{0, 0, 1, exprNaN, 1}},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Errorf("%d %q: %v", i, test.src, err)
			continue
		}
		p := exprSalesPanel()
		// Each case runs twice on the same Expr and panel to catch reuse bugs.
		for j := 0; j < 2; j++ {
			got, err := e.EvalFloat(p, PanelKeys{})
			if err != nil {
				t.Errorf("%d %q run %d: unexpected error: %v", i, test.src, j, err)
				continue
			}
			if !exprFloatsNear(got, test.want, tol) {
				t.Errorf("%d %q run %d: got %v, want %v", i, test.src, j, got, test.want)
			}
		}
		if !slices.Equal(p.Num["units"][:3], []float64{10, 0, 5}) || !slices.Equal(p.Num["price"], []float64{2, 4, 1, 3, 8}) {
			t.Errorf("%d %q: panel data was modified during evaluation", i, test.src)
		}
	}
}

func TestEvalFloatDoesNotAlias(t *testing.T) {
	p := exprSalesPanel()
	e, _ := ParseExpr("price")
	got, err := e.EvalFloat(p, PanelKeys{})
	if err != nil {
		t.Fatal(err)
	}
	got[0] = 99
	if p.Num["price"][0] != 2 {
		t.Errorf("the result of EvalFloat shares memory with the panel")
	}
}

func TestEvalErrors(t *testing.T) {
	// Each bad input gets its own cause, the position of the part of the
	// expression concerned, and the row count and first line (DESIGN.md,
	// "What bad input gets").
	for i, test := range []struct {
		src   string
		keys  PanelKeys
		cause error
		pos   int
		want  []string
	}{
		{src: "log(stock)", cause: ErrNonPositiveLog, pos: 1,
			want: []string{"log(stock): 2 rows have a zero or negative value", "first: line 3 of sales.csv, where stock = 0", "remove them from the input file", "--where filters rows after --derive"}},
		{src: "2 * log(units - 5)", cause: ErrNonPositiveLog, pos: 5,
			want: []string{"log(units - 5): 3 rows have", "line 3 of sales.csv, where units - 5 = -5"}},
		{src: "price / stock", cause: ErrDivByZero, pos: 7,
			want: []string{"price / stock: 1 row divides by zero", "line 3 of sales.csv, where stock = 0"}},
		{src: "sqrt(stock)", cause: ErrDomain, pos: 1,
			want: []string{"sqrt(stock): 1 row has a negative value", "line 4 of sales.csv, where stock = -1"}},
		{src: "exp(price * 1000)", cause: ErrDomain, pos: 1,
			want: []string{"exp(price * 1000): 5 rows give no finite result", "line 2 of sales.csv"}},
		{src: "(0 - price)^0.5", cause: ErrDomain, pos: 12,
			want: []string{"5 rows give no finite result", "line 2 of sales.csv, where 0 - price = -2 and 0.5 = 0.5"}},
		{src: "log(unitz)", cause: ErrUnknownColumn, pos: 5,
			want: []string{`no column named "unitz"`, "closest names: units"}},
		{src: "product * 2", cause: ErrNotNumeric, pos: 1,
			want: []string{`column "product" holds text (for example "Nitro Can 250ml" on line 2)`, `compared with == or != to a string, as in product == "Nitro Can 250ml"`}},
		{src: "price - 2 * cost", cause: ErrNotNumeric, pos: 13,
			want: []string{`line 4, column "cost": cell is not a number: found "n/a"`}},
		{src: `product == "Nitro Can 250 ml"`, pos: 12,
			want: []string{`no row of column product holds the value "Nitro Can 250 ml"`, `closest values: "Nitro Can 250ml"`}},
		{src: `price == "4"`, pos: 10, want: []string{`column price is numeric`}},
		{src: `product < "A"`, pos: 9, want: []string{"text can only be compared with == or !="}},
		{src: `product == 1`, pos: 9, want: []string{"cannot compare the number 1 with the text product"}},
		{src: "units && price > 1", pos: 7, want: []string{"&& needs a condition", "units is a number"}},
		{src: "!units", pos: 1, want: []string{"! needs a condition"}},
		{src: `"a" + 1`, pos: 1, want: []string{`the string "a" is used as a number`}},
		{src: "product", pos: 1, want: []string{"gives text"}},
		{src: "lag(units)", pos: 1, want: []string{"set --unit and --time"}},
		{src: "1 + diff(units, 2)", keys: PanelKeys{Unit: "product"}, pos: 5, want: []string{"set --time"}},
		{src: "lag(units)", keys: PanelKeys{Time: "price"}, pos: 1, want: []string{"set --unit ("}},
		{src: "lag(units)", keys: PanelKeys{Unit: "product", Time: "weak"}, cause: ErrUnknownColumn, pos: 1,
			want: []string{"time column (--time)", `no column named "weak"`}},
		{src: "lag(units)", keys: PanelKeys{Unit: "stor", Time: "price"}, cause: ErrUnknownColumn, pos: 1,
			want: []string{"unit column (--unit)", `no column named "stor"`}},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Fatalf("%d %q: %v", i, test.src, err)
		}
		_, err = e.EvalFloat(exprSalesPanel(), test.keys)
		var ee *ExprError
		if !errors.As(err, &ee) {
			t.Errorf("%d %q: got %v, want an *ExprError", i, test.src, err)
			continue
		}
		if test.cause != nil && !errors.Is(err, test.cause) {
			t.Errorf("%d %q: error %v does not wrap %v", i, test.src, err, test.cause)
		}
		if ee.Pos != test.pos {
			t.Errorf("%d %q: got pos %d, want %d (%s)", i, test.src, ee.Pos, test.pos, ee.Msg)
		}
		for _, w := range test.want {
			if !strings.Contains(ee.Msg, w) {
				t.Errorf("%d %q: message %q lacks %q", i, test.src, ee.Msg, w)
			}
		}
	}
}

func TestUnknownColumnDetails(t *testing.T) {
	e, _ := ParseExpr("units + prise")
	_, err := e.EvalFloat(exprSalesPanel(), PanelKeys{})
	var uc *UnknownColumnError
	if !errors.As(err, &uc) {
		t.Fatalf("got %v, want an *UnknownColumnError inside", err)
	}
	if uc.Name != "prise" || !slices.Contains(uc.Close, "price") || uc.Source != "sales.csv" {
		t.Errorf("got %+v", uc)
	}
	if !strings.Contains(err.Error(), "\n    units + prise\n            ^") {
		t.Errorf("caret missing or misplaced:\n%v", err)
	}
}

func TestEvalMask(t *testing.T) {
	// A missing condition keeps no row, whichever way it is written
	// (three-valued logic documented on Expr).
	for i, test := range []struct {
		src  string
		want []bool
	}{
		{"units > 3", []bool{true, false, true, false, false}},
		{"!(units > 3)", []bool{false, true, false, false, true}},
		{`product == "Nitro Can 250ml"`, []bool{true, false, false, true, false}},
		{`product != "Nitro Can 250ml"`, []bool{false, true, false, false, true}},
		{"units > 3 || price > 2", []bool{true, true, true, true, true}},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Fatalf("%d: %v", i, err)
		}
		got, err := e.EvalMask(exprSalesPanel(), PanelKeys{})
		if err != nil {
			t.Errorf("%d %q: unexpected error: %v", i, test.src, err)
			continue
		}
		if !slices.Equal(got, test.want) {
			t.Errorf("%d %q: got %v, want %v", i, test.src, got, test.want)
		}
	}
	e, _ := ParseExpr("units + 1")
	if _, err := e.EvalMask(exprSalesPanel(), PanelKeys{}); err == nil || !strings.Contains(err.Error(), "needs a condition such as units > 0") {
		t.Errorf("a number used as a filter: got %v", err)
	}
}

func TestFilter(t *testing.T) {
	p := exprSalesPanel()
	e, _ := ParseExpr("units > 3")
	q, dropped, err := Filter(p, e, PanelKeys{})
	if err != nil {
		t.Fatal(err)
	}
	// Rows 0 and 2 are kept: lines 2 and 4 of the source.
	if dropped != 3 || q.N != 2 || !slices.Equal(q.Lines, []int{2, 4}) || !slices.Equal(q.Num["price"], []float64{2, 1}) {
		t.Errorf("got dropped %d, N %d, lines %v, price %v", dropped, q.N, q.Lines, q.Num["price"])
	}
	if p.N != 5 || len(p.Num["price"]) != 5 {
		t.Errorf("input panel was modified")
	}
	e, _ = ParseExpr("units > 100")
	_, _, err = Filter(p, e, PanelKeys{})
	if !errors.Is(err, ErrEmpty) || !strings.Contains(err.Error(), "(4 false, 1 missing)") {
		t.Errorf("empty result: got %v", err)
	}
	e, _ = ParseExpr("log(stock) > 0")
	if _, _, err = Filter(p, e, PanelKeys{}); !errors.Is(err, ErrNonPositiveLog) {
		t.Errorf("got %v, want ErrNonPositiveLog", err)
	}
}

func TestDerive(t *testing.T) {
	p := exprSalesPanel()
	name, e, err := ParseDerive("lnp=log(price)")
	if err != nil {
		t.Fatal(err)
	}
	if err := Derive(p, name, e, PanelKeys{}); err != nil {
		t.Fatal(err)
	}
	want := []float64{math.Ln2, 2 * math.Ln2, 0, math.Log(3), 3 * math.Ln2}
	if !exprFloatsNear(p.Num["lnp"], want, 1e-15) || p.Columns[len(p.Columns)-1] != "lnp" {
		t.Errorf("got %v, columns %v", p.Num["lnp"], p.Columns)
	}
	// A later derive may use an earlier one.
	name, e, _ = ParseDerive("big = lnp > 1")
	if err := Derive(p, name, e, PanelKeys{}); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(p.Num["big"], []float64{0, 1, 0, 1, 1}) {
		t.Errorf("got %v", p.Num["big"])
	}
	for _, arg := range []string{"lnp=log(units)", "units=units*2", "product=1"} {
		name, e, _ := ParseDerive(arg)
		err := Derive(p, name, e, PanelKeys{})
		if err == nil || !strings.Contains(err.Error(), "already has a column named") || !strings.Contains(err.Error(), "choose another name") {
			t.Errorf("%q: got %v", arg, err)
		}
	}
	// A failing derive leaves the panel as it was.
	n := len(p.Columns)
	name, e, _ = ParseDerive("lns=log(stock)")
	if err := Derive(p, name, e, PanelKeys{}); !errors.Is(err, ErrNonPositiveLog) || p.Has("lns") || len(p.Columns) != n {
		t.Errorf("got %v, columns %v", err, p.Columns)
	}
}

// exprLagPanel is an unbalanced panel with rows out of order, a gap (store 1
// has weeks 1, 2 and 4), a row with a missing unit and a row with a
// missing time.
func exprLagPanel(textTime bool) *Panel {
	p := NewPanel("weekly.csv", 8)
	p.AddNum("store", []float64{2, 1, 1, 2, 1, exprNaN, 1, 3})
	if textTime {
		p.AddText("week", exprTextCol("2024-02", "2024-01", "2024-04", "2024-03", "2024-02", "2024-03", "", "2024-05"))
	} else {
		p.AddNum("week", []float64{2, 1, 4, 3, 2, 3, exprNaN, 5})
	}
	p.AddNum("x", []float64{20, 1, 4, 30, 2, 99, 7, 500})
	return p
}

func TestLagDiff(t *testing.T) {
	// Expected values worked out by hand from the rules on PanelKeys:
	// numeric time looks up exactly t-k (a gap gives missing); text time
	// steps back k positions in the unit's sorted labels.
	keys := PanelKeys{Unit: "store", Time: "week"}
	for i, test := range []struct {
		src      string
		textTime bool
		want     []float64
	}{
		{"lag(x)", false, []float64{exprNaN, exprNaN, exprNaN, 20, 1, exprNaN, exprNaN, exprNaN}},
		{"lag(x, 2)", false, []float64{exprNaN, exprNaN, 2, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN}},
		{"diff(x)", false, []float64{exprNaN, exprNaN, exprNaN, 10, 1, exprNaN, exprNaN, exprNaN}},
		{"diff(x, 3)", false, []float64{exprNaN, exprNaN, 3, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN}},
		{"lag(lag(x))", false, []float64{exprNaN, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN}},
		{"x - lag(x) * 2", false, []float64{exprNaN, exprNaN, exprNaN, -10, 0, exprNaN, exprNaN, exprNaN}},
		{"diff(log(x))", false, []float64{exprNaN, exprNaN, exprNaN, math.Log(1.5), math.Ln2, exprNaN, exprNaN, exprNaN}},
		{"lag(x) > 5", false, []float64{exprNaN, exprNaN, exprNaN, 1, 0, exprNaN, exprNaN, exprNaN}},
		{"lag(x)", true, []float64{exprNaN, exprNaN, 2, 20, 1, exprNaN, exprNaN, exprNaN}},
		{"lag(x, 2)", true, []float64{exprNaN, exprNaN, 1, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN}},
		{"diff(x)", true, []float64{exprNaN, exprNaN, 2, 10, 1, exprNaN, exprNaN, exprNaN}},
		{"lag(lag(x))", true, []float64{exprNaN, exprNaN, 1, exprNaN, exprNaN, exprNaN, exprNaN, exprNaN}},
	} {
		e, err := ParseExpr(test.src)
		if err != nil {
			t.Fatalf("%d: %v", i, err)
		}
		got, err := e.EvalFloat(exprLagPanel(test.textTime), keys)
		if err != nil {
			t.Errorf("%d %q: unexpected error: %v", i, test.src, err)
			continue
		}
		if !exprFloatsNear(got, test.want, 1e-15) {
			t.Errorf("%d %q (text time %v): got %v, want %v", i, test.src, test.textTime, got, test.want)
		}
	}
}

func TestLagDuplicateKey(t *testing.T) {
	e, _ := ParseExpr("diff(x)")
	for i, test := range []struct {
		textTime bool
		want     string
	}{
		{false, "store = 1, week = 2 appears on line 3 of weekly.csv and on line 6"},
		{true, `store = 1, week = "2024-02" appears on line 3 of weekly.csv and on line 6`},
	} {
		p := exprLagPanel(test.textTime)
		// Row 1 (line 3) moves to the period of row 4 (line 6).
		if test.textTime {
			p.Text["week"].Codes[1] = p.Text["week"].Codes[4]
		} else {
			p.Num["week"][1] = 2
		}
		_, err := e.EvalFloat(p, PanelKeys{Unit: "store", Time: "week"})
		if !errors.Is(err, ErrDuplicateKey) || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%d: got %v, want ErrDuplicateKey with %q", i, err, test.want)
		}
	}
	// A text unit is quoted.
	p := exprLagPanel(false)
	p.AddText("store", exprTextCol("B", "A", "A", "B", "A", "", "A", "C"))
	p.Num["week"][1] = 2
	_, err := e.EvalFloat(p, PanelKeys{Unit: "store", Time: "week"})
	if !errors.Is(err, ErrDuplicateKey) || !strings.Contains(err.Error(), `store = "A", week = 2 appears on line 3`) {
		t.Errorf("text unit: got %v", err)
	}
}

func TestLagTimeLooksNumeric(t *testing.T) {
	p := exprLagPanel(false)
	// Line 9 (row 7) holds "x5" among numbers.
	p.AddText("week", exprTextCol("2", "1", "4", "3", "2", "3", "", "x5"))
	e, _ := ParseExpr("lag(x)")
	_, err := e.EvalFloat(p, PanelKeys{Unit: "store", Time: "week"})
	if !errors.Is(err, ErrNotNumeric) || !strings.Contains(err.Error(), "line 9") {
		t.Errorf("got %v, want ErrNotNumeric naming line 9", err)
	}
}

func TestCigaretteTenYearDifference(t *testing.T) {
	// Stock & Watson, Introduction to Econometrics, ch. 12, cigarette
	// demand: lnP = ln(AvgPrs / CPI), and the 10-year difference model uses
	// lnP(1995) - lnP(1985) within State. The rows below are copied from
	// ../shared/reference-data/cigarettes_state_panel.csv (states AL and AR,
	// years 1985, 1990, 1995), in shuffled order. Expected differences
	// computed by hand with Python's math.log from the same cells:
	//	AL: ln(158.371337890625/1.5239999294281) - ln(102.181671142578/1.07599997520447) = 0.09010222442700577
	//	AR: ln(175.542510986328/1.5239999294281) - ln(101.474998474121/1.07599997520447) = 0.1999808214658385
	p := NewPanel("cigarettes_state_panel.csv", 6)
	p.AddText("State", exprTextCol("AR", "AL", "AL", "AR", "AL", "AR"))
	p.AddNum("Year", []float64{1995, 1985, 1995, 1990, 1990, 1985})
	p.AddNum("CPI", []float64{1.5239999294281, 1.07599997520447, 1.5239999294281, 1.30699992179871, 1.30699992179871, 1.07599997520447})
	p.AddNum("AvgPrs", []float64{175.542510986328, 102.181671142578, 158.371337890625, 150.063323974609, 143.448577880859, 101.474998474121})
	name, e, err := ParseDerive("dlnP = diff(log(AvgPrs/CPI), 10)")
	if err != nil {
		t.Fatal(err)
	}
	if err := Derive(p, name, e, PanelKeys{Unit: "State", Time: "Year"}); err != nil {
		t.Fatal(err)
	}
	want := []float64{0.1999808214658385, exprNaN, 0.09010222442700577, exprNaN, exprNaN, exprNaN}
	if got := p.Num["dlnP"]; !exprFloatsNear(got, want, 1e-12) {
		t.Errorf("got %v, want %v (tolerance 1e-12)", got, want)
	}
}

func TestEvalNoPerRowAllocation(t *testing.T) {
	// Vectorised evaluation: the number of allocations does not grow with
	// the number of rows (large inputs add a fixed number of goroutines).
	allocs := func(n int) float64 {
		p := NewPanel("bench", n)
		x, y := make([]float64, n), make([]float64, n)
		for i := range x {
			x[i], y[i] = float64(i%7+1), float64(i%5+2)
		}
		p.AddNum("x", x)
		p.AddNum("y", y)
		e, _ := ParseExpr("log(x / y) * 2 + sqrt(y) - x^2 + (x > 3 && y < 4)")
		return testing.AllocsPerRun(5, func() {
			if _, err := e.EvalFloat(p, PanelKeys{}); err != nil {
				t.Fatal(err)
			}
		})
	}
	small, large, larger := allocs(10), allocs(100000), allocs(400000)
	if large > small+200 || larger > large+10 {
		t.Errorf("allocations grow with rows: %v for 10 rows, %v for 100000, %v for 400000", small, large, larger)
	}
}

func BenchmarkEvalFloat(b *testing.B) {
	for _, n := range []int{1000, 1000000} {
		b.Run("n="+strconv.Itoa(n), func(b *testing.B) {
			p := NewPanel("bench", n)
			x, y, unit, week := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
			for i := range x {
				x[i], y[i] = float64(i%7+1), float64(i%5+2)
				unit[i], week[i] = float64(i/100), float64(i%100)
			}
			p.AddNum("x", x)
			p.AddNum("y", y)
			p.AddNum("unit", unit)
			p.AddNum("week", week)
			for _, src := range []string{"log(x / y) * 2 + sqrt(y)", "diff(log(x / y), 4)"} {
				e, _ := ParseExpr(src)
				b.Run(src, func(b *testing.B) {
					for b.Loop() {
						if _, err := e.EvalFloat(p, PanelKeys{Unit: "unit", Time: "week"}); err != nil {
							b.Fatal(err)
						}
					}
				})
			}
		})
	}
}
