package supplyshifters

import (
	_ "embed"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"sync"
)

// SYKind names one of the Stock & Yogo (2005) critical-value tables.
type SYKind int

const (
	// TSLSBias is Table 5.1: the Cragg-Donald statistic above the critical
	// value rejects, at the 5% level, that the TSLS relative bias (relative
	// to the OLS bias) exceeds the threshold b.
	TSLSBias SYKind = iota
	// TSLSSize is Table 5.2: rejects that the actual size of a nominal 5%
	// TSLS Wald test exceeds the threshold r.
	TSLSSize
	// LIMLSize is Table 5.4: the same as TSLSSize for the LIML Wald test.
	LIMLSize
)

// String returns a readable name of the table.
func (k SYKind) String() string {
	switch k {
	case TSLSBias:
		return "TSLS relative bias"
	case TSLSSize:
		return "TSLS size"
	case LIMLSize:
		return "LIML size"
	}
	return "SYKind(" + strconv.Itoa(int(k)) + ")"
}

// syToken is the name of each table in stockyogo_table.csv.
var syToken = map[string]SYKind{
	"tsls_bias": TSLSBias,
	"tsls_size": TSLSSize,
	"liml_size": LIMLSize,
}

// SYCritical is one cell of a Stock & Yogo table.
type SYCritical struct {
	// Kind is the table the cell comes from.
	Kind SYKind
	// Threshold is the tolerated maximal relative bias b (TSLSBias: 0.05,
	// 0.10, 0.20, 0.30) or the tolerated maximal size r of a nominal 5% Wald
	// test (TSLSSize, LIMLSize: 0.10, 0.15, 0.20, 0.25).
	Threshold float64
	// Value is the critical value for the Cragg-Donald statistic: instruments
	// are judged weak at the 5% level unless the statistic exceeds Value.
	Value float64
	// Provenance says how the cell was obtained ("from memory" or "checked
	// against a second copy"); see the header of stockyogo_table.csv.
	Provenance string
}

//go:embed stockyogo_table.csv
var syTableCSV string

type syKey struct {
	kind        SYKind
	endogenous  int
	instruments int
}

var (
	syOnce  sync.Once
	syCells map[syKey][]SYCritical
)

// StockYogo returns every tabulated critical value of the given table for
// the given numbers of endogenous regressors and excluded instruments,
// sorted by increasing threshold, or nil if the cell is not tabulated.
// The test rejects weak instruments at the 5% level when the Cragg-Donald
// statistic (minimum eigenvalue of the concentration-matrix estimate,
//
//	g_min = mineig( Σ̂_VV^{-1/2} Yᵀ P_Z Y Σ̂_VV^{-1/2} ) / K2
//
// with exogenous regressors partialled out) exceeds Value. With one
// endogenous regressor g_min is the first-stage F statistic. The values
// assume homoskedastic errors; with robust or clustered errors use
// EffectiveF and MOPCritical instead.
//
// The bias table starts at K2 = n+2 instruments, the size tables at K2 = n.
// The cells covered and their provenance are listed in the header of
// stockyogo_table.csv.
//
// Reference: Stock, J.H. and Yogo, M. (2005), "Testing for Weak Instruments
// in Linear IV Regression", in Andrews, D.W.K. and Stock, J.H. (eds.),
// Identification and Inference for Econometric Models: Essays in Honor of
// Thomas Rothenberg, Cambridge University Press, 80-108, Tables 5.1, 5.2
// and 5.4.
func StockYogo(kind SYKind, endogenous, instruments int) []SYCritical {
	syOnce.Do(func() {
		rows, err := parseSYTable(strings.NewReader(syTableCSV), "stockyogo_table.csv")
		if err != nil {
			panic("supplyshifters: embedded Stock-Yogo table is broken: " + err.Error())
		}
		syCells = make(map[syKey][]SYCritical)
		for _, r := range rows {
			k := syKey{r.Kind, r.endogenous, r.instruments}
			syCells[k] = append(syCells[k], r.SYCritical)
		}
		for _, c := range syCells {
			sort.Slice(c, func(i, j int) bool { return c[i].Threshold < c[j].Threshold })
		}
	})
	c := syCells[syKey{kind, endogenous, instruments}]
	if len(c) == 0 {
		return nil
	}
	return append([]SYCritical(nil), c...)
}

// syRow is one parsed line of the table file.
type syRow struct {
	SYCritical
	endogenous  int
	instruments int
	line        int
}

// syHeader is the required first record of the table file.
var syHeader = []string{"table", "endogenous", "instruments", "threshold", "value", "provenance"}

// errSYTable is the sentinel wrapped by every table parse error.
var errSYTable = errors.New("bad Stock-Yogo table")

// syParseError locates a problem in the table file.
type syParseError struct {
	File   string
	Line   int
	Column int // 1-indexed byte column; 0 when it concerns the whole line
	Field  string
	Found  string
	Fix    string
}

func (e *syParseError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "supplyshifters: %s line %d", e.File, e.Line)
	if e.Column > 0 {
		fmt.Fprintf(&b, ", column %d", e.Column)
	}
	if e.Field != "" {
		fmt.Fprintf(&b, " (%s)", e.Field)
	}
	fmt.Fprintf(&b, ": found %q; %s", e.Found, e.Fix)
	return b.String()
}

func (e *syParseError) Unwrap() error { return errSYTable }

// parseSYTable reads a Stock-Yogo table file: lines starting with # are
// comments, the first record is the header syHeader, and each later record
// is one cell. name is used in error messages.
func parseSYTable(r io.Reader, name string) ([]syRow, error) {
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1

	bad := func(line, col int, field, found, fix string) error {
		return &syParseError{File: name, Line: line, Column: col, Field: field, Found: found, Fix: fix}
	}

	header, err := cr.Read()
	if err == io.EOF {
		return nil, bad(1, 0, "", "", "the file is empty; it needs the header line "+strings.Join(syHeader, ","))
	}
	if err != nil {
		return nil, fmt.Errorf("supplyshifters: %s: %w", name, err)
	}
	hl, _ := cr.FieldPos(0)
	if strings.Join(header, ",") != strings.Join(syHeader, ",") {
		return nil, bad(hl, 1, "header", strings.Join(header, ","), "the first line that is not a # comment must be "+strings.Join(syHeader, ","))
	}

	var rows []syRow
	seen := make(map[[4]float64]int)
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("supplyshifters: %s: %w", name, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) != len(syHeader) {
			return nil, bad(line, 0, "", strings.Join(rec, ","), fmt.Sprintf("each line needs %d comma-separated fields (%s), this one has %d", len(syHeader), strings.Join(syHeader, ","), len(rec)))
		}
		col := func(i int) int { _, c := cr.FieldPos(i); return c }

		kind, ok := syToken[rec[0]]
		if !ok {
			return nil, bad(line, col(0), "table", rec[0], "use one of tsls_bias, tsls_size, liml_size")
		}
		endo, err := strconv.Atoi(rec[1])
		if err != nil || endo < 1 {
			return nil, bad(line, col(1), "endogenous", rec[1], "give the number of endogenous regressors as a whole number of at least 1")
		}
		inst, err := strconv.Atoi(rec[2])
		if err != nil || inst < 1 {
			return nil, bad(line, col(2), "instruments", rec[2], "give the number of excluded instruments as a whole number of at least 1")
		}
		minInst := endo
		if kind == TSLSBias {
			minInst = endo + 2
		}
		if inst < minInst {
			return nil, bad(line, col(2), "instruments", rec[2], fmt.Sprintf("the %s table starts at %d instruments for %d endogenous regressor(s)", rec[0], minInst, endo))
		}
		th, err := strconv.ParseFloat(rec[3], 64)
		if err != nil || !(th > 0 && th < 1) {
			return nil, bad(line, col(3), "threshold", rec[3], "give the tolerated bias or size as a fraction strictly between 0 and 1, e.g. 0.10")
		}
		v, err := strconv.ParseFloat(rec[4], 64)
		if err != nil || !(v > 0) || math.IsInf(v, 0) {
			return nil, bad(line, col(4), "value", rec[4], "give the critical value as a positive number")
		}
		prov := strings.TrimSpace(rec[5])
		if prov == "" {
			return nil, bad(line, col(5), "provenance", rec[5], `say where the value comes from, e.g. "from memory"`)
		}
		key := [4]float64{float64(kind), float64(endo), float64(inst), th}
		if first, dup := seen[key]; dup {
			return nil, bad(line, 1, "", strings.Join(rec[:4], ","), fmt.Sprintf("this cell is already given on line %d; keep one of the two", first))
		}
		seen[key] = line
		rows = append(rows, syRow{
			SYCritical:  SYCritical{Kind: kind, Threshold: th, Value: v, Provenance: prov},
			endogenous:  endo,
			instruments: inst,
			line:        line,
		})
	}
	if len(rows) == 0 {
		return nil, bad(hl, 0, "", "", "the table has a header but no cells")
	}
	return rows, nil
}
