package demand

import (
	"bytes"
	"encoding/csv"
	"errors"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

var nan = math.NaN()

// wantCol is the expected content of one column: num for a numeric column
// (NaN for missing), or levels and codes for a text column.
type wantCol struct {
	name   string
	num    []float64
	levels []string
	codes  []int32
}

func sameFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) && !(math.IsNaN(a[i]) && math.IsNaN(b[i])) {
			return false
		}
	}
	return true
}

func checkPanel(t *testing.T, p *Panel, n int, cols []wantCol, lines []int) {
	t.Helper()
	if p.N != n {
		t.Fatalf("N = %d, want %d", p.N, n)
	}
	if len(p.Columns) != len(cols) {
		t.Fatalf("columns %q, want %d columns", p.Columns, len(cols))
	}
	for j, c := range cols {
		if p.Columns[j] != c.name {
			t.Errorf("column %d is %q, want %q", j, p.Columns[j], c.name)
			continue
		}
		if c.levels == nil && c.codes == nil {
			x, ok := p.Num[c.name]
			if !ok {
				t.Errorf("column %q is not numeric (text levels %q)", c.name, p.Text[c.name].Levels)
				continue
			}
			if !sameFloats(x, c.num) {
				t.Errorf("column %q = %v, want %v", c.name, x, c.num)
			}
			continue
		}
		tc, ok := p.Text[c.name]
		if !ok {
			t.Errorf("column %q is not text (numbers %v)", c.name, p.Num[c.name])
			continue
		}
		if !equalStrings(tc.Levels, c.levels) {
			t.Errorf("column %q levels %q, want %q", c.name, tc.Levels, c.levels)
		}
		if !equalInt32(tc.Codes, c.codes) {
			t.Errorf("column %q codes %v, want %v", c.name, tc.Codes, c.codes)
		}
	}
	if lines == nil {
		if p.Lines != nil {
			t.Errorf("Lines = %v, want nil (row i on line i+2)", p.Lines)
		}
	} else if !equalInts(p.Lines, lines) {
		t.Errorf("Lines = %v, want %v", p.Lines, lines)
	}
}

func equalStrings(a, b []string) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func equalInt32(a, b []int32) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func equalInts(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func TestReadCSVFormats(t *testing.T) {
	// Sources: RFC 4180 section 2 (rules 1-7: records, optional final
	// line break, header, delimiters, quoting, line breaks and doubled
	// quotes inside quotes); common practice for the UTF-8 byte-order
	// mark, ';' and tab delimiters, trimming and empty cells as missing.
	for _, test := range []struct {
		name  string
		in    string
		delim byte
		n     int
		cols  []wantCol
		lines []int
	}{
		{
			name: "LF", // RFC 4180 rule 1 with LF line ends (common practice)
			in:   "store,price\nS1,1.5\nS2,2\n",
			n:    2,
			cols: []wantCol{{name: "store", levels: []string{"S1", "S2"}, codes: []int32{0, 1}}, {name: "price", num: []float64{1.5, 2}}},
		},
		{
			name: "CRLF", // RFC 4180 rule 1
			in:   "store,price\r\nS1,1.5\r\nS2,2\r\n",
			n:    2,
			cols: []wantCol{{name: "store", levels: []string{"S1", "S2"}, codes: []int32{0, 1}}, {name: "price", num: []float64{1.5, 2}}},
		},
		{
			name: "no newline at end", // RFC 4180 rule 2
			in:   "a,b\n1,2\n3,4",
			n:    2,
			cols: []wantCol{{name: "a", num: []float64{1, 3}}, {name: "b", num: []float64{2, 4}}},
		},
		{
			name: "no newline at end, last cell empty",
			in:   "a,b\n1,2\n3,",
			n:    2,
			cols: []wantCol{{name: "a", num: []float64{1, 3}}, {name: "b", num: []float64{2, nan}}},
		},
		{
			name: "byte-order mark", // common practice: spreadsheet exports start with EF BB BF
			in:   "\xEF\xBB\xBFweek,units\n1,10\n",
			n:    1,
			cols: []wantCol{{name: "week", num: []float64{1}}, {name: "units", num: []float64{10}}},
		},
		{
			name: "trailing empty lines ignored",
			in:   "a,b\n1,2\n\n\r\n  \n",
			n:    1,
			cols: []wantCol{{name: "a", num: []float64{1}}, {name: "b", num: []float64{2}}},
		},
		{
			name:  "blank line inside is skipped and lines kept",
			in:    "a,b\n1,2\n\n3,4\n",
			n:     2,
			cols:  []wantCol{{name: "a", num: []float64{1, 3}}, {name: "b", num: []float64{2, 4}}},
			lines: []int{2, 4},
		},
		{
			name: "quoted delimiter", // RFC 4180 rule 6
			in:   "name,price\n\"Cold brew, 330ml\",2.49\n",
			n:    1,
			cols: []wantCol{{name: "name", levels: []string{"Cold brew, 330ml"}, codes: []int32{0}}, {name: "price", num: []float64{2.49}}},
		},
		{
			name: "doubled quotes", // RFC 4180 rule 7
			in:   "note,x\n\"say \"\"hi\"\"\",1\n\"\"\"\",2\n",
			n:    2,
			cols: []wantCol{{name: "note", levels: []string{`say "hi"`, `"`}, codes: []int32{0, 1}}, {name: "x", num: []float64{1, 2}}},
		},
		{
			name:  "quoted line break", // RFC 4180 rule 6
			in:    "note,x\n\"two\nlines\",1\nplain,2\n",
			n:     2,
			cols:  []wantCol{{name: "note", levels: []string{"two\nlines", "plain"}, codes: []int32{0, 1}}, {name: "x", num: []float64{1, 2}}},
			lines: []int{2, 4},
		},
		{
			name:  "quoted CRLF line break reads as LF", // as encoding/csv does
			in:    "note,x\r\n\"two\r\nlines\",1\r\n\"a\"\"\r\n\r\nb\",2\r\n",
			n:     2,
			cols:  []wantCol{{name: "note", levels: []string{"two\nlines", "a\"\n\nb"}, codes: []int32{0, 1}}, {name: "x", num: []float64{1, 2}}},
			lines: []int{2, 4},
		},
		{
			name: "quoted numbers stay numeric", // RFC 4180 rule 5
			in:   "a,b\n\"1.25\",\"-3e2\"\n",
			n:    1,
			cols: []wantCol{{name: "a", num: []float64{1.25}}, {name: "b", num: []float64{-300}}},
		},
		{
			name: "quoted header names, trimmed",
			in:   "\" State \", Year ,\"Avg Price\"\nAL,1985,1\n",
			n:    1,
			cols: []wantCol{{name: "State", levels: []string{"AL"}, codes: []int32{0}}, {name: "Year", num: []float64{1985}}, {name: "Avg Price", num: []float64{1}}},
		},
		{
			name: "spaces around cells and quotes",
			in:   "a,b,c\n  1.5 , x y , \"q\" \n",
			n:    1,
			cols: []wantCol{{name: "a", num: []float64{1.5}}, {name: "b", levels: []string{"x y"}, codes: []int32{0}}, {name: "c", levels: []string{"q"}, codes: []int32{0}}},
		},
		{
			name: "missing cells",
			in:   "store,price,units\nS1,,3\n,2.5,\n\"\",\" \",4\nS1,1,5\n",
			n:    4,
			cols: []wantCol{
				{name: "store", levels: []string{"S1"}, codes: []int32{0, -1, -1, 0}},
				{name: "price", num: []float64{nan, 2.5, nan, 1}},
				{name: "units", num: []float64{3, nan, 4, 5}},
			},
		},
		{
			name: "all cells missing is a numeric column of NaN",
			in:   "a,b\n1,\n2,\n",
			n:    2,
			cols: []wantCol{{name: "a", num: []float64{1, 2}}, {name: "b", num: []float64{nan, nan}}},
		},
		{
			name: "levels in order of first appearance",
			in:   "p\nlatte\nmocha\nlatte\nblack\nmocha\n",
			n:    5,
			cols: []wantCol{{name: "p", levels: []string{"latte", "mocha", "black"}, codes: []int32{0, 1, 0, 2, 1}}},
		},
		{
			name:  "semicolon",
			in:    "store;price\nS1;1,5\n\"S;2\";2\n",
			delim: ';',
			n:     2,
			cols:  []wantCol{{name: "store", levels: []string{"S1", "S;2"}, codes: []int32{0, 1}}, {name: "price", levels: []string{"1,5", "2"}, codes: []int32{0, 1}}},
		},
		{
			name:  "tab",
			in:    "store\tprice\tunits\nS1\t1.5\t\n\t\t\nS2\t\"a\tb\"\t7\n",
			delim: '\t',
			n:     3,
			cols: []wantCol{
				{name: "store", levels: []string{"S1", "S2"}, codes: []int32{0, -1, 1}},
				{name: "price", levels: []string{"1.5", "a\tb"}, codes: []int32{0, -1, 1}},
				{name: "units", num: []float64{nan, nan, 7}},
			},
		},
		{
			name: "number forms are those of strconv.ParseFloat",
			in:   "x\n1e3\n-0\n.5\n0x1p-2\nInf\n+7\n",
			n:    6,
			cols: []wantCol{{name: "x", num: []float64{1000, math.Copysign(0, -1), 0.5, 0.25, math.Inf(1), 7}}},
		},
		{
			name: "header only",
			in:   "a,b\n",
			n:    0,
			cols: []wantCol{{name: "a", num: []float64{}}, {name: "b", num: []float64{}}},
		},
		{
			name: "header only, no newline",
			in:   "a,b",
			n:    0,
			cols: []wantCol{{name: "a", num: []float64{}}, {name: "b", num: []float64{}}},
		},
		{
			name:  "header with quoted line break",
			in:    "\"a\nb\",c\n1,2\n",
			n:     1,
			cols:  []wantCol{{name: "a\nb", num: []float64{1}}, {name: "c", num: []float64{2}}},
			lines: []int{3},
		},
	} {
		for _, workers := range []int{1, 2, 3} {
			data := []byte(test.in)
			p, err := ReadCSV(data, "t.csv", ReadOptions{Delimiter: test.delim, Workers: workers})
			if err != nil {
				t.Errorf("%s, %d workers: %v", test.name, workers, err)
				continue
			}
			if string(data) != test.in {
				t.Errorf("%s: input modified", test.name)
			}
			if p.Source != "t.csv" {
				t.Errorf("%s: Source = %q", test.name, p.Source)
			}
			t.Run(test.name+"/workers="+strconv.Itoa(workers), func(t *testing.T) {
				checkPanel(t, p, test.n, test.cols, test.lines)
			})
		}
	}
}

func TestReadCSVErrors(t *testing.T) {
	// Sources: RFC 4180 section 2 rules 5-7 (where quotes may appear) and
	// rule 4 (each line should contain the same number of fields);
	// expected positions are counted by hand from the inputs.
	for _, test := range []struct {
		name    string
		in      string
		delim   byte
		workers int
		want    ParseError // File is always "bad.csv"; Hint is checked by substring
		hint    string
	}{
		{name: "empty file", in: "",
			want: ParseError{Line: 1, Err: ErrHeader}, hint: "file is empty"},
		{name: "only a byte-order mark", in: "\xEF\xBB\xBF",
			want: ParseError{Line: 1, Err: ErrHeader}, hint: "file is empty"},
		{name: "blank first line", in: "\n1,2\n",
			want: ParseError{Line: 1, Column: 1, Err: ErrHeader}, hint: "first line is blank"},
		{name: "empty header name", in: "a, ,c\n1,2,3\n",
			want: ParseError{Line: 1, Column: 2, Err: ErrHeader}, hint: "column 2 has no name"},
		{name: "trailing delimiter in header", in: "a,b,\n1,2,\n",
			want: ParseError{Line: 1, Column: 3, Err: ErrHeader}, hint: "column 3 has no name"},
		{name: "duplicate header name", in: "price,units, price\n1,2,3\n",
			want: ParseError{Line: 1, Column: 3, Name: "price", Err: ErrHeader}, hint: "column 1 has the same name"},
		{name: "quote problem in header", in: "a,b\"c\n1,2\n",
			want: ParseError{Line: 1, Column: 2, Text: `b"c`, Err: ErrQuote}, hint: "a quote may only enclose a whole field"},
		{name: "bare quote", in: "store,name\nS1,ok\nS2,12\" can\n",
			want: ParseError{Line: 3, Column: 2, Name: "name", Text: `12" can`, Err: ErrQuote}, hint: "doubling quotes"},
		{name: "bare quote after CRLF records", in: "a,b\r\n1,2\r\n3,x\"y\r\n",
			want: ParseError{Line: 3, Column: 2, Name: "b", Text: `x"y`, Err: ErrQuote}},
		{name: "unclosed quote", in: "a,b\n1,2\n\"open,3\n4,5\n",
			want: ParseError{Line: 3, Column: 1, Name: "a", Text: `"open,3`, Err: ErrQuote}, hint: "never closed"},
		{name: "unclosed quote in last field", in: "a,b\n1,\"2",
			want: ParseError{Line: 2, Column: 2, Name: "b", Text: `"2`, Err: ErrQuote}, hint: "never closed"},
		{name: "text after closing quote", in: "a,b\n1,\"x\"y\n",
			want: ParseError{Line: 2, Column: 2, Name: "b", Text: "y", Err: ErrQuote}, hint: "closing quote must be followed"},
		{name: "text after closing quote on the field's second line", in: "a,b\n1,2\n3,\"x\ny\"z\n",
			want: ParseError{Line: 4, Column: 2, Name: "b", Text: "z", Err: ErrQuote}},
		{name: "too few fields", in: "a,b,c\n1,2,3\n4,5\n",
			want: ParseError{Line: 3, Err: ErrFieldCount}, hint: "found 2 fields, the header has 3"},
		{name: "too many fields", in: "a,b\n1,2\n3,4,5,6\n",
			want: ParseError{Line: 3, Err: ErrFieldCount}, hint: "found 4 fields, the header has 2"},
		{name: "too many fields: trailing delimiter", in: "a,b\n1,2,\n",
			want: ParseError{Line: 2, Err: ErrFieldCount}, hint: "found 3 fields, the header has 2"},
		{name: "decimal commas in a comma file", in: "a,b\n1,5,2,5\n",
			want: ParseError{Line: 2, Err: ErrFieldCount}, hint: "found 4 fields, the header has 2"},
		{name: "wrong delimiter chosen", in: "a;b\n1;2\n", delim: ',',
			want: ParseError{}, hint: ""}, // not an error: one column "a;b" (checked below)
		{name: "field count after a quoted line break", in: "a,b\n\"x\ny\",1\n2\n",
			want: ParseError{Line: 4, Err: ErrFieldCount}, hint: "found 1 field, the header has 2"},
		{name: "field count after a skipped blank line", in: "a,b\n1,2\n\n3\n",
			want: ParseError{Line: 4, Err: ErrFieldCount}},
		{name: "tab file read as tab", in: "a\tb\n1\t2\t3\n", delim: '\t',
			want: ParseError{Line: 2, Err: ErrFieldCount}, hint: "found 3 fields, the header has 2"},
		{name: "earliest error wins, 1 worker", in: "a,b\n1,2\n3\n4,5\"\n6,7\n", workers: 1,
			want: ParseError{Line: 3, Err: ErrFieldCount}},
		{name: "earliest error wins, 2 workers", in: "a,b\n1,2\n3\n4,5\"\n6,7\n", workers: 2,
			want: ParseError{Line: 3, Err: ErrFieldCount}},
		{name: "earliest error wins, 4 workers", in: "a,b\n1,2\n3\n4,5\"\n6,7\n", workers: 4,
			want: ParseError{Line: 3, Err: ErrFieldCount}},
		{name: "unclosed quote swallows the rest, 3 workers", in: "a,b\n1,\"2\n3,4\n5,6\n7,8\n", workers: 3,
			want: ParseError{Line: 2, Column: 2, Name: "b", Text: `"2`, Err: ErrQuote}},
	} {
		p, err := ReadCSV([]byte(test.in), "bad.csv", ReadOptions{Delimiter: test.delim, Workers: test.workers})
		if test.want.Err == nil {
			if err != nil || !p.Has("a;b") || p.N != 1 {
				t.Errorf("%s: got %v, %v", test.name, p, err)
			}
			continue
		}
		var pe *ParseError
		if !errors.As(err, &pe) {
			t.Errorf("%s: error %v is not a *ParseError", test.name, err)
			continue
		}
		if !errors.Is(err, test.want.Err) {
			t.Errorf("%s: error %v does not wrap %v", test.name, err, test.want.Err)
		}
		if pe.File != "bad.csv" || pe.Line != test.want.Line || pe.Column != test.want.Column || pe.Name != test.want.Name || pe.Text != test.want.Text {
			t.Errorf("%s: got file %q line %d column %d name %q text %q, want line %d column %d name %q text %q",
				test.name, pe.File, pe.Line, pe.Column, pe.Name, pe.Text, test.want.Line, test.want.Column, test.want.Name, test.want.Text)
		}
		if !strings.Contains(pe.Hint, test.hint) || pe.Hint == "" {
			t.Errorf("%s: hint %q does not contain %q", test.name, pe.Hint, test.hint)
		}
		if !strings.HasPrefix(err.Error(), "bad.csv: line "+strconv.Itoa(test.want.Line)) {
			t.Errorf("%s: message %q does not start with the file and line", test.name, err)
		}
	}
}

func TestReadCSVBadDelimiter(t *testing.T) {
	for _, d := range []byte{'"', '\n', '\r'} {
		if _, err := ReadCSV([]byte("a,b\n1,2\n"), "x.csv", ReadOptions{Delimiter: d}); err == nil || !strings.Contains(err.Error(), "delimiter") {
			t.Errorf("delimiter %q: error %v, want one naming the delimiter", d, err)
		}
	}
}

// TestReadCSVStrayText checks that a numeric column with one non-number
// becomes text without losing any cell, and that Panel.Float then names the
// line of the stray cell. The stray cell is placed inside and beyond the
// rows used to guess column types.
func TestReadCSVStrayText(t *testing.T) {
	for _, stray := range []int{0, 5, csvSniffRows - 1, csvSniffRows, 999} {
		var b strings.Builder
		b.WriteString("store,price,units\n")
		const n = 1000
		for i := range n {
			price := strconv.FormatFloat(1+float64(i%37)/4, 'f', -1, 64)
			if i == stray {
				price = " n/a "
			}
			if i == 3 && stray != 3 {
				price = ""
			}
			b.WriteString("S" + strconv.Itoa(i%7) + "," + price + "," + strconv.Itoa(i) + "\n")
		}
		for _, workers := range []int{1, 2, 7} {
			p, err := ReadCSV([]byte(b.String()), "prices.csv", ReadOptions{Workers: workers})
			if err != nil {
				t.Fatal(err)
			}
			tc, ok := p.Text["price"]
			if !ok {
				t.Fatalf("stray %d: price column is numeric", stray)
			}
			// Every cell keeps its text, numbers included.
			for i := range n {
				want := strconv.FormatFloat(1+float64(i%37)/4, 'f', -1, 64)
				if i == stray {
					want = "n/a"
				}
				got := ""
				if i == 3 && stray != 3 {
					if tc.Codes[i] != -1 {
						t.Errorf("stray %d: empty cell has code %d", stray, tc.Codes[i])
					}
					continue
				}
				if tc.Codes[i] >= 0 {
					got = tc.Levels[tc.Codes[i]]
				}
				if got != want {
					t.Fatalf("stray %d, %d workers: row %d reads %q, want %q", stray, workers, i, got, want)
				}
			}
			wantNumeric := n - 1 - 1 // all but the stray and the empty cell
			if tc.NumericCells != wantNumeric {
				t.Errorf("stray %d: NumericCells = %d, want %d", stray, tc.NumericCells, wantNumeric)
			}
			if tc.FirstNonNumber != (CellRef{Line: stray + 2, Text: "n/a"}) {
				t.Errorf("stray %d: FirstNonNumber = %+v", stray, tc.FirstNonNumber)
			}
			_, err = p.Float("price")
			var ne *NotNumericError
			if !errors.As(err, &ne) || !errors.Is(err, ErrNotNumeric) {
				t.Fatalf("Float: %v, want a *NotNumericError", err)
			}
			if ne.Cell.Line != stray+2 || ne.Source != "prices.csv" || ne.Column != "price" {
				t.Errorf("stray %d: NotNumericError %+v", stray, ne)
			}
			if !strings.Contains(err.Error(), "line "+strconv.Itoa(stray+2)) {
				t.Errorf("message %q does not name line %d", err, stray+2)
			}
			if u, err := p.Float("units"); err != nil || u[n-1] != n-1 {
				t.Errorf("units: %v", err)
			}
		}
	}
}

// TestReadCSVTextFirstNonNumber: in a text column that is text from its
// first row, FirstNonNumber is the first cell that is not a number, even
// when numbers come before it, and when that cell is in a later worker's
// range.
func TestReadCSVTextFirstNonNumber(t *testing.T) {
	in := "id\n7\n8\n7\nx1\n9\nx1\nx2\n"
	for _, workers := range []int{1, 2, 3, 7} {
		p, err := ReadCSV([]byte(in), "ids.csv", ReadOptions{Workers: workers})
		if err != nil {
			t.Fatal(err)
		}
		tc := p.Text["id"]
		if tc == nil {
			t.Fatal("id is not text")
		}
		if tc.FirstNonNumber != (CellRef{Line: 5, Text: "x1"}) || tc.NumericCells != 4 {
			t.Errorf("%d workers: FirstNonNumber %+v, NumericCells %d; want line 5 \"x1\", 4", workers, tc.FirstNonNumber, tc.NumericCells)
		}
		if !equalStrings(tc.Levels, []string{"7", "8", "x1", "9", "x2"}) || !equalInt32(tc.Codes, []int32{0, 1, 0, 2, 3, 2, 4}) {
			t.Errorf("%d workers: levels %q codes %v", workers, tc.Levels, tc.Codes)
		}
	}
}

func TestReadCSVFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "coffee.csv")
	content := []byte("product;store;price\r\ncold brew;S1;2,49\r\n")
	if err := os.WriteFile(path, content, 0o444); err != nil {
		t.Fatal(err)
	}
	before, _ := os.Stat(path)
	p, err := ReadCSVFile(path, ReadOptions{Delimiter: ';'})
	if err != nil {
		t.Fatal(err)
	}
	if p.Source != path || p.N != 1 || p.Text["price"].Levels[0] != "2,49" {
		t.Errorf("got %+v", p)
	}
	after, _ := os.Stat(path)
	got, _ := os.ReadFile(path)
	if !bytes.Equal(got, content) || !after.ModTime().Equal(before.ModTime()) {
		t.Error("file was modified")
	}
	_, err = ReadCSVFile(filepath.Join(dir, "missing.csv"), ReadOptions{})
	if !errors.Is(err, fs.ErrNotExist) || !strings.Contains(err.Error(), "missing.csv") {
		t.Errorf("missing file: %v", err)
	}
	// Errors carry the path.
	bad := filepath.Join(dir, "bad.csv")
	if err := os.WriteFile(bad, []byte("a,b\n1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = ReadCSVFile(bad, ReadOptions{})
	var pe *ParseError
	if !errors.As(err, &pe) || pe.File != bad || pe.Line != 2 {
		t.Errorf("bad file: %v", err)
	}
}

// TestReadCSVTestdata reads the small files in testdata/ (names starting
// with good_ or bad_) and checks that good files read and bad files fail
// with the sentinel in their name.
func TestReadCSVTestdata(t *testing.T) {
	for _, test := range []struct {
		file  string
		n     int
		err   error
		line  int
		delim byte
	}{
		{file: "good_crlf_bom.csv", n: 3},
		{file: "good_quoted.csv", n: 3},
		{file: "good_semicolon.csv", n: 2, delim: ';'},
		{file: "good_tab.tsv", n: 2, delim: '\t'},
		{file: "bad_bare_quote.csv", err: ErrQuote, line: 3},
		{file: "bad_unclosed_quote.csv", err: ErrQuote, line: 3},
		{file: "bad_field_count.csv", err: ErrFieldCount, line: 4},
		{file: "bad_duplicate_header.csv", err: ErrHeader, line: 1},
	} {
		path := filepath.Join("testdata", test.file)
		p, err := ReadCSVFile(path, ReadOptions{Delimiter: test.delim})
		if test.err == nil {
			if err != nil {
				t.Errorf("%s: %v", test.file, err)
			} else if p.N != test.n {
				t.Errorf("%s: N = %d, want %d", test.file, p.N, test.n)
			}
			continue
		}
		var pe *ParseError
		if !errors.Is(err, test.err) || !errors.As(err, &pe) || pe.Line != test.line || pe.File != path {
			t.Errorf("%s: error %v, want %v on line %d", test.file, err, test.err, test.line)
		}
	}
}

// genCell returns the text of a generated cell of the given kind. Kinds:
// 0 price-like numbers in several notations, 1 store ids, 2 free text with
// delimiters, quotes and line breaks, 3 integers, 4 numbers with a stray
// word late in the file.
func genCell(rng *rand.Rand, kind, row, rows int) string {
	if rng.IntN(50) == 0 {
		return "" // missing
	}
	switch kind {
	case 0:
		v := rng.NormFloat64() * math.Pow(10, float64(rng.IntN(12)-6))
		switch rng.IntN(4) {
		case 0:
			return strconv.FormatFloat(v, 'g', -1, 64)
		case 1:
			return strconv.FormatFloat(v, 'e', rng.IntN(17), 64)
		case 2:
			return strconv.FormatFloat(v, 'f', rng.IntN(10), 64)
		}
		return strconv.FormatFloat(v, 'g', 17, 64)
	case 1:
		return "S" + strconv.Itoa(rng.IntN(300))
	case 2:
		words := []string{"cold brew", "oat, vanilla", `say "hi"`, "two\nlines", "mocha", "a;b", "tab\there", "  padded  "}
		return strings.TrimSpace(words[rng.IntN(len(words))])
	case 3:
		return strconv.Itoa(rng.IntN(2000) - 1000)
	}
	if row == rows*3/4 {
		return "n/a"
	}
	return strconv.FormatFloat(rng.Float64()*10, 'f', 3, 64)
}

// genCSV returns a generated file and its cells, written by encoding/csv.
func genCSV(seed uint64, rows int, crlf bool) ([]byte, [][]string) {
	rng := rand.New(rand.NewPCG(seed, 1))
	kinds := []int{1, 0, 2, 3, 4, 0}
	header := []string{"store", "price", "note", "week", "cost", "cost2"}
	cells := make([][]string, rows)
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.UseCRLF = crlf
	_ = w.Write(header)
	for i := range rows {
		rec := make([]string, len(kinds))
		for j, k := range kinds {
			rec[j] = genCell(rng, k, i, rows)
		}
		cells[i] = rec
		_ = w.Write(rec)
	}
	w.Flush()
	return buf.Bytes(), cells
}

// TestReadCSVWorkersBitIdentical parses a generated file of 50,000 rows with
// 1, 2 and 7 workers, requires bit-identical columns, and checks every cell
// against strconv.ParseFloat of the text written (numeric columns) or the
// text itself (text columns), and every row's line against encoding/csv.
func TestReadCSVWorkersBitIdentical(t *testing.T) {
	const rows = 50000
	for _, crlf := range []bool{false, true} {
		data, cells := genCSV(7, rows, crlf)
		var ps []*Panel
		for _, workers := range []int{1, 2, 7} {
			p, err := ReadCSV(data, "gen.csv", ReadOptions{Workers: workers})
			if err != nil {
				t.Fatalf("%d workers: %v", workers, err)
			}
			ps = append(ps, p)
		}
		p := ps[0]
		for k, q := range ps[1:] {
			if d := panelDiff(p, q); d != "" {
				t.Fatalf("crlf %v: 1 worker and %d workers differ: %s", crlf, []int{2, 7}[k], d)
			}
		}
		if p.N != rows {
			t.Fatalf("N = %d, want %d", p.N, rows)
		}
		for _, name := range []string{"store", "note", "cost"} {
			if _, ok := p.Text[name]; !ok {
				t.Errorf("%s should be text", name)
			}
		}
		for _, name := range []string{"price", "week", "cost2"} {
			if _, ok := p.Num[name]; !ok {
				t.Errorf("%s should be numeric", name)
			}
		}
		if tc := p.Text["cost"]; tc.FirstNonNumber.Text != "n/a" {
			t.Errorf("cost FirstNonNumber = %+v", tc.FirstNonNumber)
		}
		// Independent reference: encoding/csv for lines, the written
		// cells for values.
		cr := csv.NewReader(bytes.NewReader(data))
		if _, err := cr.Read(); err != nil {
			t.Fatal(err)
		}
		for i := range rows {
			if _, err := cr.Read(); err != nil {
				t.Fatal(err)
			}
			line, _ := cr.FieldPos(0)
			if p.Line(i) != line {
				t.Fatalf("row %d: Line %d, encoding/csv says %d", i, p.Line(i), line)
			}
			for j, name := range p.Columns {
				raw := trimRef(cells[i][j])
				if x, ok := p.Num[name]; ok {
					want := nan
					if raw != "" {
						var err error
						if want, err = strconv.ParseFloat(raw, 64); err != nil {
							t.Fatalf("row %d %s: %q in a numeric column", i, name, raw)
						}
					}
					if math.Float64bits(x[i]) != math.Float64bits(want) && !(raw == "" && math.IsNaN(x[i])) {
						t.Fatalf("row %d %s: %v (bits %x), ParseFloat(%q) = %v (bits %x)", i, name, x[i], math.Float64bits(x[i]), raw, want, math.Float64bits(want))
					}
					continue
				}
				tc := p.Text[name]
				got := ""
				if c := tc.Codes[i]; c >= 0 {
					got = tc.Levels[c]
				}
				if got != raw {
					t.Fatalf("row %d %s: %q, want %q", i, name, got, raw)
				}
			}
		}
	}
}

// panelDiff describes the first difference between two panels, comparing
// numbers bit for bit; "" means identical.
func panelDiff(p, q *Panel) string {
	if p.N != q.N || p.Source != q.Source || !equalStrings(p.Columns, q.Columns) {
		return "shape"
	}
	if (p.Lines == nil) != (q.Lines == nil) || !equalInts(p.Lines, q.Lines) {
		return "lines"
	}
	for _, name := range p.Columns {
		if x, ok := p.Num[name]; ok {
			y, ok := q.Num[name]
			if !ok || len(x) != len(y) {
				return "type of " + name
			}
			for i := range x {
				if math.Float64bits(x[i]) != math.Float64bits(y[i]) {
					return name + " row " + strconv.Itoa(i)
				}
			}
			continue
		}
		a, b := p.Text[name], q.Text[name]
		if b == nil {
			return "type of " + name
		}
		if !equalStrings(a.Levels, b.Levels) || !equalInt32(a.Codes, b.Codes) || a.FirstNonNumber != b.FirstNonNumber || a.NumericCells != b.NumericCells {
			return "text column " + name
		}
	}
	return ""
}

// refDataDir is the shared reference data beside the project root.
const refDataDir = "../../shared/reference-data"

// readRefWithEncodingCSV is an independent reader for the reference files:
// encoding/csv for fields and strconv.ParseFloat for numbers.
func readRefWithEncodingCSV(t *testing.T, name string) (header []string, recs [][]string) {
	t.Helper()
	f, err := os.Open(filepath.Join(refDataDir, name))
	if err != nil {
		t.Fatalf("reference data: %v", err)
	}
	defer f.Close()
	all, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	return all[0], all[1:]
}

// trimRef trims a cell as ReadCSV documents: spaces, tabs and '\r'.
func trimRef(s string) string { return strings.Trim(s, " \t\r") }

// checkAgainstRecords compares every cell of p with the records read by
// encoding/csv.
func checkAgainstRecords(t *testing.T, p *Panel, header []string, recs [][]string) {
	t.Helper()
	if !equalStrings(p.Columns, header) || p.N != len(recs) {
		t.Fatalf("columns %q N %d, want %q N %d", p.Columns, p.N, header, len(recs))
	}
	for i, rec := range recs {
		for j, name := range header {
			raw := trimRef(rec[j])
			if x, ok := p.Num[name]; ok {
				if raw == "" {
					if !math.IsNaN(x[i]) {
						t.Errorf("row %d %s: %v, want NaN", i, name, x[i])
					}
					continue
				}
				want, err := strconv.ParseFloat(raw, 64)
				if err != nil || math.Float64bits(want) != math.Float64bits(x[i]) {
					t.Errorf("row %d %s: %v, want %q", i, name, x[i], raw)
				}
				continue
			}
			tc := p.Text[name]
			got := ""
			if c := tc.Codes[i]; c >= 0 {
				got = tc.Levels[c]
			}
			if got != raw {
				t.Errorf("row %d %s: %q, want %q", i, name, got, raw)
			}
		}
	}
}

func TestReadCSVReferenceData(t *testing.T) {
	// Shapes from shared/reference-data/README.md: cigarettes 528 rows
	// (48 states x 11 years, Stock & Watson), MROZ 753 rows of which 428
	// are working women with a wage (Wooldridge, Introductory
	// Econometrics, data set MROZ).
	t.Run("cigarettes", func(t *testing.T) {
		p, err := ReadCSVFile(filepath.Join(refDataDir, "cigarettes_state_panel.csv"), ReadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		header, recs := readRefWithEncodingCSV(t, "cigarettes_state_panel.csv")
		checkAgainstRecords(t, p, header, recs)
		if p.N != 528 || len(p.Columns) != 9 {
			t.Fatalf("N %d, %d columns; want 528, 9", p.N, len(p.Columns))
		}
		st := p.Text["State"]
		if st == nil || len(st.Levels) != 48 || st.Levels[0] != "AL" {
			t.Fatalf("State: %+v", st)
		}
		if p.Lines != nil {
			t.Error("Lines should be nil: one record per line")
		}
		year, err := p.Float("Year")
		if err != nil {
			t.Fatal(err)
		}
		// First data line, read by eye: "AL",1985,1.07599997520447,...
		if year[0] != 1985 || p.Num["CPI"][0] != 1.07599997520447 || year[527] != 1995 {
			t.Errorf("Year[0] %v CPI[0] %v Year[527] %v", year[0], p.Num["CPI"][0], year[527])
		}
		if _, err := p.Float("State"); !errors.Is(err, ErrNotNumeric) {
			t.Errorf("Float(State): %v", err)
		}
	})
	t.Run("mroz", func(t *testing.T) {
		p, err := ReadCSVFile(filepath.Join(refDataDir, "wooldridge_mroz.csv"), ReadOptions{Workers: 2})
		if err != nil {
			t.Fatal(err)
		}
		header, recs := readRefWithEncodingCSV(t, "wooldridge_mroz.csv")
		checkAgainstRecords(t, p, header, recs)
		if p.N != 753 || len(p.Columns) != 22 || len(p.Text) != 0 {
			t.Fatalf("N %d, %d columns, %d text; want 753, 22, 0", p.N, len(p.Columns), len(p.Text))
		}
		for _, name := range []string{"wage", "lwage"} {
			missing := 0
			for _, v := range p.Num[name] {
				if math.IsNaN(v) {
					missing++
				}
			}
			if missing != 753-428 {
				t.Errorf("%s: %d missing, want %d", name, missing, 753-428)
			}
		}
		// First data line, read by eye: wage 3.35400009155273, lwage 1.2101536989212.
		if p.Num["wage"][0] != 3.35400009155273 || p.Num["lwage"][0] != 1.2101536989212 {
			t.Errorf("wage[0] %v lwage[0] %v", p.Num["wage"][0], p.Num["lwage"][0])
		}
	})
}

// TestReadCSVAllocs checks that allocations do not grow with the number of
// rows when the number of distinct text values stays the same: no
// allocation per field or per row.
func TestReadCSVAllocs(t *testing.T) {
	gen := func(rows int) []byte {
		var b bytes.Buffer
		b.WriteString("store,price,units,note\n")
		for i := range rows {
			b.WriteString("S" + strconv.Itoa(i%20) + "," + strconv.FormatFloat(float64(i%97)/8, 'f', -1, 64) + "," + strconv.Itoa(i) + ",\"x \"\"" + strconv.Itoa(i%3) + "\"\"\"\n")
		}
		return b.Bytes()
	}
	small, large := gen(2000), gen(40000)
	for _, workers := range []int{1, 2} {
		count := func(data []byte) float64 {
			return testing.AllocsPerRun(3, func() {
				if _, err := ReadCSV(data, "a.csv", ReadOptions{Workers: workers}); err != nil {
					t.Fatal(err)
				}
			})
		}
		a, b := count(small), count(large)
		if b > a+4 {
			t.Errorf("%d workers: %v allocations for 2,000 rows, %v for 40,000", workers, a, b)
		}
	}
}

// TestReadCSVMatchesEncodingCSV compares with encoding/csv on random small
// files full of quoting, so that the record boundaries and unescaping of
// both agree.
func TestReadCSVMatchesEncodingCSV(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	pieces := []string{"a", "1", "2.5", "", " ", "\"", "\"\"", ",", ";", "\n", "\r\n", "x y", "-0", "1e5", "é"}
	for iter := range 2000 {
		nc := 1 + rng.IntN(4)
		rows := rng.IntN(6)
		recs := [][]string{}
		hdr := make([]string, nc)
		for j := range hdr {
			hdr[j] = "c" + strconv.Itoa(j)
		}
		recs = append(recs, hdr)
		for range rows {
			rec := make([]string, nc)
			for j := range rec {
				var s strings.Builder
				for range rng.IntN(4) {
					s.WriteString(pieces[rng.IntN(len(pieces))])
				}
				rec[j] = s.String()
			}
			recs = append(recs, rec)
		}
		var buf bytes.Buffer
		w := csv.NewWriter(&buf)
		w.UseCRLF = rng.IntN(2) == 0
		_ = w.WriteAll(recs)
		data := buf.Bytes()
		back, err := csv.NewReader(bytes.NewReader(data)).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		p, err := ReadCSV(data, "r.csv", ReadOptions{Workers: 1 + iter%3})
		if err != nil {
			t.Fatalf("%q: %v", data, err)
		}
		checkAgainstRecords(t, p, back[0], back[1:])
	}
}

// TestReadCSVTextOnlyInLaterWorker: the first worker's rows of a text
// column are all missing, so its text and first non-number come from a
// later worker.
func TestReadCSVTextOnlyInLaterWorker(t *testing.T) {
	in := "a,b\n1,\n2,\n3,\n4,x\n5,7\n6,x\n"
	for _, workers := range []int{1, 2, 3, 6} {
		p, err := ReadCSV([]byte(in), "late.csv", ReadOptions{Workers: workers})
		if err != nil {
			t.Fatal(err)
		}
		checkPanel(t, p, 6, []wantCol{
			{name: "a", num: []float64{1, 2, 3, 4, 5, 6}},
			{name: "b", levels: []string{"x", "7"}, codes: []int32{-1, -1, -1, 0, 1, 0}},
		}, nil)
		if tc := p.Text["b"]; tc.FirstNonNumber != (CellRef{Line: 5, Text: "x"}) || tc.NumericCells != 1 {
			t.Errorf("%d workers: %+v %d", workers, tc.FirstNonNumber, tc.NumericCells)
		}
	}
}
