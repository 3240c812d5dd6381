package elasticity

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"github.com/gocarina/gocsv"
)

// PriceRow is one line of a --prices file: the current price of a product
// and, optionally, its unit cost, its units per period and its owner.
type PriceRow struct {
	// Product names the product as in the model.
	Product string `csv:"product"`
	// Price is the current price, > 0 (required).
	Price *float64 `csv:"price,omitempty"`
	// UnitCost is the cost of one more unit, > 0 (optional).
	UnitCost *float64 `csv:"unit_cost,omitempty"`
	// Quantity is the units sold per period at the current price, > 0
	// (optional; needed for changes in units and money and for
	// product-line margins).
	Quantity *float64 `csv:"quantity,omitempty"`
	// Owner is the firm that sets the price (optional; products without
	// an owner belong to the firm running the analysis).
	Owner string `csv:"owner"`
	// Line is the line of the file the row came from.
	Line int `csv:"-"`
}

// PriceColumns lists the columns a --prices file may have; product and
// price are required.
var PriceColumns = []string{"product", "price", "unit_cost", "quantity", "owner"}

// PricesError is a problem in a --prices file, at a line (0 for the file
// as a whole) and column.
type PricesError struct {
	File   string
	Line   int
	Column string
	Msg    string
}

func (e *PricesError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ", line %d", e.Line)
	}
	if e.Column != "" {
		fmt.Fprintf(&b, ", column %s", e.Column)
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	return b.String()
}

// ReadPricesFile reads a --prices CSV file; see ReadPrices.
func ReadPricesFile(path string, products []string) ([]PriceRow, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("cannot read the prices file: %w", err)
	}
	return ReadPrices(bytes.NewReader(data), path, products)
}

// ReadPrices reads a comma-separated table of current prices with the
// header columns product, price and optionally unit_cost, quantity and
// owner (any order, case and surrounding spaces ignored), one row per
// product of the model, and returns the rows in the order of products.
// When products is nil the file defines the products, in its own order
// (for a model that estimated one elasticity for all products). name
// labels the source in errors.
//
// ReadPrices returns an error naming the line and column for an unknown
// or duplicated column, a missing product or price column, an empty
// product name, a price, unit cost or quantity that is not a positive
// finite number, a product listed twice or not in the model, and a
// product of the model that the file leaves out (listing the model's
// products).
func ReadPrices(r io.Reader, name string, products []string) ([]PriceRow, error) {
	raw, err := io.ReadAll(r)
	if err != nil {
		return nil, fmt.Errorf("cannot read %s: %w", name, err)
	}
	raw = bytes.TrimPrefix(raw, []byte("\ufeff"))
	cr := csv.NewReader(bytes.NewReader(raw))
	cr.FieldsPerRecord = 0
	var recs [][]string
	var lines []int
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			var pe *csv.ParseError
			if errors.As(err, &pe) {
				return nil, &PricesError{File: name, Line: pe.Line, Msg: fmt.Sprintf("%v (a prices file is comma-separated with a header line: product,price,unit_cost)", pe.Err)}
			}
			return nil, fmt.Errorf("%s: %w", name, err)
		}
		line, _ := cr.FieldPos(0)
		recs = append(recs, rec)
		lines = append(lines, line)
	}
	if len(recs) == 0 {
		return nil, &PricesError{File: name, Msg: "the file is empty; it needs a header line product,price (and optionally unit_cost, quantity, owner) and one line per product"}
	}
	header := recs[0]
	seen := map[string]int{}
	for j, h := range header {
		h = strings.ToLower(strings.TrimSpace(h))
		header[j] = h
		if !contains(PriceColumns, h) {
			hint := ""
			if strings.ContainsAny(h, ";\t") {
				hint = "; the file looks separated by semicolons or tabs, but a prices file is comma-separated"
			}
			return nil, &PricesError{File: name, Line: lines[0], Column: fmt.Sprintf("%d", j+1), Msg: fmt.Sprintf("unknown column %q: the columns of a prices file are %s%s", h, strings.Join(PriceColumns, ", "), hint)}
		}
		if k, dup := seen[h]; dup {
			return nil, &PricesError{File: name, Line: lines[0], Column: h, Msg: fmt.Sprintf("column %q appears twice (columns %d and %d); keep one", h, k+1, j+1)}
		}
		seen[h] = j
	}
	for _, need := range []string{"product", "price"} {
		if _, ok := seen[need]; !ok {
			return nil, &PricesError{File: name, Line: lines[0], Msg: fmt.Sprintf("no %q column: the header must name at least product and price (found %s)", need, strings.Join(header, ", "))}
		}
	}

	var rows []PriceRow
	if err := gocsv.UnmarshalCSV(&recordReader{recs: recs}, &rows); err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) && pe.Line >= 1 && pe.Line <= len(lines) && pe.Column >= 1 && pe.Column <= len(header) {
			cell := ""
			if rec := recs[pe.Line-1]; pe.Column-1 < len(rec) {
				cell = rec[pe.Column-1]
			}
			return nil, &PricesError{File: name, Line: lines[pe.Line-1], Column: header[pe.Column-1], Msg: fmt.Sprintf("cannot read %q as a number; write a plain number such as 2.49", cell)}
		}
		return nil, fmt.Errorf("%s: %w", name, err)
	}

	byProduct := map[string]int{}
	for i := range rows {
		row := &rows[i]
		row.Line = lines[i+1]
		row.Product = strings.TrimSpace(row.Product)
		row.Owner = strings.TrimSpace(row.Owner)
		if row.Product == "" {
			return nil, &PricesError{File: name, Line: row.Line, Column: "product", Msg: "the product name is empty"}
		}
		if k, dup := byProduct[row.Product]; dup {
			return nil, &PricesError{File: name, Line: row.Line, Column: "product", Msg: fmt.Sprintf("product %q is listed twice (lines %d and %d); keep one line per product", row.Product, rows[k].Line, row.Line)}
		}
		byProduct[row.Product] = i
		if products != nil && !contains(products, row.Product) {
			return nil, &PricesError{File: name, Line: row.Line, Column: "product", Msg: fmt.Sprintf("product %q is not in the model; the model's products are %s", row.Product, quoteList(products))}
		}
		if row.Price == nil {
			return nil, &PricesError{File: name, Line: row.Line, Column: "price", Msg: fmt.Sprintf("no price for product %q; every product needs its current price", row.Product)}
		}
		for _, v := range []struct {
			col string
			x   *float64
		}{{"price", row.Price}, {"unit_cost", row.UnitCost}, {"quantity", row.Quantity}} {
			if v.x == nil {
				continue
			}
			if x := *v.x; !(x > 0) || math.IsInf(x, 0) {
				return nil, &PricesError{File: name, Line: row.Line, Column: v.col, Msg: fmt.Sprintf("%s %s for product %q: it must be a positive number (a zero or negative %s has no meaning here)", v.col, strconv.FormatFloat(x, 'g', -1, 64), row.Product, strings.ReplaceAll(v.col, "_", " "))}
			}
		}
	}
	if products == nil {
		return rows, nil
	}
	out := make([]PriceRow, len(products))
	var missing []string
	for j, p := range products {
		i, ok := byProduct[p]
		if !ok {
			missing = append(missing, p)
			continue
		}
		out[j] = rows[i]
	}
	if len(missing) > 0 {
		return nil, &PricesError{File: name, Msg: fmt.Sprintf("no line for product %s; the model's products are %s, and each needs a line", quoteList(missing), quoteList(products))}
	}
	return out, nil
}

// recordReader hands records already read (and their header normalised)
// to gocsv.
type recordReader struct {
	recs [][]string
	i    int
}

func (r *recordReader) Read() ([]string, error) {
	if r.i >= len(r.recs) {
		return nil, io.EOF
	}
	r.i++
	return r.recs[r.i-1], nil
}

func (r *recordReader) ReadAll() ([][]string, error) {
	rest := r.recs[r.i:]
	r.i = len(r.recs)
	return rest, nil
}

func contains(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}
