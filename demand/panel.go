package demand

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
)

// Panel is a table of columns read from one source (a CSV file, a Parquet
// file or a generator). Every column has N rows. A column is numeric when
// each non-empty cell parsed as a number; otherwise it is a text column whose
// cells are interned into levels. Missing numeric cells are NaN; missing
// text cells have code -1.
//
// Columns keeps the order of the source's header. Inputs handed to the
// panel (column slices) are owned by it afterwards.
type Panel struct {
	// Source names where the panel came from (a file path or "demo").
	Source string
	// N is the number of rows.
	N int
	// Columns lists the column names in source order.
	Columns []string
	// Num holds the numeric columns by name.
	Num map[string][]float64
	// Text holds the text columns by name.
	Text map[string]*TextColumn
	// Lines maps a row index to its 1-based line number in the source,
	// for error messages. It is nil when rows and lines coincide as
	// row+2 (a header line followed by one line per record).
	Lines []int
}

// TextColumn is a column of interned strings.
type TextColumn struct {
	// Codes has one entry per row: an index into Levels, or -1 for a
	// missing (empty) cell.
	Codes []int32
	// Levels holds the distinct strings in order of first appearance.
	Levels []string
	// FirstNonNumber records the first cell (1-based line) whose text did
	// not parse as a number, and the text found, so that using a mostly
	// numeric column as a number gives a precise error. When no cell
	// parsed as a number, it is the column's first non-empty cell.
	FirstNonNumber CellRef
	// NumericCells counts the non-empty cells that did parse as numbers.
	NumericCells int
}

// CellRef points at one cell of the source.
type CellRef struct {
	Line int    // 1-based line number in the source
	Text string // the text found in the cell
}

// NewPanel returns an empty panel for n rows read from source.
func NewPanel(source string, n int) *Panel {
	return &Panel{Source: source, N: n, Num: map[string][]float64{}, Text: map[string]*TextColumn{}}
}

// AddNum adds (or replaces) a numeric column. It panics if len(x) != p.N.
func (p *Panel) AddNum(name string, x []float64) {
	if len(x) != p.N {
		panic(fmt.Sprintf("demand: column %q has %d rows, panel has %d", name, len(x), p.N))
	}
	if _, ok := p.Num[name]; !ok {
		if _, ok := p.Text[name]; !ok {
			p.Columns = append(p.Columns, name)
		}
	}
	delete(p.Text, name)
	p.Num[name] = x
}

// AddText adds (or replaces) a text column. It panics if len(c.Codes) != p.N.
func (p *Panel) AddText(name string, c *TextColumn) {
	if len(c.Codes) != p.N {
		panic(fmt.Sprintf("demand: column %q has %d rows, panel has %d", name, len(c.Codes), p.N))
	}
	if _, ok := p.Num[name]; !ok {
		if _, ok := p.Text[name]; !ok {
			p.Columns = append(p.Columns, name)
		}
	}
	delete(p.Num, name)
	p.Text[name] = c
}

// Has reports whether the panel has a column of that name.
func (p *Panel) Has(name string) bool {
	_, a := p.Num[name]
	_, b := p.Text[name]
	return a || b
}

// Line returns the 1-based source line of row i.
func (p *Panel) Line(i int) int {
	if p.Lines != nil {
		return p.Lines[i]
	}
	return i + 2
}

// IDs returns integer level codes for a column used as an identifier (a
// fixed effect, cluster, unit or time). Text columns give their codes;
// numeric columns are interned by value, levels sorted ascending. Missing
// cells have code -1. The level labels are returned as strings.
//
// A name of the form "a*b" (any number of parts) is the interaction of id
// columns: each combination of levels that occurs is one level, labelled
// "a×b", in order of first appearance.
func (p *Panel) IDs(name string) (codes []int32, levels []string, err error) {
	if strings.Contains(name, "*") {
		return p.interactionIDs(name)
	}
	if t, ok := p.Text[name]; ok {
		return t.Codes, t.Levels, nil
	}
	x, ok := p.Num[name]
	if !ok {
		return nil, nil, p.unknown(name)
	}
	seen := map[float64]int32{}
	for _, v := range x {
		if math.IsNaN(v) {
			continue
		}
		seen[v] = 0
	}
	vals := make([]float64, 0, len(seen))
	for v := range seen {
		vals = append(vals, v)
	}
	sort.Float64s(vals)
	levels = make([]string, len(vals))
	for i, v := range vals {
		seen[v] = int32(i)
		levels[i] = strconv.FormatFloat(v, 'g', -1, 64)
	}
	codes = make([]int32, len(x))
	for i, v := range x {
		if math.IsNaN(v) {
			codes[i] = -1
			continue
		}
		codes[i] = seen[v]
	}
	return codes, levels, nil
}

// Float returns a numeric column by name, with a precise error when the
// column does not exist or holds text.
//
// A column holding an infinite value (a cell reading "Inf", or a number
// too large for double precision in a Parquet file) is refused with the
// count and the first line: no estimate can use it.
func (p *Panel) Float(name string) ([]float64, error) {
	if x, ok := p.Num[name]; ok {
		bad, first := 0, -1
		for i, v := range x {
			if math.IsInf(v, 0) {
				bad++
				if first < 0 {
					first = i
				}
			}
		}
		if bad > 0 {
			return nil, &ParseError{File: p.Source, Line: p.Line(first), Name: name, Text: strconv.FormatFloat(x[first], 'g', -1, 64),
				Err: ErrNotNumeric, Hint: fmt.Sprintf("%d cell(s) of column %q are infinite; correct them, or leave them empty to mark them missing", bad, name)}
		}
		return x, nil
	}
	if t, ok := p.Text[name]; ok {
		return nil, &NotNumericError{Source: p.Source, Column: name, Cell: t.FirstNonNumber, NumericCells: t.NumericCells}
	}
	return nil, p.unknown(name)
}

func (p *Panel) unknown(name string) error {
	return &UnknownColumnError{Source: p.Source, Name: name, Close: closeNames(name, p.Columns, 3), Known: len(p.Columns)}
}

// Subset returns a new panel holding the rows where keep is true. Columns
// are copied; p is not modified.
func (p *Panel) Subset(keep []bool) *Panel {
	if len(keep) != p.N {
		panic("demand: keep mask length mismatch")
	}
	n := 0
	for _, k := range keep {
		if k {
			n++
		}
	}
	q := NewPanel(p.Source, n)
	q.Lines = make([]int, 0, n)
	for i, k := range keep {
		if k {
			q.Lines = append(q.Lines, p.Line(i))
		}
	}
	for _, name := range p.Columns {
		if x, ok := p.Num[name]; ok {
			y := make([]float64, 0, n)
			for i, k := range keep {
				if k {
					y = append(y, x[i])
				}
			}
			q.AddNum(name, y)
			continue
		}
		t := p.Text[name]
		c := &TextColumn{Codes: make([]int32, 0, n), Levels: t.Levels, FirstNonNumber: t.FirstNonNumber, NumericCells: t.NumericCells}
		for i, k := range keep {
			if k {
				c.Codes = append(c.Codes, t.Codes[i])
			}
		}
		q.AddText(name, c)
	}
	return q
}

// interactionIDs returns the codes of an interaction "a*b" of id columns.
func (p *Panel) interactionIDs(name string) ([]int32, []string, error) {
	parts := strings.Split(name, "*")
	codes, levels, err := p.IDs(strings.TrimSpace(parts[0]))
	if err != nil {
		return nil, nil, err
	}
	for _, part := range parts[1:] {
		c2, l2, err := p.IDs(strings.TrimSpace(part))
		if err != nil {
			return nil, nil, err
		}
		type pair struct{ a, b int32 }
		idx := map[pair]int32{}
		out := make([]int32, len(codes))
		var lv []string
		for i := range codes {
			if codes[i] < 0 || c2[i] < 0 {
				out[i] = -1
				continue
			}
			k := pair{codes[i], c2[i]}
			v, ok := idx[k]
			if !ok {
				v = int32(len(lv))
				idx[k] = v
				lv = append(lv, levels[codes[i]]+"×"+l2[c2[i]])
			}
			out[i] = v
		}
		codes, levels = out, lv
	}
	return codes, levels, nil
}
