package demand

import (
	"errors"
	"fmt"
	"sort"
	"strings"
)

// Sentinel causes, for errors.Is.
var (
	// ErrUnknownColumn: a name was used that no column carries.
	ErrUnknownColumn = errors.New("unknown column")
	// ErrUnknownTable marks a database table that does not exist.
	ErrUnknownTable = errors.New("unknown table")
	// ErrNotNumeric: a cell that should hold a number holds text.
	ErrNotNumeric = errors.New("cell is not a number")
	// ErrFieldCount: a record has a different number of fields than the header.
	ErrFieldCount = errors.New("wrong number of fields")
	// ErrQuote: a quoted field is not closed or a quote appears inside an unquoted field.
	ErrQuote = errors.New("bad quoting")
	// ErrNonPositiveLog: a value under a logarithm is zero or negative.
	ErrNonPositiveLog = errors.New("zero or negative value under a log")
	// ErrDuplicateKey: two rows share the same unit and time.
	ErrDuplicateKey = errors.New("duplicate panel key")
	// ErrEmpty: no rows are left.
	ErrEmpty = errors.New("no rows left")
	// ErrHeader: the header row is missing, empty or repeats a name.
	ErrHeader = errors.New("bad header")
)

// ParseError reports a problem at one place of a source file. Line and
// Column are 1-based; Column counts fields (the n-th column of the
// header), not bytes. Name is the header name of that column when known.
type ParseError struct {
	File   string
	Line   int
	Column int
	Name   string
	Text   string // the text found, when it helps
	Hint   string // how to fix it
	Err    error
}

func (e *ParseError) Error() string {
	var b strings.Builder
	if e.File != "" {
		b.WriteString(e.File)
		b.WriteString(": ")
	}
	fmt.Fprintf(&b, "line %d", e.Line)
	if e.Column > 0 {
		fmt.Fprintf(&b, ", column %d", e.Column)
		if e.Name != "" {
			fmt.Fprintf(&b, " (%s)", e.Name)
		}
	}
	fmt.Fprintf(&b, ": %v", e.Err)
	if e.Text != "" {
		fmt.Fprintf(&b, ": found %q", e.Text)
	}
	if e.Hint != "" {
		b.WriteString("; ")
		b.WriteString(e.Hint)
	}
	return b.String()
}

func (e *ParseError) Unwrap() error { return e.Err }

// UnknownColumnError names a column that does not exist and the closest
// names that do.
type UnknownColumnError struct {
	Source string
	Name   string
	Close  []string
	Known  int
	// Lister says how to list the columns (default: the columns
	// command).
	Lister string
}

func (e *UnknownColumnError) Error() string {
	msg := fmt.Sprintf("%s: no column named %q", e.Source, e.Name)
	if len(e.Close) > 0 {
		msg += "; closest names: " + strings.Join(e.Close, ", ")
	}
	lister := e.Lister
	if lister == "" {
		lister = "`priceiv columns FILE` lists them"
	}
	return msg + fmt.Sprintf(" (%d columns in all; %s)", e.Known, lister)
}

func (e *UnknownColumnError) Unwrap() error { return ErrUnknownColumn }

// NotNumericError says that a column used as a number holds text.
type NotNumericError struct {
	Source       string
	Column       string
	Cell         CellRef
	NumericCells int
}

func (e *NotNumericError) Error() string {
	if e.NumericCells == 0 || e.Cell.Line == 0 {
		return fmt.Sprintf("%s: column %q holds text (for example %q on line %d), but it is used as a number; use it as an id (--fe, --cluster) or pick a numeric column",
			e.Source, e.Column, e.Cell.Text, e.Cell.Line)
	}
	return fmt.Sprintf("%s: line %d, column %q: cell is not a number: found %q; fix the cell, or leave it empty to mark it missing",
		e.Source, e.Cell.Line, e.Column, e.Cell.Text)
}

func (e *NotNumericError) Unwrap() error { return ErrNotNumeric }

// closeNames returns up to limit names from known closest to name by edit
// distance (case-insensitive), nearest first.
func closeNames(name string, known []string, limit int) []string {
	type cand struct {
		s string
		d int
	}
	var cs []cand
	ln := strings.ToLower(name)
	for _, k := range known {
		d := editDistance(ln, strings.ToLower(k))
		if strings.Contains(strings.ToLower(k), ln) || strings.Contains(ln, strings.ToLower(k)) {
			d = min(d, 1)
		}
		if d <= max(2, len(name)/2) {
			cs = append(cs, cand{k, d})
		}
	}
	sort.SliceStable(cs, func(i, j int) bool { return cs[i].d < cs[j].d })
	out := []string{}
	for i := 0; i < len(cs) && i < limit; i++ {
		out = append(out, cs[i].s)
	}
	return out
}

// CloseNames is closeNames for other packages (spec keys, candidates).
func CloseNames(name string, known []string, n int) []string { return closeNames(name, known, n) }

func editDistance(a, b string) int {
	ra, rb := []rune(a), []rune(b)
	prev := make([]int, len(rb)+1)
	cur := make([]int, len(rb)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(ra); i++ {
		cur[0] = i
		for j := 1; j <= len(rb); j++ {
			c := 1
			if ra[i-1] == rb[j-1] {
				c = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+c)
		}
		prev, cur = cur, prev
	}
	return prev[len(rb)]
}
