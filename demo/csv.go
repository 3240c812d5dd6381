package demo

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"strconv"
)

// WriteCSV writes the panel as CSV: a header line with the column names,
// then one line per row. Numbers are written with
// strconv.FormatFloat(x, 'g', -1, 64), the shortest text that parses back
// to the same float64, so the file round-trips exactly. Text cells are
// quoted only where CSV needs it.
func (m *Market) WriteCSV(w io.Writer) error {
	p := m.Panel
	bw := bufio.NewWriterSize(w, 1<<16)
	// Pre-encode the header and every text level once.
	header, err := encodeFields(p.Columns)
	if err != nil {
		return err
	}
	type column struct {
		num    []float64
		codes  []int32
		levels [][]byte
	}
	cols := make([]column, len(p.Columns))
	for j, name := range p.Columns {
		if x, ok := p.Num[name]; ok {
			cols[j].num = x
			continue
		}
		t := p.Text[name]
		cols[j].codes = t.Codes
		cols[j].levels = make([][]byte, len(t.Levels))
		for l, s := range t.Levels {
			b, err := encodeFields([]string{s})
			if err != nil {
				return err
			}
			cols[j].levels[l] = b
		}
	}
	if _, err := bw.Write(header); err != nil {
		return fmt.Errorf("demo: writing CSV header: %w", err)
	}
	buf := make([]byte, 0, 256)
	for r := 0; r < p.N; r++ {
		buf = buf[:0]
		for j := range cols {
			if j > 0 {
				buf = append(buf, ',')
			}
			c := &cols[j]
			if c.num != nil {
				if v := c.num[r]; !math.IsNaN(v) {
					buf = strconv.AppendFloat(buf, v, 'g', -1, 64)
				}
				continue
			}
			if code := c.codes[r]; code >= 0 {
				buf = append(buf, c.levels[code]...)
			}
		}
		buf = append(buf, '\n')
		if _, err := bw.Write(buf); err != nil {
			return fmt.Errorf("demo: writing CSV row %d: %w", r+1, err)
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("demo: writing CSV: %w", err)
	}
	return nil
}

// encodeFields returns the CSV encoding of one record, with its line end
// when there are several fields and without it for a single field.
func encodeFields(fields []string) ([]byte, error) {
	var b bytes.Buffer
	cw := csv.NewWriter(&b)
	if err := cw.Write(fields); err != nil {
		return nil, fmt.Errorf("demo: encoding CSV: %w", err)
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return nil, fmt.Errorf("demo: encoding CSV: %w", err)
	}
	if len(fields) == 1 {
		return bytes.TrimSuffix(b.Bytes(), []byte("\n")), nil
	}
	return b.Bytes(), nil
}
