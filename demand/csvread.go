package demand

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"runtime"
	"strconv"
	"sync"
	"unsafe"
)

// ReadOptions controls how ReadCSV and ReadCSVFile read a file.
type ReadOptions struct {
	// Delimiter separates the fields of a record. 0 means ','. ';' and
	// '\t' are common alternatives. It may not be '"', '\r' or '\n'.
	Delimiter byte
	// Workers is the number of goroutines that parse records. 0 means
	// runtime.NumCPU(). The result does not depend on it.
	Workers int
}

// ReadCSVFile reads the panel file at path, using path as the source name
// in errors, with the same result as ReadCSV on the file's bytes. The file
// is only read.
//
// A file without quote characters is read in blocks straight into the
// final columns, without holding the whole file in memory: one pass counts
// the lines, so that each column is allocated once at its exact size; a
// second splits the file into one byte range per worker at line
// boundaries and parses the ranges in parallel. A file with quotes (which
// may enclose line breaks) or with blank lines between records is read
// whole and parsed by ReadCSV's careful path instead; the result is the
// same, only the memory used differs.
//
// Before parsing, the memory the columns need (and, for the careful path,
// the file) is compared with the memory available; a file that cannot fit
// gives a *MemoryError (wrapping ErrTooLarge) that says how large it is,
// instead of running out of memory part way.
func ReadCSVFile(path string, opts ReadOptions) (*Panel, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("demand: reading panel: %w", err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("demand: reading panel: %w", err)
	}
	if st.IsDir() {
		return nil, fmt.Errorf("demand: reading panel: %s is a folder; name the panel file", path)
	}
	size := st.Size()
	p, err := readCSVFast(csvFile{r: f, n: size}, path, opts)
	if err != errCSVCareful {
		return p, err
	}
	head := make([]byte, min(size, 1<<20))
	k, err := f.ReadAt(head, 0)
	if k < len(head) {
		return nil, fmt.Errorf("demand: reading panel %s: %w", path, err)
	}
	if err := checkMemory(path, size, csvMemoryNeed(size, head), "the file and its columns"); err != nil {
		return nil, err
	}
	data := make([]byte, size)
	if k, err := f.ReadAt(data, 0); k < len(data) {
		return nil, fmt.Errorf("demand: reading panel %s: %w", path, err)
	}
	return readCSVCareful(data, path, opts)
}

// ReadCSV parses a delimited text panel held in data. source names the data
// in errors and becomes Panel.Source. data is not modified and not retained.
//
// The format is RFC 4180 with a chosen delimiter:
//   - the first line is a header naming every column; names are trimmed of
//     surrounding spaces and must be non-empty and distinct;
//   - a UTF-8 byte-order mark at the start is ignored;
//   - records end with LF or CRLF; the last one may lack a line end;
//     lines that are empty or hold only spaces are skipped;
//   - a field may be enclosed in double quotes, and then may hold the
//     delimiter, line ends and doubled quotes ("say ""hi""" is say "hi");
//     a CRLF inside quotes reads as "\n"; spaces around the quotes are
//     allowed; a quote anywhere else is an error;
//   - every record has as many fields as the header.
//
// Cells are trimmed of surrounding spaces and tabs; an empty cell is
// missing. A column is numeric when every non-empty cell parses with
// strconv.ParseFloat(cell, 64) without error (missing cells become NaN);
// otherwise it is a text column whose levels are in order of first
// appearance (missing cells have code -1), and FirstNonNumber and
// NumericCells tell where it stopped being numeric. Numbers are the
// float64 values strconv.ParseFloat gives, bit for bit: a plain decimal of
// at most 19 digits whose digits, read as an integer m, satisfy m ≤ 2^53,
// with at most 22 digits after the point, is computed as m/10^d, which is
// correctly rounded because both operands are exact (Clinger 1990, "How
// to read floating point numbers accurately", PLDI), and any other text
// goes to strconv.ParseFloat.
//
// Problems in the text give a *ParseError with the 1-based line and field
// that wraps ErrHeader, ErrQuote or ErrFieldCount. When several records are
// bad, the error of the earliest one is returned. A file with a header and
// no records gives a panel with N = 0 and no error.
//
// Data without quote characters is split into opts.Workers byte ranges at
// line boundaries, parsed in parallel straight into the final columns
// (lines are counted first, so each column is allocated once). Data with
// quotes takes a careful path: records are found in one pass that tracks
// quoting, then split into contiguous ranges of records parsed in
// parallel. Both give the same panel, for any number of workers.
func ReadCSV(data []byte, source string, opts ReadOptions) (*Panel, error) {
	p, err := readCSVFast(csvMem(data), source, opts)
	if err != errCSVCareful {
		return p, err
	}
	return readCSVCareful(data, source, opts)
}

// csvDelimiter checks and defaults the delimiter of opts.
func csvDelimiter(opts ReadOptions, source string) (byte, error) {
	delim := opts.Delimiter
	if delim == 0 {
		delim = ','
	}
	if delim == '"' || delim == '\r' || delim == '\n' {
		return 0, fmt.Errorf("demand: %s: delimiter %q cannot be used; choose ',', ';' or a tab", source, delim)
	}
	return delim, nil
}

// readCSVCareful is ReadCSV's path for data that may hold quotes: the
// record offsets are found first, tracking quoting, then ranges of records
// are parsed in parallel.
func readCSVCareful(data []byte, source string, opts ReadOptions) (*Panel, error) {
	delim, err := csvDelimiter(opts, source)
	if err != nil {
		return nil, err
	}
	data = bytes.TrimPrefix(data, csvBOM)
	r := &csvReader{data: data, source: source, delim: delim}
	pos, line, err := r.readHeader()
	if err != nil {
		return nil, err
	}
	r.findRecords(pos, line)
	n, nc := len(r.starts), len(r.names)

	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	workers = max(1, min(workers, n))

	kinds := r.sniff(r.data, r.starts)
	r.alloc(kinds, n)
	text := make([]*TextColumn, nc)
	run := func(kinds []csvKind) ([]bool, error) {
		ws := make([]*csvWorker, workers)
		for k := range ws {
			ws[k] = newCSVWorker(r, kinds, n*k/workers, n*(k+1)/workers)
		}
		runCSVWorkers(ws, (*csvWorker).run)
		return r.finish(ws, kinds, text)
	}
	failed, err := run(kinds)
	if err != nil {
		return nil, err
	}
	if redo := r.redoKinds(failed, n); redo != nil {
		if _, err := run(redo); err != nil {
			return nil, err
		}
	}
	return r.panel(n, text), nil
}

// alloc allocates the columns of n rows for kinds.
func (r *csvReader) alloc(kinds []csvKind, n int) {
	r.num = make([][]float64, len(kinds))
	r.codes = make([][]int32, len(kinds))
	for j, k := range kinds {
		if k == csvNum {
			r.num[j] = makeFloats(n)
		} else {
			r.codes[j] = makeInt32s(n)
		}
	}
}

// redoKinds returns the kinds for parsing again, as text, the columns
// guessed numeric from their first rows that met text further down (so
// that no cell is lost), or nil when there are none.
func (r *csvReader) redoKinds(failed []bool, n int) []csvKind {
	var redo []csvKind
	for j, f := range failed {
		if f {
			if redo == nil {
				redo = make([]csvKind, len(failed))
			}
			redo[j] = csvText
			r.num[j] = nil
			r.codes[j] = makeInt32s(n)
		}
	}
	return redo
}

// panel assembles the parsed columns.
func (r *csvReader) panel(n int, text []*TextColumn) *Panel {
	p := NewPanel(r.source, n)
	p.Lines = r.lines
	for j, name := range r.names {
		if text[j] != nil {
			p.AddText(name, text[j])
		} else {
			p.AddNum(name, r.num[j][:n:n])
		}
	}
	return p
}

var csvBOM = []byte{0xEF, 0xBB, 0xBF}

// csvSniffRows is the number of leading records used to guess column types.
const csvSniffRows = 256

type csvKind uint8

const (
	csvSkip csvKind = iota // parse the field but keep nothing
	csvNum                 // parse as float64 into num
	csvText                // intern into codes
)

// csvReader holds what is shared by the workers of one ReadCSV call.
type csvReader struct {
	data   []byte
	source string
	delim  byte
	names  []string
	starts []int // byte offset of each record
	lines  []int // line of each record; nil when record i is on line i+2
	num    [][]float64
	codes  [][]int32
}

// line returns the 1-based line on which record i starts.
func (r *csvReader) line(i int) int {
	if r.lines != nil {
		return r.lines[i]
	}
	return i + 2
}

// readHeader parses the header record and checks its names. It returns
// the offset and line where the records start.
func (r *csvReader) readHeader() (pos, line int, err error) {
	if len(r.data) == 0 {
		return 0, 0, &ParseError{File: r.source, Line: 1, Err: ErrHeader,
			Hint: "the file is empty; its first line must name the columns"}
	}
	s := csvScanner{data: r.data, delim: r.delim, line: 1}
	for j := 0; ; j++ {
		cell, next, term, bad := s.field(pos)
		if bad {
			return 0, 0, r.quoteError(&s, j)
		}
		r.names = append(r.names, string(cell))
		pos = next
		if term != csvDelim {
			break
		}
	}
	if len(r.names) == 1 && r.names[0] == "" {
		return 0, 0, &ParseError{File: r.source, Line: 1, Column: 1, Err: ErrHeader,
			Hint: "the first line is blank; it must name the columns"}
	}
	seen := make(map[string]int, len(r.names))
	for j, name := range r.names {
		if name == "" {
			hint := fmt.Sprintf("column %d has no name; give every column a name", j+1)
			if j == len(r.names)-1 {
				hint += fmt.Sprintf(", or remove the %q that ends the line", r.delim)
			}
			return 0, 0, &ParseError{File: r.source, Line: 1, Column: j + 1, Err: ErrHeader, Hint: hint}
		}
		if k, ok := seen[name]; ok {
			return 0, 0, &ParseError{File: r.source, Line: 1, Column: j + 1, Name: name, Err: ErrHeader,
				Hint: fmt.Sprintf("column %d has the same name; rename one of them", k+1)}
		}
		seen[name] = j
	}
	return pos, s.line, nil
}

// findRecords records the offset (and, when lines and records do not
// coincide, the line) of every record from pos on. Blank lines are
// skipped. When the data holds a quote, a line end only ends a record
// when an even number of quotes precedes it within the record; this finds
// the same boundaries as the field parser for well-formed input, and any
// disagreement for malformed input is reported by the parser within the
// first bad record.
func (r *csvReader) findRecords(pos, line int) {
	data := r.data
	n := len(data)
	r.starts = make([]int, 0, bytes.Count(data[pos:], []byte{'\n'})+1)
	quotes := bytes.IndexByte(data[pos:], '"') >= 0
	for pos < n {
		end := csvLineEnd(data, pos)
		if r.blank(data[pos:end]) {
			pos, line = end+1, line+1
			continue
		}
		i := len(r.starts)
		if r.lines == nil && line != i+2 {
			r.lines = make([]int, i, cap(r.starts))
			for k := range r.lines {
				r.lines[k] = k + 2
			}
		}
		r.starts = append(r.starts, pos)
		if r.lines != nil {
			r.lines = append(r.lines, line)
		}
		if quotes {
			odd := bytes.Count(data[pos:end], []byte{'"'})&1 == 1
			for odd && end < n {
				pos, line = end+1, line+1
				end = csvLineEnd(data, pos)
				odd = odd != (bytes.Count(data[pos:end], []byte{'"'})&1 == 1)
			}
		}
		pos, line = end+1, line+1
	}
}

// csvLineEnd returns the offset of the first '\n' at or after pos, or len(data).
func csvLineEnd(data []byte, pos int) int {
	if e := bytes.IndexByte(data[pos:], '\n'); e >= 0 {
		return pos + e
	}
	return len(data)
}

// blank reports whether a line holds only spaces, tabs and '\r' (a tab
// delimiter is not blank: it separates empty cells).
func (r *csvReader) blank(b []byte) bool {
	for _, c := range b {
		if !csvSpace(c) || c == r.delim {
			return false
		}
	}
	return true
}

// sniff guesses the column types from the first records of data, which
// start at the offsets in starts: a column is guessed numeric unless one
// of its non-empty cells there fails to parse.
func (r *csvReader) sniff(data []byte, starts []int) []csvKind {
	nc := len(r.names)
	kinds := make([]csvKind, nc)
	for j := range kinds {
		kinds[j] = csvNum
	}
	s := csvScanner{data: data, delim: r.delim}
	for i := range min(len(starts), csvSniffRows) {
		pos := starts[i]
		for j := range nc {
			cell, next, term, bad := s.field(pos)
			if bad {
				return kinds
			}
			if kinds[j] == csvNum && len(cell) > 0 {
				if _, err := strconv.ParseFloat(csvView(cell), 64); err != nil {
					kinds[j] = csvText
				}
			}
			pos = next
			if term != csvDelim {
				break
			}
		}
	}
	return kinds
}

// finish checks the workers that parsed the columns selected by kinds,
// merges their text levels in file order into text, and returns the
// numeric columns that met a cell that is not a number.
func (r *csvReader) finish(ws []*csvWorker, kinds []csvKind, text []*TextColumn) (failed []bool, err error) {
	for _, w := range ws {
		// Workers cover contiguous ranges in file order and stop at
		// their first error, so the first worker with an error holds
		// the earliest one.
		if w.err != nil {
			return nil, w.err
		}
	}

	failed = make([]bool, len(kinds))
	for _, w := range ws {
		for j, f := range w.failed {
			failed[j] = failed[j] || f
		}
	}

	// Merge the per-worker level tables in worker order, which is file
	// order, and remap the codes of the later workers.
	firsts := make([][]int, len(kinds))
	for j, k := range kinds {
		if k != csvText {
			continue
		}
		t0 := ws[0].text[j]
		m, levels, first := t0.m, t0.levels, t0.first
		for _, w := range ws[1:] {
			t := w.text[j]
			remap := make([]int32, len(t.levels))
			identity := true
			for l, s := range t.levels {
				g, ok := m[s]
				if !ok {
					g = int32(len(levels))
					m[s] = g
					levels = append(levels, s)
					first = append(first, t.first[l])
				}
				remap[l] = g
				identity = identity && g == int32(l)
			}
			if !identity {
				w.remap[j] = remap
			}
		}
		text[j] = &TextColumn{Codes: r.codes[j], Levels: levels}
		firsts[j] = first
	}
	runCSVWorkers(ws[1:], (*csvWorker).applyRemap)
	for j, k := range kinds {
		if k == csvText {
			r.textStats(text[j], firsts[j])
		}
	}
	return failed, nil
}

// textStats sets FirstNonNumber and NumericCells of a text column whose
// level g first appears on row first[g].
func (r *csvReader) textStats(t *TextColumn, first []int) {
	numeric := make([]bool, len(t.Levels))
	any := false
	for g, s := range t.Levels {
		_, err := strconv.ParseFloat(s, 64)
		numeric[g] = err == nil
		any = any || numeric[g]
	}
	// Levels are in order of first appearance, so the first level that
	// is not a number holds the first such cell.
	for g, s := range t.Levels {
		if !numeric[g] {
			t.FirstNonNumber = CellRef{Line: r.line(first[g]), Text: s}
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

// runCSVWorkers runs f on every worker, in parallel when there are several.
func runCSVWorkers(ws []*csvWorker, f func(*csvWorker)) {
	if len(ws) == 1 {
		f(ws[0])
		return
	}
	var wg sync.WaitGroup
	for _, w := range ws {
		wg.Go(func() { f(w) })
	}
	wg.Wait()
}

// csvLevels interns the text cells of one column seen by one worker.
type csvLevels struct {
	m      map[string]int32
	levels []string
	first  []int // row of the first appearance of each level
}

// csvWorker parses the records lo..hi-1.
type csvWorker struct {
	r      *csvReader
	lo, hi int
	kinds  []csvKind // own copy: a failed numeric column becomes csvSkip
	text   []*csvLevels
	failed []bool
	remap  [][]int32 // per column, local code -> merged code; nil if identity
	sc     csvScanner
	err    *ParseError

	// Fast path only: the bytes [from, to) of src hold the rows.
	src       csvSource
	from, to  int64
	ioErr     error // reading the source failed
	blank     bool  // a blank line was skipped
	attempted bool  // a record was started
	holes     bool  // a record follows a blank line
}

func newCSVWorker(r *csvReader, kinds []csvKind, lo, hi int) *csvWorker {
	nc := len(kinds)
	w := &csvWorker{
		r: r, lo: lo, hi: hi,
		kinds:  append([]csvKind(nil), kinds...),
		text:   make([]*csvLevels, nc),
		failed: make([]bool, nc),
		remap:  make([][]int32, nc),
		sc:     csvScanner{data: r.data, delim: r.delim},
	}
	for j, k := range kinds {
		if k == csvText {
			w.text[j] = &csvLevels{m: map[string]int32{}}
		}
	}
	return w
}

// run parses the records lo..hi-1 found by findRecords (careful path).
func (w *csvWorker) run() {
	r := w.r
	// A local scanner keeps the per-record writes to its line off the
	// cache lines of other workers.
	sc := w.sc
	s := &sc
	defer func() { w.sc = sc }()
	for i := w.lo; i < w.hi; i++ {
		s.line = r.line(i)
		if _, ok := w.record(s, r.starts[i], i, s.line); !ok {
			return
		}
	}
}

// record parses the record at offset pos of s.data, on line line, into
// row i, and returns the offset after it. On a problem it sets w.err and
// returns false.
func (w *csvWorker) record(s *csvScanner, pos, i, line int) (int, bool) {
	r := w.r
	kinds := w.kinds
	nc := len(kinds)
	for j := 0; j < nc; j++ {
		cell, next, term, bad := s.field(pos)
		if bad {
			w.err = r.quoteError(s, j)
			return 0, false
		}
		pos = next
		if term != csvDelim && j < nc-1 {
			w.err = r.countError(line, j+1, nc)
			return 0, false
		}
		if term == csvDelim && j == nc-1 {
			w.err = r.tooMany(s, next, line, nc)
			return 0, false
		}
		switch kinds[j] {
		case csvNum:
			if len(cell) == 0 {
				r.num[j][i] = math.NaN()
				continue
			}
			v, ok := csvParseFloat(cell)
			if !ok {
				var err error
				if v, err = strconv.ParseFloat(csvView(cell), 64); err != nil {
					w.failed[j] = true
					kinds[j] = csvSkip
					continue
				}
			}
			r.num[j][i] = v
		case csvText:
			if len(cell) == 0 {
				r.codes[j][i] = -1
				continue
			}
			t := w.text[j]
			c, ok := t.m[string(cell)]
			if !ok {
				str := string(cell)
				c = int32(len(t.levels))
				t.m[str] = c
				t.levels = append(t.levels, str)
				t.first = append(t.first, i)
			}
			r.codes[j][i] = c
		}
	}
	return pos, true
}

// csvParseFloat parses a plain decimal [+-]digits[.digits] of at most 19
// digits whose digits m, read as an integer, are at most 2^53, with at
// most 22 digits after the point, as m/10^d. Both operands are exact in
// float64, so the quotient is the correctly rounded value, the one
// strconv.ParseFloat returns (Clinger 1990). ok is false for any other
// text, which the caller parses with strconv.ParseFloat.
func csvParseFloat(b []byte) (v float64, ok bool) {
	i := 0
	neg := false
	if len(b) > 0 && (b[0] == '-' || b[0] == '+') {
		neg = b[0] == '-'
		i = 1
	}
	var m uint64
	digits, frac := 0, 0
	dot := false
	for ; i < len(b); i++ {
		c := b[i]
		switch {
		case c >= '0' && c <= '9':
			digits++
			if digits > 19 {
				return 0, false
			}
			m = m*10 + uint64(c-'0')
			if dot {
				frac++
			}
		case c == '.' && !dot:
			dot = true
		default:
			return 0, false
		}
	}
	if digits == 0 || m > 1<<53 || frac > 22 {
		return 0, false
	}
	v = float64(m)
	if frac > 0 {
		v /= pow10[frac]
	}
	if neg {
		v = -v
	}
	return v, true
}

func (w *csvWorker) applyRemap() {
	for j, remap := range w.remap {
		if remap == nil {
			continue
		}
		codes := w.r.codes[j][w.lo:w.hi]
		for i, c := range codes {
			if c >= 0 {
				codes[i] = remap[c]
			}
		}
	}
}

// csvView returns a string that shares b's memory; b must not change
// while the string is in use. It is used only for immediate parsing.
func csvView(b []byte) string {
	return unsafe.String(unsafe.SliceData(b), len(b))
}

// Field terminators.
const (
	csvDelim = iota
	csvEOL
	csvEOF
)

// csvScanner splits fields. line is the line of the current position; after
// a quote problem errLine, errText and errHint describe it.
type csvScanner struct {
	data    []byte
	delim   byte
	line    int
	buf     []byte // unescaped quoted fields
	errLine int
	errText string
	errHint string
}

func csvSpace(c byte) bool { return c == ' ' || c == '\t' || c == '\r' }

// csvTrim removes surrounding spaces, tabs and '\r'. Only a quoted cell
// can hold the delimiter, and a tab there is trimmed too.
func csvTrim(b []byte) []byte {
	for len(b) > 0 && csvSpace(b[0]) {
		b = b[1:]
	}
	for len(b) > 0 && csvSpace(b[len(b)-1]) {
		b = b[:len(b)-1]
	}
	return b
}

// field parses the field that starts at pos. It returns the trimmed cell
// (a view of data, or of s.buf when quotes were unescaped), the offset
// after the field's terminator and the terminator. bad reports a quote
// problem, described in s.
func (s *csvScanner) field(pos int) (cell []byte, next, term int, bad bool) {
	data := s.data
	n := len(data)
	q := pos
	for q < n && csvSpace(data[q]) && data[q] != s.delim && data[q] != '\n' {
		q++
	}
	if q < n && data[q] == '"' {
		return s.quoted(q)
	}
	i := pos
	for i < n {
		c := data[i]
		if c == s.delim || c == '\n' {
			break
		}
		if c == '"' {
			s.errLine = s.line
			s.errText = csvClip(data[pos:csvLineEnd(data, i)])
			s.errHint = `a quote may only enclose a whole field; write the field as "...", doubling quotes inside it ("say ""hi""")`
			return nil, 0, 0, true
		}
		i++
	}
	cell = csvTrim(data[pos:i])
	switch {
	case i == n:
		return cell, n, csvEOF, false
	case data[i] == '\n':
		s.line++
		return cell, i + 1, csvEOL, false
	}
	return cell, i + 1, csvDelim, false
}

// quoted parses a quoted field whose opening quote is at q.
func (s *csvScanner) quoted(q int) (cell []byte, next, term int, bad bool) {
	data := s.data
	n := len(data)
	open := s.line
	i := q + 1
	escaped := false
	var end int // offset of the closing quote
	for {
		k := bytes.IndexByte(data[i:], '"')
		if k < 0 {
			s.errLine = open
			s.errText = csvClip(data[q:csvLineEnd(data, q)])
			s.errHint = "this quoted field is never closed; add the closing quote"
			return nil, 0, 0, true
		}
		end = i + k
		s.line += bytes.Count(data[i:end], []byte{'\n'})
		if end+1 < n && data[end+1] == '"' {
			if !escaped {
				s.buf = s.buf[:0]
				escaped = true
			}
			s.buf = append(s.buf, data[i:end+1]...)
			i = end + 2
			continue
		}
		break
	}
	if escaped {
		s.buf = append(s.buf, data[i:end]...)
		cell = s.buf
	} else {
		cell = data[q+1 : end]
	}
	if s.line != open {
		// A CRLF line end inside the field is read as "\n", so that a
		// value reads the same from CRLF and LF files. Compacting into
		// s.buf is safe when cell already lives there: writes never
		// pass reads.
		out := s.buf[:0]
		for k, c := range cell {
			if c == '\r' && k+1 < len(cell) && cell[k+1] == '\n' {
				continue
			}
			out = append(out, c)
		}
		s.buf = out
		cell = out
	}
	cell = csvTrim(cell)
	k := end + 1
	for k < n && csvSpace(data[k]) && data[k] != s.delim {
		k++
	}
	switch {
	case k == n:
		return cell, n, csvEOF, false
	case data[k] == s.delim:
		return cell, k + 1, csvDelim, false
	case data[k] == '\n':
		s.line++
		return cell, k + 1, csvEOL, false
	}
	s.errLine = s.line
	s.errText = csvClip(data[k:csvLineEnd(data, k)])
	s.errHint = fmt.Sprintf("a closing quote must be followed by the delimiter %q or the end of the line; double a quote that belongs to the text", s.delim)
	return nil, 0, 0, true
}

// csvClip returns b as a string of at most 40 bytes, for error messages.
func csvClip(b []byte) string {
	b = bytes.TrimRight(b, "\r")
	if len(b) > 40 {
		return string(b[:40]) + "..."
	}
	return string(b)
}

func (r *csvReader) quoteError(s *csvScanner, j int) *ParseError {
	e := &ParseError{File: r.source, Line: s.errLine, Column: j + 1, Text: s.errText, Hint: s.errHint, Err: ErrQuote}
	if j < len(r.names) {
		e.Name = r.names[j]
	}
	return e
}

func (r *csvReader) countError(line, found, want int) *ParseError {
	return &ParseError{File: r.source, Line: line, Err: ErrFieldCount,
		Hint: fmt.Sprintf("found %s, the header has %d; add the missing cells (an empty cell between two delimiters marks a missing value)", csvFields(found), want)}
}

// tooMany counts the fields of a record that has more than want, the
// extra ones starting at pos, and reports them.
func (r *csvReader) tooMany(s *csvScanner, pos, line, want int) *ParseError {
	found := want
	for {
		found++
		_, next, term, bad := s.field(pos)
		if bad {
			return r.quoteError(s, found-1)
		}
		if term != csvDelim {
			break
		}
		pos = next
	}
	return &ParseError{File: r.source, Line: line, Err: ErrFieldCount,
		Hint: fmt.Sprintf("found %s, the header has %d; enclose values that contain the delimiter %q in quotes, or remove the extra fields", csvFields(found), want, r.delim)}
}

func csvFields(n int) string {
	if n == 1 {
		return "1 field"
	}
	return strconv.Itoa(n) + " fields"
}
