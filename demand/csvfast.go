package demand

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"runtime"
)

// The fast path of ReadCSV and ReadCSVFile, for input without quote
// characters, where every line is one record (or blank):
//
//  1. one pass over the input, in blocks, counts the lines of each block
//     and notes the first line end in it, and gives up (for the careful
//     path) at the first quote character;
//  2. the header is parsed from the first line and the column types are
//     guessed from the first records;
//  3. the columns are allocated at the number of lines after the header;
//  4. the input is split into one byte range per worker, each starting
//     after the first line end of a block, so that its first row is the
//     number of lines before it; the workers read their ranges in blocks
//     and parse them straight into the columns.
//
// A blank line followed by a record would leave a hole in the rows, and
// lines would no longer be rows + 2: such input goes to the careful path.
// Blank lines at the end are dropped.

// errCSVCareful tells the caller of readCSVFast to take the careful path.
var errCSVCareful = errors.New("demand: the careful path is needed")

// csvBlock is the number of bytes the fast path reads or scans at a time
// (a variable so that tests can make blocks tiny).
var csvBlock = 4 << 20

// csvSource gives the fast path the bytes of the input.
type csvSource interface {
	// view returns the bytes [off, off+n) of the input, which must lie
	// within it; they may be read into *buf, which is grown as needed.
	view(off int64, n int, buf *[]byte) ([]byte, error)
	size() int64
}

// csvMem is input held in memory: views are slices of it.
type csvMem []byte

func (m csvMem) view(off int64, n int, _ *[]byte) ([]byte, error) { return m[off : off+int64(n)], nil }
func (m csvMem) size() int64                                      { return int64(len(m)) }

// csvFile is input read from a file.
type csvFile struct {
	r io.ReaderAt
	n int64
}

func (f csvFile) view(off int64, n int, buf *[]byte) ([]byte, error) {
	if cap(*buf) < n {
		*buf = make([]byte, n)
	}
	b := (*buf)[:n]
	k, err := f.r.ReadAt(b, off)
	if k == n {
		return b, nil
	}
	if err == nil || err == io.EOF {
		err = io.ErrUnexpectedEOF // the file shrank while it was read
	}
	return nil, err
}

func (f csvFile) size() int64 { return f.n }

// csvLayout is what the first pass learns: for block b (the bytes from
// start + b·csvBlock), the number of line ends before it and the offset of
// its first line end (-1 if none).
type csvLayout struct {
	start   int64 // offset after a byte-order mark
	size    int64
	nlAt    []int64 // line ends before each block; one more entry for the end
	firstNL []int64
}

// scanCSV makes the first pass. It returns errCSVCareful at the first
// quote character.
func scanCSV(src csvSource) (*csvLayout, error) {
	size := src.size()
	var buf []byte
	lay := &csvLayout{size: size}
	head, err := src.view(0, int(min(size, 3)), &buf)
	if err != nil {
		return nil, err
	}
	if bytes.HasPrefix(head, csvBOM) {
		lay.start = 3
	}
	nb := int((size - lay.start + int64(csvBlock) - 1) / int64(csvBlock))
	lay.nlAt = make([]int64, nb+1)
	lay.firstNL = make([]int64, nb)
	for b := range nb {
		off := lay.start + int64(b)*int64(csvBlock)
		v, err := src.view(off, int(min(int64(csvBlock), size-off)), &buf)
		if err != nil {
			return nil, err
		}
		if bytes.IndexByte(v, '"') >= 0 {
			return nil, errCSVCareful
		}
		lay.nlAt[b+1] = lay.nlAt[b] + int64(bytes.Count(v, []byte{'\n'}))
		lay.firstNL[b] = -1
		if k := bytes.IndexByte(v, '\n'); k >= 0 {
			lay.firstNL[b] = off + int64(k)
		}
	}
	return lay, nil
}

// readCSVFast reads src by the fast path, or returns errCSVCareful.
func readCSVFast(src csvSource, source string, opts ReadOptions) (*Panel, error) {
	delim, err := csvDelimiter(opts, source)
	if err != nil {
		return nil, err
	}
	lay, err := scanCSV(src)
	if err != nil {
		if err == errCSVCareful {
			return nil, err
		}
		return nil, fmt.Errorf("demand: reading panel %s: %w", source, err)
	}
	nb := len(lay.firstNL)
	hdrEnd := int64(-1)
	for _, nl := range lay.firstNL {
		if nl >= 0 {
			hdrEnd = nl + 1
			break
		}
	}
	if hdrEnd < 0 {
		return nil, errCSVCareful // no line end: at most a header
	}
	var buf []byte
	hv, err := src.view(lay.start, int(hdrEnd-lay.start), &buf)
	if err != nil {
		return nil, fmt.Errorf("demand: reading panel %s: %w", source, err)
	}
	r := &csvReader{data: hv, source: source, delim: delim}
	if _, _, err := r.readHeader(); err != nil {
		return nil, err
	}
	nc := len(r.names)

	// Rows: the lines after the header, counting a last line without a
	// line end.
	lines := lay.nlAt[nb] - 1
	if last, err := src.view(lay.size-1, 1, &buf); err != nil {
		return nil, fmt.Errorf("demand: reading panel %s: %w", source, err)
	} else if lay.size > hdrEnd && last[0] != '\n' {
		lines++
	}
	if lines > maxCSVRows {
		return nil, fmt.Errorf("demand: %s: %d lines is more than a panel can hold (%d); split the file, for example by year or region", source, lines, maxCSVRows)
	}
	n := int(lines)

	// Column types from the first records.
	sv, err := src.view(hdrEnd, int(min(int64(csvBlock), lay.size-hdrEnd)), &buf)
	if err != nil {
		return nil, fmt.Errorf("demand: reading panel %s: %w", source, err)
	}
	if hdrEnd+int64(len(sv)) < lay.size {
		sv = sv[:bytes.LastIndexByte(sv, '\n')+1]
	}
	var starts []int
	for pos := 0; pos < len(sv) && len(starts) < csvSniffRows; {
		end := csvLineEnd(sv, pos)
		if !r.blank(sv[pos:end]) {
			starts = append(starts, pos)
		}
		pos = end + 1
	}
	kinds := r.sniff(sv, starts)

	need := int64(0)
	for _, k := range kinds {
		if k == csvNum {
			need += 8 * int64(n)
		} else {
			need += 4 * int64(n)
		}
	}
	if err := checkMemory(source, lay.size, need, "its columns"); err != nil {
		return nil, err
	}

	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	workers = max(1, min(workers, nb))
	// Range k starts after the first line end of block k·nb/workers;
	// its first row is the number of lines before it, less the header.
	type span struct {
		off  int64
		row0 int
	}
	spans := make([]span, workers+1)
	spans[0] = span{hdrEnd, 0}
	spans[workers] = span{lay.size, n}
	for k := 1; k < workers; k++ {
		spans[k] = spans[k-1]
		for b := k * nb / workers; b < nb; b++ {
			if nl := lay.firstNL[b]; nl >= 0 {
				if nl+1 > spans[k].off {
					spans[k] = span{nl + 1, int(lay.nlAt[b])} // nlAt[b]+1 lines end by nl+1, one is the header's
				}
				break
			}
		}
	}

	r.data = nil
	r.alloc(kinds, n)
	text := make([]*TextColumn, nc)
	run := func(kinds []csvKind) ([]bool, int, error) {
		ws := make([]*csvWorker, workers)
		for k := range ws {
			ws[k] = newCSVWorker(r, kinds, spans[k].row0, spans[k].row0)
			ws[k].src, ws[k].from, ws[k].to = src, spans[k].off, spans[k+1].off
		}
		runCSVWorkers(ws, (*csvWorker).runFast)
		// Holes: a record after a blank line, here or in a later range.
		blank := false
		for _, w := range ws {
			if w.holes || (blank && w.attempted) {
				return nil, 0, errCSVCareful
			}
			blank = blank || w.blank
		}
		for _, w := range ws {
			if w.ioErr != nil {
				return nil, 0, fmt.Errorf("demand: reading panel %s: %w", source, w.ioErr)
			}
		}
		rows := 0
		for _, w := range ws {
			if w.err != nil {
				break
			}
			if w.hi > w.lo {
				rows = w.hi
			}
		}
		for j := range kinds {
			if r.codes[j] != nil {
				r.codes[j] = r.codes[j][:rows]
			}
		}
		failed, err := r.finish(ws, kinds, text)
		return failed, rows, err
	}
	failed, rows, err := run(kinds)
	if err != nil {
		return nil, err
	}
	if redo := r.redoKinds(failed, n); redo != nil {
		if _, _, err := run(redo); err != nil {
			return nil, err
		}
	}
	return r.panel(rows, text), nil
}

// maxCSVRows is the most rows a panel read from text may have (codes and
// row counts are int32 in places).
const maxCSVRows = 1<<31 - 1

// runFast parses the lines in [w.from, w.to) of w.src into the rows from
// w.lo on, reading csvBlock bytes at a time. In the fast path row i is on
// line i+2. It leaves w.hi at the row after the last one parsed.
func (w *csvWorker) runFast() {
	r, src, lo, hi := w.r, w.src, w.from, w.to
	s := csvScanner{delim: r.delim}
	var buf []byte
	row := w.lo
	line := row + 2
	for pos := lo; pos < hi; {
		// A view of whole lines: cut after its last line end, unless
		// it reaches hi; grown when one line is longer than a block.
		n := int(min(int64(csvBlock), hi-pos))
		var v []byte
		for {
			var err error
			if v, err = src.view(pos, n, &buf); err != nil {
				w.ioErr = err
				return
			}
			if pos+int64(n) == hi {
				break
			}
			if k := bytes.LastIndexByte(v, '\n'); k >= 0 {
				v = v[:k+1]
				break
			}
			n = int(min(2*int64(n), hi-pos))
		}
		s.data = v
		for p := 0; p < len(v); {
			end := csvLineEnd(v, p)
			if r.blank(v[p:end]) {
				w.blank = true
				p, line = end+1, line+1
				continue
			}
			if w.blank {
				w.holes = true
				return
			}
			w.attempted = true
			s.line = line
			next, ok := w.record(&s, p, row, line)
			if !ok {
				w.hi = row
				return
			}
			row++
			line++
			p = next
		}
		pos += int64(len(v))
	}
	w.hi = row
}
