package demand

import (
	"bytes"
	"encoding/csv"
	"errors"
	"io"
	"math"
	"strconv"
	"testing"
)

// FuzzReadCSV checks, for any input and delimiter choice, that ReadCSV
// does not panic; that a panel it returns is consistent (column lengths,
// codes within levels, increasing lines); that 1 and 3 workers give the
// same panel or the same error; and that whenever encoding/csv reads the
// input as a valid file with the header's field count, ReadCSV reads the
// same cells (encoding/csv is the independent reference).
func FuzzReadCSV(f *testing.F) {
	for _, seed := range []string{
		"a,b\n1,2\n3,4\n",
		"a,b\r\n1,2\r\n3,4",
		"\xEF\xBB\xBFa,b\n\"x,y\",\"say \"\"hi\"\"\"\n",
		"a,b\n\"two\nlines\",1\n\n\n2,3\n",
		"a,b\n1,\"unclosed\n2,3\n",
		"a,b\n1,x\"y\n",
		"a,b\n1\n1,2,3\n",
		"a,a\n1,2\n",
		",\n\n",
		"p\n1\nn/a\n3\n\"4\"\n",
		"a;b\n1,5;2\n\"x;y\";\n",
		"a\tb\n\t\n 1 \t \"q\" \n",
		"a,b\n \"x\" , \"y\"\"\" \r\n",
		"\"",
		"a\n\r\n\r\r\n",
	} {
		for delim := range byte(3) {
			f.Add([]byte(seed), delim)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte, pick byte) {
		delim := []byte{',', ';', '\t'}[pick%3]
		in := bytes.Clone(data)
		p1, err1 := ReadCSV(data, "f.csv", ReadOptions{Delimiter: delim, Workers: 1})
		p3, err3 := ReadCSV(data, "f.csv", ReadOptions{Delimiter: delim, Workers: 3})
		if !bytes.Equal(in, data) {
			t.Fatal("input modified")
		}
		if (err1 == nil) != (err3 == nil) {
			t.Fatalf("1 worker: %v; 3 workers: %v", err1, err3)
		}
		if err1 != nil {
			if err1.Error() != err3.Error() {
				t.Fatalf("errors differ:\n%v\n%v", err1, err3)
			}
			var pe *ParseError
			if !errors.As(err1, &pe) || pe.Line < 1 {
				t.Fatalf("error %v is not a *ParseError with a line", err1)
			}
			if !errors.Is(err1, ErrHeader) && !errors.Is(err1, ErrQuote) && !errors.Is(err1, ErrFieldCount) {
				t.Fatalf("error %v wraps no CSV sentinel", err1)
			}
		} else {
			checkConsistent(t, p1)
			if d := panelDiff(p1, p3); d != "" {
				t.Fatalf("1 and 3 workers differ: %s", d)
			}
		}

		// Reference: encoding/csv on the same bytes (less the byte-order
		// mark), every record with the header's field count.
		cr := csv.NewReader(bytes.NewReader(bytes.TrimPrefix(data, csvBOM)))
		cr.Comma = rune(delim)
		var recs [][]string
		var lines []int
		for {
			rec, err := cr.Read()
			if err == io.EOF {
				break
			}
			if err != nil {
				return
			}
			line, _ := cr.FieldPos(0)
			recs, lines = append(recs, rec), append(lines, line)
		}
		if len(recs) == 0 || errors.Is(err1, ErrHeader) {
			return
		}
		if err1 != nil {
			t.Fatalf("encoding/csv reads %q, ReadCSV fails: %v", data, err1)
		}
		// encoding/csv keeps lines of spaces as records; ReadCSV skips
		// them. Compare only when there are none.
		for _, rec := range recs[1:] {
			if len(rec) == 1 && trimRef(rec[0]) == "" {
				return
			}
		}
		if p1.N != len(recs)-1 {
			t.Fatalf("%q: N = %d, encoding/csv finds %d records", data, p1.N, len(recs)-1)
		}
		for j, name := range p1.Columns {
			if name != trimRef(recs[0][j]) {
				t.Fatalf("header %q, encoding/csv %q", p1.Columns, recs[0])
			}
		}
		for i, rec := range recs[1:] {
			if p1.Line(i) != lines[i+1] {
				t.Fatalf("row %d on line %d, encoding/csv says %d", i, p1.Line(i), lines[i+1])
			}
			for j, name := range p1.Columns {
				raw := trimRef(rec[j])
				if x, ok := p1.Num[name]; ok {
					want := math.NaN()
					if raw != "" {
						var err error
						if want, err = strconv.ParseFloat(raw, 64); err != nil {
							t.Fatalf("row %d %s: %q in a numeric column", i, name, raw)
						}
					}
					if math.Float64bits(x[i]) != math.Float64bits(want) && !(math.IsNaN(x[i]) && math.IsNaN(want)) {
						t.Fatalf("row %d %s: %v, encoding/csv text %q", i, name, x[i], raw)
					}
					continue
				}
				tc := p1.Text[name]
				got := ""
				if c := tc.Codes[i]; c >= 0 {
					got = tc.Levels[c]
				}
				if got != raw {
					t.Fatalf("row %d %s: %q, encoding/csv %q", i, name, got, raw)
				}
			}
		}
	})
}

// checkConsistent checks the invariants of a panel read from CSV.
func checkConsistent(t *testing.T, p *Panel) {
	t.Helper()
	if len(p.Columns) == 0 || len(p.Columns) != len(p.Num)+len(p.Text) {
		t.Fatalf("columns %q: %d numeric, %d text", p.Columns, len(p.Num), len(p.Text))
	}
	seen := map[string]bool{}
	for _, name := range p.Columns {
		if name == "" || seen[name] || trimRef(name) != name {
			t.Fatalf("bad column name %q in %q", name, p.Columns)
		}
		seen[name] = true
		if x, ok := p.Num[name]; ok {
			if len(x) != p.N {
				t.Fatalf("%s: %d values, N = %d", name, len(x), p.N)
			}
			continue
		}
		tc := p.Text[name]
		if tc == nil || len(tc.Codes) != p.N {
			t.Fatalf("%s: text column missing or of wrong length", name)
		}
		used := make([]bool, len(tc.Levels))
		numeric := 0
		for _, c := range tc.Codes {
			if c < -1 || int(c) >= len(tc.Levels) {
				t.Fatalf("%s: code %d with %d levels", name, c, len(tc.Levels))
			}
			if c >= 0 {
				used[c] = true
				if _, err := strconv.ParseFloat(tc.Levels[c], 64); err == nil {
					numeric++
				}
			}
		}
		distinct := map[string]bool{}
		for l, s := range tc.Levels {
			if !used[l] || s == "" || distinct[s] {
				t.Fatalf("%s: level %d %q unused, empty or repeated", name, l, s)
			}
			distinct[s] = true
		}
		if numeric != tc.NumericCells || tc.FirstNonNumber.Line < 2 || tc.FirstNonNumber.Text == "" {
			t.Fatalf("%s: NumericCells %d (counted %d), FirstNonNumber %+v", name, tc.NumericCells, numeric, tc.FirstNonNumber)
		}
	}
	if p.Lines != nil {
		if len(p.Lines) != p.N {
			t.Fatalf("%d lines for %d rows", len(p.Lines), p.N)
		}
		for i, l := range p.Lines {
			if l < 2 || (i > 0 && l <= p.Lines[i-1]) {
				t.Fatalf("Lines %v not increasing from 2", p.Lines)
			}
		}
	}
}
