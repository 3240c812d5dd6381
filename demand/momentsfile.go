package demand

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
)

// A moments file holds the sums the SQL path computes, one per line, in
// four columns with a header:
//
//	block,key,term,value
//	model,units,column,0             model column 0 is units (key: name)
//	model,log-log,form,0             the functional form
//	model,store,cluster,0            clustering dimension 0 is store
//	model,week,effect,1              absorbed effect 1 is week
//	profile,0,n,98112                rows kept (key 0) or dropped for a
//	                                 missing value of reason i (key i)
//	cluster:0,S017,n,212             rows of cluster S017 of dimension 0
//	cluster:0,S017,t1,80.95          Σ c1 over the cluster
//	cluster:0,S017,s0_1,-310.2       Σ c0·c1 over the cluster (a ≤ b)
//	total,,s0_1,…                    the same without clusters
//	stat,,q1,…                       Σ c1² before absorption; d1 its s.d.
//	absorb,,sweeps,2                 absorption sweeps; change<e>_<j>,
//	                                 components, moved, single<e>
//	nested,0,effect1,0               levels of effect 1 spanning several
//	                                 clusters of dimension 0
//	shape,,m1,…  fourth,,q17,…       centre, scale and fourth-order sums
//	                                 (HC1)
//
// Columns are numbered in moment order (outcome, endogenous, intercept
// when nothing is absorbed, controls, shifters). It is the result of the
// final query of the SQL that `priceiv sql` prints, saved as CSV by
// whatever engine ran it; rows may come in any order, and an empty value
// is a NULL.

// ReadMomentsFile reads a moments file. Errors are *ParseError values
// carrying the line and column.
func ReadMomentsFile(path string) ([]MomentRow, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return ReadMoments(bufio.NewReader(f), path)
}

// ReadMoments reads a moments file from r; source names it in errors.
func ReadMoments(r io.Reader, source string) ([]MomentRow, error) {
	cr := csv.NewReader(r)
	cr.FieldsPerRecord = -1
	cr.ReuseRecord = true
	head, err := cr.Read()
	if err == io.EOF {
		return nil, &ParseError{File: source, Line: 1, Column: 1, Err: ErrHeader, Hint: "the file is empty: a moments file starts with the header block,key,term,value"}
	}
	if err != nil {
		return nil, csvParseError(source, err)
	}
	want := []string{"block", "key", "term", "value"}
	if len(head) != 4 {
		return nil, &ParseError{File: source, Line: 1, Column: 1, Err: ErrHeader, Hint: fmt.Sprintf("the header has %d fields; a moments file has the four columns %s", len(head), strings.Join(want, ","))}
	}
	for i, h := range head {
		h = strings.TrimPrefix(strings.TrimSpace(h), "\ufeff")
		if !strings.EqualFold(h, want[i]) {
			return nil, &ParseError{File: source, Line: 1, Column: i + 1, Err: ErrHeader, Hint: fmt.Sprintf("header field %d is %q, expected %q (the header is %s)", i+1, h, want[i], strings.Join(want, ","))}
		}
	}
	var out []MomentRow
	seen := map[[3]string]int{}
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, csvParseError(source, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) != 4 {
			return nil, &ParseError{File: source, Line: line, Column: 1, Err: ErrFieldCount, Hint: fmt.Sprintf("%d fields, expected 4 (block,key,term,value)", len(rec))}
		}
		m := MomentRow{Block: rec[0], Key: rec[1], Term: rec[2]}
		id := [3]string{rec[0], rec[1], rec[2]}
		if first, dup := seen[id]; dup {
			return nil, &ParseError{File: source, Line: line, Column: 1, Err: ErrMoments, Text: strings.Join(rec[:3], ","),
				Hint: fmt.Sprintf("the same block, key and term are on line %d: each sum comes once", first)}
		}
		seen[id] = line
		v := strings.TrimSpace(rec[3])
		switch {
		case v == "" || strings.EqualFold(v, "null"):
			m.Value = math.NaN()
		default:
			x, err := strconv.ParseFloat(v, 64)
			if err != nil {
				_, col := cr.FieldPos(3)
				return nil, &ParseError{File: source, Line: line, Column: col, Err: ErrNotNumeric, Text: v, Hint: "the value column holds numbers (sums and counts)"}
			}
			m.Value = x
		}
		out = append(out, m)
	}
	return out, nil
}

// csvParseError turns an encoding/csv error into a ParseError.
func csvParseError(source string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &ParseError{File: source, Line: pe.Line, Column: pe.Column, Err: pe.Err}
	}
	return fmt.Errorf("%s: %w", source, err)
}

// WriteMoments writes rows as a moments file; values round-trip exactly.
func WriteMoments(w io.Writer, rows []MomentRow) error {
	cw := csv.NewWriter(w)
	if err := cw.Write([]string{"block", "key", "term", "value"}); err != nil {
		return err
	}
	for _, r := range rows {
		v := ""
		if !math.IsNaN(r.Value) {
			v = strconv.FormatFloat(r.Value, 'g', -1, 64)
		}
		if err := cw.Write([]string{r.Block, r.Key, r.Term, v}); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// BuildFromMoments returns the Design of the spec's model from the rows
// of a moments file (source names it in errors). The rows must have been
// made for this model: the same columns in the same order, form, fixed
// effects and clusters; anything missing is named.
func BuildFromMoments(s *Spec, rows []MomentRow, source string) (*Design, error) {
	p, err := newSQLPlan(s, SQLSource{}, Postgres, false)
	if err != nil {
		return nil, err
	}
	return designFromMoments(p, rows, source)
}
