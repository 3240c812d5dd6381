package demand

import (
	"errors"
	"fmt"
	"io"
	"math"
	"math/big"
	"os"
	"reflect"
	"runtime"
	"strconv"
	"strings"
	"sync"

	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/compress"
	"github.com/parquet-go/parquet-go/encoding"
	"github.com/parquet-go/parquet-go/format"
)

// ErrParquet marks a Parquet file that cannot be read as a panel: not a
// Parquet file, damaged, or holding a column of a shape a panel cannot
// hold (nested or repeated).
var ErrParquet = errors.New("cannot read Parquet panel")

// ParquetError reports a problem with a Parquet file, or with one of its
// columns (Column is then its 1-based position and Name its name).
type ParquetError struct {
	File   string
	Column int
	Name   string
	Msg    string // what was found
	Hint   string // how to fix it
	Err    error  // the underlying error, when there is one
}

func (e *ParquetError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Column > 0 {
		fmt.Fprintf(&b, ": column %d (%s)", e.Column, e.Name)
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	if e.Err != nil {
		fmt.Fprintf(&b, ": %v", e.Err)
	}
	if e.Hint != "" {
		b.WriteString("; ")
		b.WriteString(e.Hint)
	}
	return b.String()
}

func (e *ParquetError) Unwrap() []error {
	if e.Err != nil {
		return []error{ErrParquet, e.Err}
	}
	return []error{ErrParquet}
}

// ReadParquetFile reads the Parquet file at path with ReadParquet, using
// path as the source name. The file is only read. Before reading, the
// memory the columns need is compared with the memory available, and a
// file whose columns cannot fit gives an error saying how large it is.
func ReadParquetFile(path string, opts ReadOptions) (*Panel, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("demand: reading panel: %w", err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("demand: reading panel: %w", err)
	}
	return ReadParquet(f, st.Size(), path, opts)
}

// ReadParquet reads a Parquet file of size bytes from r into a panel named
// source. Every top-level column becomes a panel column, in the file's
// order:
//
//   - DOUBLE and FLOAT columns are numeric;
//   - INT32 and INT64 columns (signed or unsigned, and dates, times and
//     timestamps, as their stored integer) are numeric, converted to
//     float64 (exact up to 2^53 in magnitude);
//   - DECIMAL columns are numeric: the unscaled integer u with scale s
//     reads as the float64 nearest to u·10^-s, the value
//     strconv.ParseFloat gives for the same number written in a CSV file;
//   - BOOLEAN columns are numeric, 0 for false and 1 for true;
//   - BYTE_ARRAY (strings) and FIXED_LEN_BYTE_ARRAY columns are text
//     columns, their values interned into levels in order of first
//     appearance, as ReadCSV does;
//   - a null is a missing cell: NaN in a numeric column, code -1 in a text
//     column. A NaN stored in a floating-point column is missing too.
//
// Text cells are not trimmed (a Parquet string is what it is); FirstNonNumber
// and NumericCells of a text column are set as ReadCSV sets them. Rows are
// numbered for messages as lines of the CSV file a Parquet file is usually
// converted from: row r (1-based) is reported as line r+1, after a header
// line. Nested groups, repeated (list) columns and INT96 timestamps are
// errors naming the column.
//
// Columns are read in parallel, split by column and row group across
// opts.Workers goroutines (0 means runtime.NumCPU()); the result does not
// depend on the number of workers. opts.Delimiter is ignored.
func ReadParquet(r io.ReaderAt, size int64, source string, opts ReadOptions) (*Panel, error) {
	f, err := parquet.OpenFile(r, size, parquet.SkipPageIndex(true), parquet.SkipBloomFilters(true))
	if err != nil {
		return nil, &ParquetError{File: source, Msg: "not a readable Parquet file", Err: err,
			Hint: "check that the file is a complete Parquet file (a copy cut short loses its footer); for a CSV file use the .csv extension"}
	}
	root := f.Root()
	cols := root.Columns()
	n64 := f.NumRows()
	if n64 > math.MaxInt32 {
		return nil, &ParquetError{File: source, Msg: fmt.Sprintf("%d rows is more than a panel can hold (%d)", n64, math.MaxInt32),
			Hint: "split the file, for example by year or region"}
	}
	n := int(n64)
	specs := make([]pqColumn, len(cols))
	need := int64(0)
	for j, c := range cols {
		s, err := pqColumnSpec(source, j, c)
		if err != nil {
			return nil, err
		}
		specs[j] = s
		if s.text {
			need += 4 * int64(n)
		} else {
			need += 8 * int64(n)
		}
	}
	if err := checkMemory(source, size, need, "its columns"); err != nil {
		return nil, err
	}

	p := NewPanel(source, n)
	num := make([][]float64, len(cols))
	codes := make([][]int32, len(cols))
	for j, s := range specs {
		if s.text {
			codes[j] = makeInt32s(n)
		} else {
			num[j] = makeFloats(n)
		}
	}

	// Work items: each numeric column chunk on its own; each text
	// column whole, so that its levels are interned in file order by
	// one goroutine.
	groups := f.RowGroups()
	starts := make([]int, len(groups)+1)
	for g, rg := range groups {
		starts[g+1] = starts[g] + int(rg.NumRows())
	}
	if starts[len(groups)] != n {
		return nil, &ParquetError{File: source, Msg: fmt.Sprintf("the row groups hold %d rows but the footer says %d", starts[len(groups)], n),
			Hint: "the file is damaged; write it again"}
	}
	type item struct{ col, group int } // group < 0: all groups of a text column
	var items []item
	for j, s := range specs {
		if s.text {
			items = append(items, item{j, -1})
			continue
		}
		for g := range groups {
			items = append(items, item{j, g})
		}
	}
	texts := make([]*TextColumn, len(cols))
	errs := make([]error, len(items))
	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	workers = max(1, min(workers, len(items)))
	var wg sync.WaitGroup
	next := make(chan int, len(items))
	for i := range items {
		next <- i
	}
	close(next)
	for range workers {
		wg.Go(func() {
			rd := &pqReader{source: source}
			for i := range next {
				it := items[i]
				s := &specs[it.col]
				if it.group >= 0 {
					errs[i] = rd.readNum(s, groups[it.group].ColumnChunks()[s.leaf], num[it.col][starts[it.group]:starts[it.group+1]])
					continue
				}
				lv := &pqLevels{m: map[string]int32{}}
				for g, rg := range groups {
					if errs[i] = rd.readText(s, rg.ColumnChunks()[s.leaf], codes[it.col][starts[g]:starts[g+1]], starts[g], lv); errs[i] != nil {
						break
					}
				}
				if errs[i] == nil {
					t := &TextColumn{Codes: codes[it.col], Levels: lv.levels}
					pqTextStats(t, lv.first)
					texts[it.col] = t
				}
			}
		})
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			return nil, err
		}
	}
	for j, s := range specs {
		if s.text {
			p.AddText(s.name, texts[j])
		} else {
			p.AddNum(s.name, num[j])
		}
	}
	return p, nil
}

// pqColumn says how one Parquet column is read.
type pqColumn struct {
	name  string
	pos   int // 0-based position among the top-level columns
	leaf  int // index of the column chunk in a row group
	text  bool
	kind  parquet.Kind
	scale int  // decimal scale; 0 when not a decimal
	dec   bool // DECIMAL logical type
	uns   bool // unsigned integer
	def   byte // definition level of a present value
}

func pqColumnSpec(source string, j int, c *parquet.Column) (pqColumn, error) {
	s := pqColumn{name: c.Name(), pos: j}
	bad := func(msg, hint string) (pqColumn, error) {
		return s, &ParquetError{File: source, Column: j + 1, Name: s.name, Msg: msg, Hint: hint}
	}
	if !c.Leaf() {
		return bad("is a nested group of columns, which a panel cannot hold",
			"flatten it when exporting (one column per field), or leave it out of the export")
	}
	if c.Repeated() {
		return bad("is a repeated (list) column, which a panel cannot hold",
			"export one value per row, or leave the column out of the export")
	}
	s.leaf = c.Index()
	s.def = byte(c.MaxDefinitionLevel())
	t := c.Type()
	s.kind = t.Kind()
	lt := t.LogicalType()
	if lt != nil {
		switch v := lt.Value.(type) {
		case *format.DecimalType:
			s.dec, s.scale = true, int(v.Scale)
		case *format.IntType:
			s.uns = !v.IsSigned
		}
	}
	switch s.kind {
	case parquet.Boolean, parquet.Int32, parquet.Int64, parquet.Float, parquet.Double:
	case parquet.ByteArray, parquet.FixedLenByteArray:
		s.text = !s.dec
	case parquet.Int96:
		return bad("holds INT96 timestamps, an old encoding a panel does not read",
			"export the column as a date, a timestamp (INT64) or a number")
	default:
		return bad(fmt.Sprintf("has the physical type %v, which a panel does not read", s.kind),
			"export the column as a number or a string")
	}
	return s, nil
}

// pqBatch is the number of values read from a page at a time.
const pqBatch = 4096

// pqReader reads column chunks; it keeps one buffer of values.
type pqReader struct {
	source string
	buf    []parquet.Value
	dec    strings.Builder
}

// pages calls f on every page of a column chunk, with the values of the
// page, and the page's row offset within the chunk. When fast is not nil
// it is offered each page first, with the row offset, and returns the
// number of rows it took from the page (0: it did not take it).
func (rd *pqReader) pages(s *pqColumn, chunk parquet.ColumnChunk, rows int, fast func(page parquet.Page, row int) int, f func(vals []parquet.Value, row int) error) error {
	if rd.buf == nil {
		rd.buf = make([]parquet.Value, pqBatch)
	}
	pages := chunk.Pages()
	defer pages.Close()
	row := 0
	for {
		page, err := pages.ReadPage()
		if err == io.EOF {
			break
		}
		if err != nil {
			return &ParquetError{File: rd.source, Column: s.pos + 1, Name: s.name, Msg: "a page cannot be read", Err: err,
				Hint: "the file is damaged or uses a compression this reader lacks; write it again"}
		}
		if fast != nil && page.NumValues() == page.NumRows() && row+int(page.NumRows()) <= rows {
			if k := fast(page, row); k > 0 {
				row += k
				parquet.Release(page)
				continue
			}
		}
		vr := page.Values()
		for {
			k, err := vr.ReadValues(rd.buf)
			if k > 0 {
				if row+k > rows {
					parquet.Release(page)
					return rd.countError(s, rows)
				}
				if err := f(rd.buf[:k], row); err != nil {
					parquet.Release(page)
					return err
				}
				row += k
			}
			if err == io.EOF {
				break
			}
			if err != nil {
				parquet.Release(page)
				return &ParquetError{File: rd.source, Column: s.pos + 1, Name: s.name, Msg: "values cannot be decoded", Err: err,
					Hint: "the file is damaged; write it again"}
			}
		}
		parquet.Release(page)
	}
	if row != rows {
		return rd.countError(s, rows)
	}
	return nil
}

func (rd *pqReader) countError(s *pqColumn, rows int) error {
	return &ParquetError{File: rd.source, Column: s.pos + 1, Name: s.name,
		Msg: fmt.Sprintf("a row group holds a different number of values than its %d rows", rows), Hint: "the file is damaged; write it again"}
}

// readNum reads a numeric column chunk into dst.
func (rd *pqReader) readNum(s *pqColumn, chunk parquet.ColumnChunk, dst []float64) error {
	nan := math.NaN()
	// Plain DOUBLE pages (what WriteParquet writes) are copied from the
	// page's buffer, nulls placed by the definition levels.
	fast := func(page parquet.Page, row int) int {
		if s.kind != parquet.Double || s.dec || page.Dictionary() != nil || page.Type().Kind() != parquet.Double {
			return 0
		}
		data := page.Data()
		vals := data.Double()
		n := int(page.NumValues())
		out := dst[row : row+n]
		def := page.DefinitionLevels()
		if len(def) == 0 {
			if len(vals) != n {
				return 0
			}
			copy(out, vals)
			return n
		}
		if len(def) != n {
			return 0
		}
		k := 0
		for i, d := range def {
			if d != s.def {
				out[i] = nan
				continue
			}
			if k >= len(vals) {
				return 0 // malformed: let the general path report it
			}
			out[i] = vals[k]
			k++
		}
		return n
	}
	return rd.pages(s, chunk, len(dst), fast, func(vals []parquet.Value, row int) error {
		out := dst[row : row+len(vals)]
		for i, v := range vals {
			if v.IsNull() {
				out[i] = nan
				continue
			}
			switch {
			case s.dec:
				out[i] = rd.decimal(v, s)
			case s.kind == parquet.Double:
				out[i] = v.Double()
			case s.kind == parquet.Float:
				out[i] = float64(v.Float())
			case s.kind == parquet.Int32 && s.uns:
				out[i] = float64(v.Uint32())
			case s.kind == parquet.Int32:
				out[i] = float64(v.Int32())
			case s.kind == parquet.Int64 && s.uns:
				out[i] = float64(v.Uint64())
			case s.kind == parquet.Int64:
				out[i] = float64(v.Int64())
			case s.kind == parquet.Boolean:
				out[i] = 0
				if v.Boolean() {
					out[i] = 1
				}
			}
		}
		return nil
	})
}

// decimal converts a DECIMAL value u·10^-scale to the float64 that
// strconv.ParseFloat gives for its decimal text. When u and 10^scale are
// both exact in float64, their quotient (or product) is the correctly
// rounded value; otherwise the decimal text is built and parsed.
func (rd *pqReader) decimal(v parquet.Value, s *pqColumn) float64 {
	var u int64
	exact := true
	switch s.kind {
	case parquet.Int32:
		u = int64(v.Int32())
	case parquet.Int64:
		u = v.Int64()
	default:
		b := v.ByteArray()
		if len(b) <= 8 {
			for _, c := range b {
				u = u<<8 | int64(c)
			}
			if len(b) > 0 && len(b) < 8 && b[0]&0x80 != 0 {
				u -= 1 << (8 * len(b)) // sign-extend
			}
		} else {
			exact = false
		}
	}
	const maxExact = 1 << 53
	if exact && u >= -maxExact && u <= maxExact && s.scale >= -22 && s.scale <= 22 {
		if s.scale >= 0 {
			return float64(u) / pow10[s.scale]
		}
		return float64(u) * pow10[-s.scale]
	}
	var text string
	if exact {
		text = strconv.FormatInt(u, 10)
	} else {
		text = decimalBigText(v.ByteArray())
	}
	rd.dec.Reset()
	rd.dec.WriteString(text)
	fmt.Fprintf(&rd.dec, "e%d", -s.scale)
	x, _ := strconv.ParseFloat(rd.dec.String(), 64)
	return x
}

// pow10[k] = 10^k, exact in float64 for k ≤ 22.
var pow10 = func() (p [23]float64) {
	p[0] = 1
	for k := 1; k < len(p); k++ {
		p[k] = p[k-1] * 10
	}
	return p
}()

// decimalBigText returns the big-endian two's-complement integer b in
// decimal.
func decimalBigText(b []byte) string {
	x := new(big.Int).SetBytes(b)
	if len(b) > 0 && b[0]&0x80 != 0 {
		x.Sub(x, new(big.Int).Lsh(big.NewInt(1), uint(8*len(b))))
	}
	return x.String()
}

// pqLevels interns the text of one column.
type pqLevels struct {
	m      map[string]int32
	levels []string
	first  []int // row of the first appearance of each level
}

// readText reads a text column chunk whose first row is row0 of the file
// into dst, interning into lv.
func (rd *pqReader) readText(s *pqColumn, chunk parquet.ColumnChunk, dst []int32, row0 int, lv *pqLevels) error {
	var last []byte
	lastCode := int32(-2)
	// Dictionary-encoded pages (what WriteParquet writes): each
	// dictionary entry is interned once, and rows map their index.
	var dict parquet.Dictionary
	var dictCodes []int32
	fast := func(page parquet.Page, row int) int {
		d := page.Dictionary()
		if d == nil || page.Type().Kind() != parquet.ByteArray && page.Type().Kind() != parquet.FixedLenByteArray {
			return 0
		}
		data := page.Data()
		if data.Kind() != encoding.Int32 {
			return 0
		}
		idx := data.Int32()
		n := int(page.NumValues())
		def := page.DefinitionLevels()
		if len(def) != 0 && len(def) != n || len(def) == 0 && len(idx) != n {
			return 0
		}
		if d != dict {
			dict = d
			dictCodes = dictCodes[:0]
			for i := range d.Len() {
				b := d.Index(int32(i)).ByteArray()
				c, ok := lv.m[string(b)]
				if !ok {
					c = -1 // interned at its first row below
				}
				dictCodes = append(dictCodes, c)
			}
		}
		out := dst[row : row+n]
		k := 0
		for i := range out {
			if len(def) != 0 && def[i] != s.def {
				out[i] = -1
				continue
			}
			if k >= len(idx) || idx[k] < 0 || int(idx[k]) >= len(dictCodes) {
				return 0 // malformed: let the general path report it
			}
			c := dictCodes[idx[k]]
			if c < 0 {
				str := string(d.Index(idx[k]).ByteArray())
				if g, ok := lv.m[str]; ok {
					c = g
				} else {
					c = int32(len(lv.levels))
					lv.m[str] = c
					lv.levels = append(lv.levels, str)
					lv.first = append(lv.first, row0+row+i)
				}
				dictCodes[idx[k]] = c
			}
			out[i] = c
			k++
		}
		return n
	}
	return rd.pages(s, chunk, len(dst), fast, func(vals []parquet.Value, row int) error {
		out := dst[row : row+len(vals)]
		for i, v := range vals {
			if v.IsNull() {
				out[i] = -1
				continue
			}
			b := v.ByteArray()
			// Neighbouring rows often repeat a value (dictionary pages
			// hand out the same bytes): skip the map then.
			if lastCode >= 0 && len(b) == len(last) && string(b) == string(last) {
				out[i] = lastCode
				continue
			}
			c, ok := lv.m[string(b)]
			if !ok {
				str := string(b)
				c = int32(len(lv.levels))
				lv.m[str] = c
				lv.levels = append(lv.levels, str)
				lv.first = append(lv.first, row0+row+i)
			}
			out[i] = c
			last, lastCode = b, c
		}
		return nil
	})
}

// pqTextStats sets FirstNonNumber and NumericCells of a text column whose
// level g first appears on row first[g], as ReadCSV does.
func pqTextStats(t *TextColumn, first []int) {
	numeric := make([]bool, len(t.Levels))
	any := false
	for g, s := range t.Levels {
		_, err := strconv.ParseFloat(s, 64)
		numeric[g] = err == nil
		any = any || numeric[g]
	}
	for g, s := range t.Levels {
		if !numeric[g] {
			t.FirstNonNumber = CellRef{Line: first[g] + 2, Text: s}
			break
		}
	}
	if any {
		for _, c := range t.Codes {
			if c >= 0 && numeric[c] {
				t.NumericCells++
			}
		}
	}
}

// parquetGroupRows is the number of rows WriteParquet puts in one row
// group (a variable so that tests can write several small groups).
var parquetGroupRows = 1 << 20

// WriteParquet writes the panel to w as a Parquet file, columns in the
// panel's order: a numeric column as an optional DOUBLE (NaN written as
// null), a text column as an optional UTF-8 string, dictionary-encoded
// (code -1 written as null). Pages are Snappy-compressed, and rows are
// grouped 1,048,576 to a row group. Reading the file with ReadParquet gives
// the same columns bit for bit (text columns' levels in the same order).
// w is written sequentially; WriteParquet does not close it.
func WriteParquet(w io.Writer, p *Panel) error {
	fields := make(pqGroup, len(p.Columns))
	for j, name := range p.Columns {
		if _, ok := p.Num[name]; ok {
			fields[j] = pqField{Node: parquet.Optional(parquet.Leaf(parquet.DoubleType)), name: name}
		} else {
			fields[j] = pqField{Node: parquet.Optional(parquet.Encoded(parquet.String(), &parquet.RLEDictionary)), name: name}
		}
	}
	schema := parquet.NewSchema("panel", fields)
	pw := parquet.NewWriter(w, schema, parquet.Compression(&parquet.Snappy), parquet.CreatedBy("priceiv", "", ""))
	if len(p.Columns) == 0 {
		return pw.Close()
	}
	// Level bytes are built once per text column, so that no cell
	// allocates.
	lvBytes := make([][][]byte, len(p.Columns))
	for j, name := range p.Columns {
		if t, ok := p.Text[name]; ok {
			lvBytes[j] = make([][]byte, len(t.Levels))
			for l, s := range t.Levels {
				lvBytes[j][l] = []byte(s)
			}
		}
	}
	buf := make([]parquet.Value, 0, pqBatch)
	for lo := 0; ; lo += parquetGroupRows {
		hi := min(lo+parquetGroupRows, p.N)
		cws := pw.ColumnWriters()
		for j, name := range p.Columns {
			for a := lo; a < hi; a += pqBatch {
				b := min(a+pqBatch, hi)
				buf = buf[:0]
				if x, ok := p.Num[name]; ok {
					for _, v := range x[a:b] {
						if math.IsNaN(v) {
							buf = append(buf, parquet.NullValue().Level(0, 0, j))
						} else {
							buf = append(buf, parquet.DoubleValue(v).Level(0, 1, j))
						}
					}
				} else {
					for _, c := range p.Text[name].Codes[a:b] {
						if c < 0 {
							buf = append(buf, parquet.NullValue().Level(0, 0, j))
						} else {
							buf = append(buf, parquet.ByteArrayValue(lvBytes[j][c]).Level(0, 1, j))
						}
					}
				}
				if _, err := cws[j].WriteRowValues(buf); err != nil {
					return fmt.Errorf("demand: writing Parquet column %q: %w", name, err)
				}
			}
		}
		if hi >= p.N {
			break
		}
		if err := pw.Flush(); err != nil {
			return fmt.Errorf("demand: writing Parquet row group: %w", err)
		}
	}
	if err := pw.Close(); err != nil {
		return fmt.Errorf("demand: writing Parquet file: %w", err)
	}
	return nil
}

// pqGroup is a Parquet group whose fields keep the panel's column order
// (parquet.Group, a map, would sort them by name).
type pqGroup []parquet.Field

func (g pqGroup) ID() int                           { return 0 }
func (g pqGroup) String() string                    { return "panel" }
func (g pqGroup) Type() parquet.Type                { return parquet.Group{}.Type() }
func (g pqGroup) Optional() bool                    { return false }
func (g pqGroup) Repeated() bool                    { return false }
func (g pqGroup) Required() bool                    { return true }
func (g pqGroup) Leaf() bool                        { return false }
func (g pqGroup) Fields() []parquet.Field           { return g }
func (g pqGroup) Encoding() encoding.Encoding       { return nil }
func (g pqGroup) Compression() compress.Codec       { return nil }
func (g pqGroup) GoType() reflect.Type              { return reflect.TypeFor[map[string]any]() }
func (f pqField) Name() string                      { return f.name }
func (f pqField) Value(reflect.Value) reflect.Value { return reflect.Value{} }

// pqField is one named column of a pqGroup.
type pqField struct {
	parquet.Node
	name string
}
