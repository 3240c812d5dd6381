package demand

import (
	"bytes"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/parquet-go/parquet-go"
)

// toParquet writes p to Parquet bytes.
func toParquet(t *testing.T, p *Panel) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := WriteParquet(&b, p); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

func readParquetBytes(data []byte, source string, workers int) (*Panel, error) {
	return ReadParquet(bytes.NewReader(data), int64(len(data)), source, ReadOptions{Workers: workers})
}

// TestParquetRoundTrip writes panels read from CSV to Parquet and reads
// them back: the columns must be bit-identical to the CSV reader's, with
// the same column order, text levels in the same order, and the same
// FirstNonNumber and NumericCells, for several row groups and any number
// of workers. Check: common practice (a lossless format must give back
// what was written).
func TestParquetRoundTrip(t *testing.T) {
	defer func(g int) { parquetGroupRows = g }(parquetGroupRows)
	data, _ := genCSV(11, 20000, false)
	gen, err := ReadCSV(data, "gen.csv", ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	cig, err := ReadCSVFile(filepath.Join(refDataDir, "cigarettes_state_panel.csv"), ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	mroz, err := ReadCSVFile(filepath.Join(refDataDir, "wooldridge_mroz.csv"), ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	quoted, err := ReadCSVFile(filepath.Join("testdata", "good_quoted.csv"), ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	empty, err := ReadCSV([]byte("a,b\n"), "empty.csv", ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, test := range []struct {
		name  string
		p     *Panel
		group int
	}{
		{"generated, one row group", gen, 1 << 20},
		{"generated, row groups of 3000", gen, 3000},
		{"cigarettes (Stock & Watson)", cig, 100},
		{"mroz (Wooldridge), missing wages", mroz, 1 << 20},
		{"quoted cells with delimiters and line breaks", quoted, 2},
		{"header only", empty, 1 << 20},
	} {
		parquetGroupRows = test.group
		pq := toParquet(t, test.p)
		for _, workers := range []int{1, 2, 5} {
			q, err := readParquetBytes(pq, test.p.Source, workers)
			if err != nil {
				t.Fatalf("%s, %d workers: %v", test.name, workers, err)
			}
			// A Parquet file numbers rows, not source lines: Lines
			// is nil even where the CSV file had records spanning
			// lines.
			if q.Lines != nil {
				t.Errorf("%s: Lines = %v, want nil", test.name, q.Lines)
			}
			want := rowNumbered(test.p)
			if d := panelDiff(want, q); d != "" {
				t.Errorf("%s, %d workers: differs from the CSV panel: %s", test.name, workers, d)
			}
		}
	}
}

// rowNumbered returns p as a Parquet file gives it back: without Lines,
// and with FirstNonNumber pointing at row r (1-based) as line r+1.
func rowNumbered(p *Panel) *Panel {
	if p.Lines == nil {
		return p
	}
	q := *p
	q.Lines = nil
	q.Text = map[string]*TextColumn{}
	for name, tc := range p.Text {
		c := *tc
		for i, line := range p.Lines {
			if line == tc.FirstNonNumber.Line {
				c.FirstNonNumber.Line = i + 2
				break
			}
		}
		q.Text[name] = &c
	}
	return &q
}

// TestParquetSameEstimates fits the same model on the cigarette panel read
// from CSV and from its Parquet copy; the estimates must be identical.
// Source: Stock & Watson, Introduction to Econometrics, ch. 12 (cigarette
// demand, 1995 cross-section, lnQ on lnP instrumented by SalesTax: -1.08,
// s.e. 0.32) for the model; the check itself is common practice (the same
// numbers in give the same numbers out).
func TestParquetSameEstimates(t *testing.T) {
	dir := t.TempDir()
	csvPath := filepath.Join(refDataDir, "cigarettes_state_panel.csv")
	p, err := ReadPanelFile(csvPath, ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	pqPath := filepath.Join(dir, "cig.parquet")
	if err := os.WriteFile(pqPath, toParquet(t, p), 0o644); err != nil {
		t.Fatal(err)
	}
	q, err := ReadPanelFile(pqPath, ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	spec := &Spec{
		Derive: []string{"lq=log(PackPC)", "lp=log(AvgPrs/CPI)", "salestax=(Taxs-Tax)/CPI"},
		Where:  "Year == 1995", Outcome: "lq", Endogenous: []string{"lp"}, Instruments: []string{"salestax"}, Vcov: "hc1",
	}
	var coef [2][]float64
	var se [2][]float64
	for k, panel := range []*Panel{p, q} {
		pp, _, err := Prepare(panel, spec)
		if err != nil {
			t.Fatal(err)
		}
		d, err := Build(pp, spec, 0)
		if err != nil {
			t.Fatal(err)
		}
		fit, _, err := d.Fit()
		if err != nil {
			t.Fatal(err)
		}
		coef[k] = fit.Coef
		for j := range fit.Coef {
			se[k] = append(se[k], fit.SE(j))
		}
	}
	for j := range coef[0] {
		if coef[0][j] != coef[1][j] || se[0][j] != se[1][j] {
			t.Errorf("coefficient %d: CSV %v (%v), Parquet %v (%v)", j, coef[0][j], se[0][j], coef[1][j], se[1][j])
		}
	}
	// Stock & Watson, ch. 12: elasticity -1.08 (0.32), HC1; tolerance
	// half a unit of the printed last digit.
	if e := coef[1][0]; math.Abs(e-(-1.08)) > 0.005 || math.Abs(se[1][0]-0.32) > 0.005 {
		t.Errorf("elasticity %v (%v), want -1.08 (0.32)", e, se[1][0])
	}
}

// pqTestColumn is one column of a hand-built Parquet file.
type pqTestColumn struct {
	name   string
	node   parquet.Node
	values []parquet.Value // one per row; a zero Value is null
}

// writeTestParquet writes a one-row-group Parquet file with the given
// optional columns.
func writeTestParquet(t *testing.T, cols []pqTestColumn) []byte {
	t.Helper()
	g := make(pqGroup, len(cols))
	for j, c := range cols {
		g[j] = pqField{Node: parquet.Optional(c.node), name: c.name}
	}
	var b bytes.Buffer
	w := parquet.NewWriter(&b, parquet.NewSchema("t", g))
	cws := w.ColumnWriters()
	for j, c := range cols {
		vals := make([]parquet.Value, len(c.values))
		for i, v := range c.values {
			if v.IsNull() {
				vals[i] = parquet.NullValue().Level(0, 0, j)
			} else {
				vals[i] = v.Level(0, 1, j)
			}
		}
		if _, err := cws[j].WriteRowValues(vals); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestParquetTypes reads a file holding every physical and logical type a
// warehouse export commonly uses. Expected values: Apache Parquet format
// specification, LogicalTypes.md (DECIMAL is unscaled·10^-scale, stored
// as INT32, INT64 or big-endian two's-complement FIXED_LEN_BYTE_ARRAY;
// unsigned INT annotations; DATE is days since 1970-01-01) and
// strconv.ParseFloat of the decimal text for the decimals.
func TestParquetTypes(t *testing.T) {
	null := parquet.Value{}
	be := func(b ...byte) parquet.Value { return parquet.FixedLenByteArrayValue(b) }
	cols := []pqTestColumn{
		{"f64", parquet.Leaf(parquet.DoubleType), []parquet.Value{parquet.DoubleValue(2.49), null, parquet.DoubleValue(math.NaN())}},
		{"f32", parquet.Leaf(parquet.FloatType), []parquet.Value{parquet.FloatValue(0.1), parquet.FloatValue(-3), null}},
		{"i32", parquet.Leaf(parquet.Int32Type), []parquet.Value{parquet.Int32Value(-7), parquet.Int32Value(1 << 30), null}},
		{"i64", parquet.Leaf(parquet.Int64Type), []parquet.Value{parquet.Int64Value(1 << 53), null, parquet.Int64Value(-1)}},
		{"u32", parquet.Uint(32), []parquet.Value{parquet.Int32Value(-1), parquet.Int32Value(5), null}},
		{"flag", parquet.Leaf(parquet.BooleanType), []parquet.Value{parquet.BooleanValue(true), parquet.BooleanValue(false), null}},
		{"day", parquet.Date(), []parquet.Value{parquet.Int32Value(19000), null, parquet.Int32Value(0)}},
		{"dec32", parquet.Decimal(2, 9, parquet.Int32Type), []parquet.Value{parquet.Int32Value(249), parquet.Int32Value(-5), null}},
		{"dec64", parquet.Decimal(4, 18, parquet.Int64Type), []parquet.Value{parquet.Int64Value(123456789), null, parquet.Int64Value(1)}},
		{"decfix", parquet.Decimal(3, 9, parquet.FixedLenByteArrayType(4)), []parquet.Value{be(0, 0, 0x30, 0x39), be(0xff, 0xff, 0xff, 0xfe), null}},
		{"store", parquet.String(), []parquet.Value{parquet.ByteArrayValue([]byte("S2")), null, parquet.ByteArrayValue([]byte("S1"))}},
		{"code", parquet.Leaf(parquet.FixedLenByteArrayType(2)), []parquet.Value{be('A', '1'), be('A', '1'), be('B', '2')}},
	}
	p, err := readParquetBytes(writeTestParquet(t, cols), "types.parquet", 0)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []wantCol{
		{name: "f64", num: []float64{2.49, nan, nan}},
		{name: "f32", num: []float64{float64(float32(0.1)), -3, nan}},
		{name: "i32", num: []float64{-7, 1 << 30, nan}},
		{name: "i64", num: []float64{1 << 53, nan, -1}},
		{name: "u32", num: []float64{math.MaxUint32, 5, nan}},
		{name: "flag", num: []float64{1, 0, nan}},
		{name: "day", num: []float64{19000, nan, 0}},
		{name: "dec32", num: []float64{2.49, -0.05, nan}},
		{name: "dec64", num: []float64{12345.6789, nan, 0.0001}},
		{name: "decfix", num: []float64{12.345, -0.002, nan}},
		{name: "store", levels: []string{"S2", "S1"}, codes: []int32{0, -1, 1}},
		{name: "code", levels: []string{"A1", "B2"}, codes: []int32{0, 0, 1}},
	} {
		if want.num != nil {
			if x, ok := p.Num[want.name]; !ok || !sameFloats(x, want.num) {
				t.Errorf("%s = %v, want %v", want.name, x, want.num)
			}
			continue
		}
		tc, ok := p.Text[want.name]
		if !ok || !equalStrings(tc.Levels, want.levels) || !equalInt32(tc.Codes, want.codes) {
			t.Errorf("%s = %+v, want levels %q codes %v", want.name, tc, want.levels, want.codes)
		}
	}
	if got := strings.Join(p.Columns, ","); got != "f64,f32,i32,i64,u32,flag,day,dec32,dec64,decfix,store,code" {
		t.Errorf("columns %s, want the file's order", got)
	}
	if tc := p.Text["store"]; tc.FirstNonNumber != (CellRef{Line: 2, Text: "S2"}) {
		t.Errorf("store FirstNonNumber %+v, want line 2 (row 1) S2", tc.FirstNonNumber)
	}
	if _, err := p.Float("store"); !errors.Is(err, ErrNotNumeric) {
		t.Errorf("Float(store): %v, want ErrNotNumeric", err)
	}
}

// TestParquetDecimalExact checks that decimals read as the float64
// strconv.ParseFloat gives for their text, also where the fast path
// (an exact quotient) does not apply: unscaled values above 2^53, scales
// above 22, and 16-byte values. Source: IEEE 754 (a quotient of exact
// operands is correctly rounded) and strconv.ParseFloat's documented
// correct rounding.
func TestParquetDecimalExact(t *testing.T) {
	rd := &pqReader{}
	for _, test := range []struct {
		v    parquet.Value
		s    pqColumn
		text string
	}{
		{parquet.Int64Value(1<<53 + 1), pqColumn{kind: parquet.Int64, dec: true, scale: 3}, "9007199254740.993"},
		{parquet.Int64Value(-123456789012345678), pqColumn{kind: parquet.Int64, dec: true, scale: 9}, "-123456789.012345678"},
		{parquet.Int32Value(7), pqColumn{kind: parquet.Int32, dec: true, scale: 30}, "7e-30"},
		{parquet.Int32Value(31), pqColumn{kind: parquet.Int32, dec: true, scale: 1}, "3.1"},
		{parquet.FixedLenByteArrayValue([]byte{0x01, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0x01}), pqColumn{kind: parquet.FixedLenByteArray, dec: true, scale: 2}, "13292279957849158729038070602803445.77"},
		{parquet.FixedLenByteArrayValue([]byte{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff}), pqColumn{kind: parquet.FixedLenByteArray, dec: true, scale: 2}, "-0.01"},
	} {
		want, err := strconv.ParseFloat(test.text, 64)
		if err != nil {
			t.Fatal(err)
		}
		if got := rd.decimal(test.v, &test.s); math.Float64bits(got) != math.Float64bits(want) {
			t.Errorf("%s: got %v, want %v", test.text, got, want)
		}
	}
}

// TestParquetBadFiles: a file that is not Parquet, a truncated file, and
// columns a panel cannot hold each give a *ParquetError that wraps
// ErrParquet and names the file (and the column), with a hint.
func TestParquetBadFiles(t *testing.T) {
	good := writeTestParquet(t, []pqTestColumn{{"price", parquet.Leaf(parquet.DoubleType), []parquet.Value{parquet.DoubleValue(1)}}})
	nested := func() []byte {
		type item struct {
			Sku  string `parquet:"sku"`
			Size int64  `parquet:"size"`
		}
		type row struct {
			Store string `parquet:"store"`
			Item  item   `parquet:"item"`
		}
		var b bytes.Buffer
		w := parquet.NewGenericWriter[row](&b)
		if _, err := w.Write([]row{{"S1", item{"a", 1}}}); err != nil {
			t.Fatal(err)
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	repeated := func() []byte {
		type row struct {
			Store  string    `parquet:"store"`
			Prices []float64 `parquet:"prices,list"`
		}
		var b bytes.Buffer
		w := parquet.NewGenericWriter[row](&b)
		if _, err := w.Write([]row{{"S1", []float64{1, 2}}}); err != nil {
			t.Fatal(err)
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	for _, test := range []struct {
		name   string
		data   []byte
		column int
		msg    string
	}{
		{"a CSV file", []byte("store,price\nS1,2.49\n"), 0, "not a readable Parquet file"},
		{"empty", nil, 0, "not a readable Parquet file"},
		{"cut short", good[:len(good)-5], 0, "not a readable Parquet file"},
		{"nested group", nested(), 2, "nested group"},
		{"list column", repeated(), 2, "nested group"},
	} {
		_, err := readParquetBytes(test.data, "bad.parquet", 0)
		var pe *ParquetError
		if !errors.As(err, &pe) || !errors.Is(err, ErrParquet) {
			t.Errorf("%s: error %v, want a *ParquetError wrapping ErrParquet", test.name, err)
			continue
		}
		if pe.File != "bad.parquet" || pe.Column != test.column || !strings.Contains(pe.Msg, test.msg) || pe.Hint == "" {
			t.Errorf("%s: got %+v, want column %d and %q with a hint", test.name, pe, test.column, test.msg)
		}
		if !strings.HasPrefix(err.Error(), "bad.parquet: ") {
			t.Errorf("%s: message %q does not start with the file", test.name, err)
		}
	}

	// INT96 is refused by name (column 1).
	int96 := writeTestParquet(t, []pqTestColumn{{"ts", parquet.Leaf(parquet.Int96Type), []parquet.Value{parquet.NullValue()}}})
	_, err := readParquetBytes(int96, "old.parquet", 0)
	var pe *ParquetError
	if !errors.As(err, &pe) || pe.Column != 1 || pe.Name != "ts" || !strings.Contains(pe.Msg, "INT96") {
		t.Errorf("INT96: %v", err)
	}
}

// TestReadPanelFileDispatch reads the same panel through ReadPanelFile by
// a .csv, a .parquet and an upper-case .PQ name.
func TestReadPanelFileDispatch(t *testing.T) {
	dir := t.TempDir()
	csvData := []byte("store,week,price\nS1,1,2.5\nS2,1,\n")
	p, err := ReadCSV(csvData, "x", ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	files := map[string][]byte{"a.csv": csvData, "a.parquet": toParquet(t, p), "b.PQ": toParquet(t, p), "c.txt": csvData}
	for name, data := range files {
		path := filepath.Join(dir, name)
		if err := os.WriteFile(path, data, 0o644); err != nil {
			t.Fatal(err)
		}
		q, err := ReadPanelFile(path, ReadOptions{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		p.Source = path
		if d := panelDiff(p, q); d != "" {
			t.Errorf("%s: %s", name, d)
		}
	}
	// A CSV file given a Parquet name is refused by the Parquet reader.
	bad := filepath.Join(dir, "wrong.parquet")
	if err := os.WriteFile(bad, csvData, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadPanelFile(bad, ReadOptions{}); !errors.Is(err, ErrParquet) || !strings.Contains(err.Error(), ".csv extension") {
		t.Errorf("CSV named .parquet: %v", err)
	}
	if _, err := ReadPanelFile(filepath.Join(dir, "missing.parquet"), ReadOptions{}); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}

// TestReadTooLargeForMemory pretends that only a little memory is
// available: both readers must refuse, before reading, with a message
// that says how large the file is and how much memory it needs.
func TestReadTooLargeForMemory(t *testing.T) {
	defer func(f func() (int64, bool)) { memAvailable = f }(memAvailable)
	dir := t.TempDir()
	data, _ := genCSV(3, 20000, false)
	p, err := ReadCSV(data, "x", ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	csvPath := filepath.Join(dir, "big.csv")
	pqPath := filepath.Join(dir, "big.parquet")
	if err := os.WriteFile(csvPath, data, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(pqPath, toParquet(t, p), 0o644); err != nil {
		t.Fatal(err)
	}
	memAvailable = func() (int64, bool) { return 100_000, true }
	for _, path := range []string{csvPath, pqPath} {
		_, err := ReadPanelFile(path, ReadOptions{})
		var me *MemoryError
		if !errors.As(err, &me) || !errors.Is(err, ErrTooLarge) {
			t.Fatalf("%s: %v, want a *MemoryError", path, err)
		}
		st, _ := os.Stat(path)
		if me.Size != st.Size() || me.Need <= me.Available || me.Available != 100_000 {
			t.Errorf("%s: %+v", path, me)
		}
		msg := err.Error()
		for _, s := range []string{path, "the file is " + byteSize(st.Size()), "only 100 KB is available", "keep only the rows and columns"} {
			if !strings.Contains(msg, s) {
				t.Errorf("%s: message %q lacks %q", path, msg, s)
			}
		}
	}
	// With enough memory both read, and when it cannot be told they
	// read too.
	for _, avail := range []func() (int64, bool){
		func() (int64, bool) { return 1 << 40, true },
		func() (int64, bool) { return 0, false },
	} {
		memAvailable = avail
		for _, path := range []string{csvPath, pqPath} {
			if _, err := ReadPanelFile(path, ReadOptions{}); err != nil {
				t.Errorf("%s: %v", path, err)
			}
		}
	}
}

// TestCSVMemoryNeed checks the estimate on a file whose size is known:
// 3 columns, 1000 records of 10 bytes after an 8-byte header, so about
// 1000 records: the bytes, plus 8 bytes per record for its offset and
// 8 per cell. Source: the arithmetic of the layout, by hand.
func TestCSVMemoryNeed(t *testing.T) {
	var b bytes.Buffer
	b.WriteString("a,bb,cc\n")
	for range 1000 {
		b.WriteString("1.5,2,3.5\n")
	}
	size := int64(b.Len())
	got := csvMemoryNeed(size, b.Bytes()[:4096])
	want := size + 1000*8*4
	if math.Abs(float64(got-want)) > 0.02*float64(want) {
		t.Errorf("need %d, want about %d", got, want)
	}
}

func TestByteSize(t *testing.T) {
	// Decimal units, three significant digits (common practice for file sizes).
	for _, test := range []struct {
		b    int64
		want string
	}{{999, "999 B"}, {1000, "1 KB"}, {123456, "123 KB"}, {89_597_097, "89.6 MB"}, {31_200_000_000, "31.2 GB"}, {4_500_000_000_000, "4500 GB"}} {
		if got := byteSize(test.b); got != test.want {
			t.Errorf("byteSize(%d) = %q, want %q", test.b, got, test.want)
		}
	}
}
