package elasticity

import (
	"fmt"
	"io"
	"math"
	"reflect"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/xuri/excelize/v2"
)

// reportTable is one table of a report: its name (the sheet of the
// workbook and the CSV file) and its rows, a slice of one of the row
// types (ElasticityRow, CrossRow, ...).
type reportTable struct {
	Name string
	Rows any
}

// Tables lists the tables of a report in workbook order, with their
// names. Tables of sections that were not computed are present and empty,
// so the workbook always has the same sheets; demo_truth is present only
// when true values are known.
func (r *ReportData) tables() []reportTable {
	ts := []reportTable{
		{"elasticities", r.Elasticities},
		{"cross_price", r.Cross},
		{"markups", r.Markups},
		{"what_ifs", r.WhatIfs},
		{"shifters", r.Shifters},
		{"shifter_tests", r.Tests},
		{"pooled_terms", r.Terms},
	}
	if len(r.Screen) > 0 {
		ts = append(ts, reportTable{"screen", r.Screen})
	}
	if len(r.Truth) > 0 {
		ts = append(ts, reportTable{"demo_truth", r.Truth})
	}
	return append(ts, reportTable{"run_record", r.Record.Rows()})
}

// TableNames lists the names of the report's tables, in workbook order.
func (r *ReportData) TableNames() []string {
	var out []string
	for _, t := range r.tables() {
		out = append(out, t.Name)
	}
	return out
}

// column is one column of a table as the workbook writes it.
type column struct {
	field  int
	header string
	kind   string
}

func columnsOf(t reflect.Type) []column {
	var cols []column
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		h := strings.Split(f.Tag.Get("csv"), ",")[0]
		if h == "" || h == "-" {
			continue
		}
		cols = append(cols, column{field: i, header: h, kind: f.Tag.Get("xlsx")})
	}
	return cols
}

// numFormats are the workbook's number formats by column kind.
var numFormats = map[string]string{
	"elast": "0.00",
	"coef":  "0.0000",
	"stat":  "#,##0.0",
	"p":     "0.0000",
	"pct":   "0.0%",
	"money": "#,##0.00",
	"units": "#,##0",
	"int":   "#,##0",
}

// WriteXLSX writes the report's tables as a workbook: one sheet per table
// (and a wide view of the cross-price matrix), a frozen header row with
// filters, column widths that fit their contents, numbers stored as
// numbers at full precision with a format per kind (elasticities with two
// decimals, shares as percentages), bands and warnings in columns of their
// own, and every text cell neutralised against formula injection
// (SafeCell).
func WriteXLSX(w io.Writer, r *ReportData) error {
	f := excelize.NewFile()
	defer f.Close()
	_ = f.SetDocProps(&excelize.DocProperties{Title: r.Title, Creator: r.Record.Program + " " + r.Record.Version, Description: "Tables of a priceiv report"})
	head, err := f.NewStyle(&excelize.Style{
		Font:      &excelize.Font{Bold: true, Color: "FFFFFF"},
		Fill:      excelize.Fill{Type: "pattern", Pattern: 1, Color: []string{"1D2B36"}},
		Alignment: &excelize.Alignment{Vertical: "center"},
	})
	if err != nil {
		return fmt.Errorf("workbook: %w", err)
	}
	styles := map[string]int{}
	for k, nf := range numFormats {
		nf := nf
		id, err := f.NewStyle(&excelize.Style{CustomNumFmt: &nf})
		if err != nil {
			return fmt.Errorf("workbook: %w", err)
		}
		styles[k] = id
	}
	first := true
	for _, t := range r.tables() {
		if first {
			if err := f.SetSheetName("Sheet1", t.Name); err != nil {
				return fmt.Errorf("workbook: %w", err)
			}
			first = false
		} else if _, err := f.NewSheet(t.Name); err != nil {
			return fmt.Errorf("workbook: %w", err)
		}
		if err := writeSheet(f, t.Name, t.Rows, head, styles); err != nil {
			return err
		}
		if t.Name == "cross_price" && r.CrossInfo != nil {
			if err := writeCrossMatrix(f, r, head, styles); err != nil {
				return err
			}
		}
	}
	f.SetActiveSheet(0)
	if _, err := f.WriteTo(w); err != nil {
		return fmt.Errorf("workbook: %w", err)
	}
	return nil
}

// writeSheet writes one table to a sheet.
func writeSheet(f *excelize.File, sheet string, rows any, head int, styles map[string]int) error {
	v := reflect.ValueOf(rows)
	cols := columnsOf(v.Type().Elem())
	width := make([]int, len(cols))
	for j, c := range cols {
		cell, _ := excelize.CoordinatesToCellName(j+1, 1)
		if err := f.SetCellStr(sheet, cell, c.header); err != nil {
			return fmt.Errorf("workbook sheet %s: %w", sheet, err)
		}
		width[j] = utf8.RuneCountInString(c.header) + 3 // room for the filter button
		if id, ok := styles[c.kind]; ok {
			name, _ := excelize.ColumnNumberToName(j + 1)
			if err := f.SetColStyle(sheet, name, id); err != nil {
				return fmt.Errorf("workbook sheet %s: %w", sheet, err)
			}
		}
	}
	for i := 0; i < v.Len(); i++ {
		row := v.Index(i)
		for j, c := range cols {
			cell, _ := excelize.CoordinatesToCellName(j+1, i+2)
			n, err := setCell(f, sheet, cell, row.Field(c.field).Interface(), c.kind)
			if err != nil {
				return fmt.Errorf("workbook sheet %s, cell %s: %w", sheet, cell, err)
			}
			width[j] = max(width[j], n)
		}
	}
	last, _ := excelize.CoordinatesToCellName(len(cols), max(v.Len()+1, 2))
	for j, c := range cols {
		name, _ := excelize.ColumnNumberToName(j + 1)
		limit := 40
		if c.kind == "wide" {
			limit = 90
		}
		if err := f.SetColWidth(sheet, name, name, float64(min(max(width[j]+1, 8), limit))); err != nil {
			return fmt.Errorf("workbook sheet %s: %w", sheet, err)
		}
	}
	lastHead, _ := excelize.CoordinatesToCellName(len(cols), 1)
	if err := f.SetCellStyle(sheet, "A1", lastHead, head); err != nil {
		return fmt.Errorf("workbook sheet %s: %w", sheet, err)
	}
	if err := f.SetPanes(sheet, &excelize.Panes{Freeze: true, YSplit: 1, TopLeftCell: "A2", ActivePane: "bottomLeft",
		Selection: []excelize.Selection{{SQRef: "A2", ActiveCell: "A2", Pane: "bottomLeft"}}}); err != nil {
		return fmt.Errorf("workbook sheet %s: %w", sheet, err)
	}
	if v.Len() > 0 {
		if err := f.AutoFilter(sheet, "A1:"+last, nil); err != nil {
			return fmt.Errorf("workbook sheet %s: %w", sheet, err)
		}
	}
	return nil
}

// setCell writes one value and returns the width of how it shows.
func setCell(f *excelize.File, sheet, cell string, v any, kind string) (int, error) {
	switch x := v.(type) {
	case Number:
		if !x.Finite() {
			return 0, nil
		}
		return shownWidth(x.F(), kind), f.SetCellFloat(sheet, cell, x.F(), exactDecimals(x.F()), 64)
	case float64:
		return setCell(f, sheet, cell, Number(x), kind)
	case int:
		return len(strconv.Itoa(x)) + len(strconv.Itoa(x))/3, f.SetCellInt(sheet, cell, int64(x))
	case bool:
		return 5, f.SetCellBool(sheet, cell, x)
	case Text:
		return setText(f, sheet, cell, string(x))
	case string:
		return setText(f, sheet, cell, x)
	}
	return 0, fmt.Errorf("no workbook format for %T", v)
}

func setText(f *excelize.File, sheet, cell, s string) (int, error) {
	if s == "" {
		return 0, nil
	}
	s = SafeCell(s)
	return utf8.RuneCountInString(s), f.SetCellStr(sheet, cell, s)
}

// exactDecimals returns the number of decimals of the shortest decimal
// that reads back as x, so that the workbook stores x exactly (excelize
// would otherwise cut it to 15 significant digits).
func exactDecimals(x float64) int {
	s := strconv.FormatFloat(x, 'f', -1, 64)
	if i := strings.IndexByte(s, '.'); i >= 0 {
		return len(s) - i - 1
	}
	return 0
}

// shownWidth estimates the characters a number takes in its format.
func shownWidth(x float64, kind string) int {
	d := map[string]int{"elast": 2, "coef": 4, "stat": 1, "p": 4, "pct": 1, "money": 2, "units": 0, "int": 0}[kind]
	if kind == "pct" {
		x *= 100
	}
	s := strconv.FormatFloat(x, 'f', d, 64)
	n := len(s)
	if kind == "stat" || kind == "money" || kind == "units" || kind == "int" {
		intDigits := len(strings.TrimPrefix(strings.Split(s, ".")[0], "-"))
		n += (intDigits - 1) / 3
	}
	if kind == "pct" {
		n++
	}
	return n
}

// writeCrossMatrix adds a sheet with the cross-price matrix laid out
// wide: rows are the products whose units respond, columns the products
// whose price moves.
func writeCrossMatrix(f *excelize.File, r *ReportData, head int, styles map[string]int) error {
	const sheet = "cross_matrix"
	ci := r.CrossInfo
	n := len(ci.Products)
	if len(r.Cross) != n*n {
		return nil
	}
	if _, err := f.NewSheet(sheet); err != nil {
		return fmt.Errorf("workbook: %w", err)
	}
	corner := "units of \\ price of"
	_ = f.SetCellStr(sheet, "A1", corner)
	w0 := len(corner)
	for j, p := range ci.Products {
		cell, _ := excelize.CoordinatesToCellName(j+2, 1)
		_ = f.SetCellStr(sheet, cell, SafeCell(p))
	}
	for i, p := range ci.Products {
		cell, _ := excelize.CoordinatesToCellName(1, i+2)
		_ = f.SetCellStr(sheet, cell, SafeCell(p))
		w0 = max(w0, utf8.RuneCountInString(p))
		for j := range n {
			cell, _ := excelize.CoordinatesToCellName(j+2, i+2)
			x := r.Cross[i*n+j].Elasticity
			if x.Finite() {
				if err := f.SetCellFloat(sheet, cell, x.F(), exactDecimals(x.F()), 64); err != nil {
					return fmt.Errorf("workbook sheet %s: %w", sheet, err)
				}
			}
		}
	}
	last, _ := excelize.CoordinatesToCellName(n+1, n+1)
	_ = f.SetCellStyle(sheet, "B2", last, styles["elast"])
	lastHead, _ := excelize.CoordinatesToCellName(n+1, 1)
	_ = f.SetCellStyle(sheet, "A1", lastHead, head)
	_ = f.SetColWidth(sheet, "A", "A", float64(w0+2))
	lastCol, _ := excelize.ColumnNumberToName(n + 1)
	wc := 8.0
	for _, p := range ci.Products {
		wc = math.Max(wc, float64(utf8.RuneCountInString(p)+2))
	}
	_ = f.SetColWidth(sheet, "B", lastCol, math.Min(wc, 28))
	return f.SetPanes(sheet, &excelize.Panes{Freeze: true, XSplit: 1, YSplit: 1, TopLeftCell: "B2", ActivePane: "bottomRight",
		Selection: []excelize.Selection{{SQRef: "B2", ActiveCell: "B2", Pane: "bottomRight"}}})
}
