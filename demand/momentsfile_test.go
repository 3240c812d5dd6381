package demand

import (
	"bytes"
	"errors"
	"math"
	"strings"
	"testing"

	"priceiv/ivcore"
)

// Moments files round-trip exactly (values written with the shortest
// representation that parses back to the same float64; NULL as empty).
func TestMomentsRoundTrip(t *testing.T) {
	rows := []MomentRow{
		{"model", "units", "column", 0},
		{"cluster:0", "S,01", "s0_1", -1.0 / 3},
		{"cluster:0", `say "hi"`, "n", 212},
		{"profile", "2", "low0", math.NaN()},
		{"fourth", "", "q17", 1e-300},
	}
	var b bytes.Buffer
	if err := WriteMoments(&b, rows); err != nil {
		t.Fatal(err)
	}
	back, err := ReadMoments(&b, "m.csv")
	if err != nil {
		t.Fatal(err)
	}
	if len(back) != len(rows) {
		t.Fatalf("%d rows back, wrote %d", len(back), len(rows))
	}
	for i, r := range rows {
		g := back[i]
		same := g.Value == r.Value || (math.IsNaN(g.Value) && math.IsNaN(r.Value))
		if g.Block != r.Block || g.Key != r.Key || g.Term != r.Term || !same {
			t.Errorf("row %d: %+v, wrote %+v", i, g, r)
		}
	}
}

// Bad moments files get ParseErrors with line and column.
func TestReadMomentsErrors(t *testing.T) {
	for _, c := range []struct {
		name, text string
		line, col  int
		is         error
		says       string
	}{
		{"empty", "", 1, 1, ErrHeader, "empty"},
		{"header", "block,key,name,value\n", 1, 3, ErrHeader, `"term"`},
		{"header width", "block,key,term\n", 1, 1, ErrHeader, "3 fields"},
		{"not a number", "block,key,term,value\ntotal,,n,12\ntotal,,s0_0,abc\n", 3, 13, ErrNotNumeric, `"abc"`},
		{"fields", "BLOCK,KEY,TERM,VALUE\ntotal,,n\n", 2, 1, ErrFieldCount, "3 fields"},
		{"quote", "block,key,term,value\ntotal,\"a\"b,n,1\n", 2, 9, nil, "quote"},
	} {
		_, err := ReadMoments(strings.NewReader(c.text), "m.csv")
		var pe *ParseError
		if !errors.As(err, &pe) {
			t.Errorf("%s: %v is not a ParseError", c.name, err)
			continue
		}
		if pe.Line != c.line || pe.Column != c.col || (c.is != nil && !errors.Is(err, c.is)) || !strings.Contains(err.Error(), c.says) || !strings.Contains(err.Error(), "m.csv") {
			t.Errorf("%s: %v (line %d col %d), want line %d col %d saying %s", c.name, err, pe.Line, pe.Column, c.line, c.col, c.says)
		}
	}
}

// The fourth-order sums the SQL names are the ones ivcore takes, each
// once: fourthTerms lists C(K+4,4) tuples for K columns and a constant,
// and their positions are 0, 1, … in order (ivcore.FourthIndex).
func TestFourthTermsCoverIvcoreOrder(t *testing.T) {
	for k := 1; k <= maxSQLColumns; k++ {
		terms := fourthTerms(k + 1)
		if len(terms) != ivcore.FourthLen(k) {
			t.Fatalf("K=%d: %d terms, ivcore takes %d", k, len(terms), ivcore.FourthLen(k))
		}
		for i, x := range terms {
			if got := fourthIndexOf(x); got != i || got != ivcore.FourthIndex(x[0], x[1], x[2], x[3]) {
				t.Fatalf("K=%d: term %v at %d, position %d", k, x, i, got)
			}
		}
	}
}

// Script writes what each dialect promises, and refuses what the SQL path
// cannot do.
func TestScript(t *testing.T) {
	s := &Spec{Quantity: "units", Price: "price", Shifters: List{"bean", "freight"}, FE: List{"product*store", "week"}, Cluster: List{"store"}}
	ansi, err := Script(s, SQLSource{Table: "retail.sales"}, ANSI, false)
	if err != nil {
		t.Fatal(err)
	}
	pg, err := Script(s, SQLSource{Table: "retail.sales"}, Postgres, false)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`FROM "retail"."sales"`, "CREATE TABLE piv_rows AS", "piv_a0_50", "piv_la0_1_4", "DROP TABLE IF EXISTS piv_rows;", `CAST("product" AS VARCHAR(1000)) || '|' || CAST("store" AS VARCHAR(1000)) AS k0`} {
		if !strings.Contains(ansi, want) {
			t.Errorf("ansi script lacks %q", want)
		}
	}
	for _, bad := range []string{"TEMPORARY", "SET ", "ANALYZE"} {
		if strings.Contains(ansi, bad) {
			t.Errorf("ansi script holds %q", bad)
		}
	}
	for _, want := range []string{"CREATE TEMPORARY TABLE piv_rows AS", "SET enable_partitionwise_aggregate = on", "ANALYZE piv_rows", "SET jit = off"} {
		if !strings.Contains(pg, want) {
			t.Errorf("postgres script lacks %q", want)
		}
	}
	// Every table made is dropped at the end.
	for _, line := range strings.Split(ansi, "\n") {
		if name, ok := strings.CutPrefix(line, "CREATE TABLE "); ok {
			name = strings.TrimSuffix(name, " AS")
			if !strings.Contains(ansi, "DROP TABLE IF EXISTS "+name+";") {
				t.Errorf("table %s is not dropped", name)
			}
		}
	}
	s.MaxSweeps = 7
	few, _ := Script(s, SQLSource{Query: "SELECT * FROM sales;"}, ANSI, false)
	if !strings.Contains(few, "piv_a1_7") || strings.Contains(few, "piv_a1_8") || !strings.Contains(few, "FROM (SELECT * FROM sales) AS piv_src") {
		t.Error("--max-sweeps 7 does not write 7 sweeps over the query")
	}

	for _, c := range []struct {
		spec Spec
		hc1  bool
		says string
	}{
		{Spec{Quantity: "q", Price: "p", Shifters: List{"z"}, Derive: List{"x=log(q)"}}, false, "--query"},
		{Spec{Quantity: "q", Price: "p", Shifters: List{"z"}, Cross: true, Product: "product"}, false, "--by"},
		{Spec{Outcome: "y", Endogenous: List{"x"}, Exogenous: List{"a", "b", "c", "d", "e", "f", "g"}, Instruments: List{"z"}}, true, "--vcov cluster"},
	} {
		_, err := Script(&c.spec, SQLSource{Table: "t"}, ANSI, c.hc1)
		if !errors.Is(err, ErrSpec) || !strings.Contains(err.Error(), c.says) {
			t.Errorf("%+v: %v, want a spec error mentioning %s", c.spec, err, c.says)
		}
	}
	if _, err := Script(&Spec{Quantity: "q", Price: "p", Shifters: List{"z"}}, SQLSource{}, ANSI, false); !errors.Is(err, ErrSpec) {
		t.Errorf("no source: %v", err)
	}
}

// A sum given twice is refused with both lines.
func TestReadMomentsDuplicate(t *testing.T) {
	_, err := ReadMoments(strings.NewReader("block,key,term,value\ncluster:0,S1,n,3\ncluster:0,S2,n,4\ncluster:0,S1,n,5\n"), "m.csv")
	var pe *ParseError
	if !errors.As(err, &pe) || pe.Line != 4 || !strings.Contains(err.Error(), "line 2") {
		t.Errorf("duplicate sum: %v", err)
	}
}
