package demand

import (
	"bytes"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// bothPaths reads data by the fast path with blocks of the given size and
// by the careful path, with the given workers, and reports the first
// difference ("" when the panels, or the error messages, are the same).
// fast reports whether the fast path took the input.
func bothPaths(data []byte, delim byte, block, workers int) (diff string, fast bool) {
	defer func(b int) { csvBlock = b }(csvBlock)
	csvBlock = block
	opts := ReadOptions{Delimiter: delim, Workers: workers}
	pf, errf := readCSVFast(csvMem(data), "x.csv", opts)
	if errf == errCSVCareful {
		return "", false
	}
	pc, errc := readCSVCareful(data, "x.csv", opts)
	switch {
	case (errf == nil) != (errc == nil):
		return "fast: " + errString(errf) + "; careful: " + errString(errc), true
	case errf != nil:
		if errf.Error() != errc.Error() {
			return "fast: " + errf.Error() + "; careful: " + errc.Error(), true
		}
		return "", true
	}
	return panelDiff(pf, pc), true
}

func errString(err error) string {
	if err == nil {
		return "no error"
	}
	return err.Error()
}

// TestReadCSVBothPaths runs good and bad files without quotes through the
// fast path (blocks of 4 MiB down to 1 byte, 1 to 4 workers) and the
// careful path: the same panel or the same error, to the byte. Expected
// behaviour: RFC 4180 (records, field counts) and the format documented
// at ReadCSV; the careful path is the reference.
func TestReadCSVBothPaths(t *testing.T) {
	for _, test := range []struct {
		name  string
		in    string
		delim byte
		fast  bool // the fast path takes it (no quotes, no inner blank lines)
	}{
		{"plain", "store,price\nS1,2.5\nS2,3\n", 0, true},
		{"no final line end", "store,price\nS1,2.5\nS2,3", 0, true},
		{"final empty line", "store,price\nS1,2.5\nS2,3\n\n", 0, true},
		{"final blank lines with spaces and CR", "store,price\nS1,2.5\n  \r\n\t\n", 0, true},
		{"CRLF", "store,price\r\nS1,2.5\r\nS2,\r\n", 0, true},
		{"byte-order mark", "\xEF\xBB\xBFstore,price\nS1,2.5\n", 0, true},
		{"header only", "store,price\n", 0, true},
		{"header only, no line end", "store,price", 0, false},
		{"semicolons and decimal commas", "store;price\nS1;2,5\nS2;3\n", ';', true},
		{"tabs with empty cells", "a\tb\tc\n1\t\t3\n\t\t\n", '\t', true},
		{"text met late in a numeric column", "a,b\n1,2\n3,4\n5,x\n7,8\n", 0, true},
		{"numbers of every shape", "x\n1\n-0\n+.5\n5.\n1e5\n0x1p-2\n9007199254740993\n0.1000000000000000055511151231257827\nInf\n-nan\n", 0, true},
		{"blank line between records", "a,b\n1,2\n\n3,4\n", 0, false},
		{"too few fields", "a,b,c\n1,2,3\n4,5\n", 0, true},
		{"too many fields", "a,b\n1,2\n3,4,5,6\n", 0, true},
		{"trailing delimiter", "a,b\n1,2,\n", 0, true},
		{"decimal commas in a comma file", "a,b\n1,5,2,5\n", 0, true},
		{"tab file read as tab", "a\tb\n1\t2\t3\n", '\t', true},
		{"earliest error wins", "a,b\n1,2\n3\n4,5,6\n6,7\n8\n", 0, true},
		{"empty header name", "a, ,c\n1,2,3\n", 0, true},
		{"duplicate header name", "price,units, price\n1,2,3\n", 0, true},
		{"blank first line", "\n1,2\n", 0, true},
		{"quoted field", "a,b\n\"x,y\",1\n", 0, false},
	} {
		for _, block := range []int{4 << 20, 64, 7, 1} {
			for _, workers := range []int{1, 2, 4} {
				d, fast := bothPaths([]byte(test.in), test.delim, block, workers)
				if d != "" {
					t.Errorf("%s (block %d, %d workers): %s", test.name, block, workers, d)
				}
				if fast != test.fast {
					t.Errorf("%s (block %d, %d workers): fast path took it: %v, want %v", test.name, block, workers, fast, test.fast)
				}
			}
		}
	}
	// The bad files of testdata/ without quotes, through ReadCSVFile
	// (fast path from the file) and ReadCSV's careful path.
	for _, name := range []string{"bad_field_count.csv", "bad_duplicate_header.csv", "good_crlf_bom.csv", "good_semicolon.csv", "good_tab.tsv"} {
		path := filepath.Join("testdata", name)
		data, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		delim := byte(0)
		if strings.Contains(name, "semicolon") {
			delim = ';'
		} else if strings.HasSuffix(name, ".tsv") {
			delim = '\t'
		}
		pf, errf := ReadCSVFile(path, ReadOptions{Delimiter: delim})
		pc, errc := readCSVCareful(data, path, ReadOptions{Delimiter: delim})
		if errString(errf) != errString(errc) {
			t.Errorf("%s: file %v; careful %v", name, errf, errc)
		} else if errf == nil {
			if d := panelDiff(pf, pc); d != "" {
				t.Errorf("%s: %s", name, d)
			}
		}
	}
}

// TestReadCSVFileFastBitIdentical reads a generated quote-free panel of
// 200,000 rows from a file (fast path, blocks of 64 KiB and 4 MiB, 1 to 3
// workers) and from memory by the careful path: bit-identical columns.
func TestReadCSVFileFastBitIdentical(t *testing.T) {
	defer func(b int) { csvBlock = b }(csvBlock)
	data := benchPanelCSV(200_000)
	path := filepath.Join(t.TempDir(), "gen.csv")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	want, err := readCSVCareful(data, path, ReadOptions{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	for _, block := range []int{64 << 10, 4 << 20} {
		csvBlock = block
		for _, workers := range []int{1, 2, 3} {
			got, err := ReadCSVFile(path, ReadOptions{Workers: workers})
			if err != nil {
				t.Fatal(err)
			}
			if d := panelDiff(want, got); d != "" {
				t.Errorf("block %d, %d workers: %s", block, workers, d)
			}
		}
	}
	if want.N != 200_000 || len(want.Text) != 2 {
		t.Fatalf("N %d, %d text columns", want.N, len(want.Text))
	}
}

// TestReadCSVFileCarefulFallback: a file with quoted line breaks and one
// with a blank line between records are read whole by the careful path,
// with nothing lost and lines counted as in the file.
func TestReadCSVFileCarefulFallback(t *testing.T) {
	dir := t.TempDir()
	for _, test := range []struct {
		in    string
		n     int
		lines []int
	}{
		{"note,x\n\"two\nlines\",1\nplain,2\n", 2, []int{2, 4}},
		{"a,b\n1,2\n\n3,4\n", 2, []int{2, 4}},
	} {
		path := filepath.Join(dir, "f.csv")
		if err := os.WriteFile(path, []byte(test.in), 0o644); err != nil {
			t.Fatal(err)
		}
		p, err := ReadCSVFile(path, ReadOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if p.N != test.n || !equalInts(p.Lines, test.lines) {
			t.Errorf("%q: N %d lines %v, want %d %v", test.in, p.N, p.Lines, test.n, test.lines)
		}
	}
}

// TestCSVParseFloat checks the fast decimal parser against
// strconv.ParseFloat, bit for bit, wherever it accepts the text, and that
// it accepts the plain decimals panels are made of. Source: strconv's
// documented correct rounding; IEEE 754 division of exact operands.
func TestCSVParseFloat(t *testing.T) {
	for _, test := range []struct {
		in string
		ok bool
	}{
		{"0", true}, {"-0", true}, {"+0.000", true}, {"2.49", true}, {".5", true}, {"5.", true},
		{"-.5", true}, {"9007199254740992", true}, {"0.1", true}, {"123456789.0123456789", false},
		{"9007199254740993", false}, {"1e5", false}, {"", false}, {".", false}, {"-", false},
		{"1.2.3", false}, {"0x10", false}, {"Inf", false}, {"1_000", false}, {" 1", false},
		{"0.0000000000000000000001", false}, {"1.0000000000000000000001", false},
	} {
		got, ok := csvParseFloat([]byte(test.in))
		if ok != test.ok {
			t.Errorf("%q: accepted %v, want %v", test.in, ok, test.ok)
		}
		if ok {
			want, err := strconv.ParseFloat(test.in, 64)
			if err != nil || math.Float64bits(got) != math.Float64bits(want) {
				t.Errorf("%q: %v, ParseFloat %v (%v)", test.in, got, want, err)
			}
		}
	}
	rng := rand.New(rand.NewPCG(5, 5))
	accepted := 0
	for range 200_000 {
		var b []byte
		if rng.IntN(4) == 0 {
			b = append(b, "-+"[rng.IntN(2)])
		}
		for range rng.IntN(12) {
			b = append(b, byte('0'+rng.IntN(10)))
		}
		if rng.IntN(3) > 0 {
			b = append(b, '.')
			for range rng.IntN(12) {
				b = append(b, byte('0'+rng.IntN(10)))
			}
		}
		got, ok := csvParseFloat(b)
		want, err := strconv.ParseFloat(string(b), 64)
		if ok {
			accepted++
			if err != nil || math.Float64bits(got) != math.Float64bits(want) {
				t.Fatalf("%q: %v, ParseFloat %v (%v)", b, got, want, err)
			}
		}
	}
	if accepted < 100_000 {
		t.Errorf("only %d of 200,000 plain decimals took the fast path", accepted)
	}
}

// FuzzReadCSVPaths checks that the fast path (blocks of 1 to 64 bytes, 1
// to 3 workers) and the careful path agree on any input the fast path
// takes: the same panel or the same error.
func FuzzReadCSVPaths(f *testing.F) {
	for _, seed := range []string{
		"a,b\n1,2\n3,4\n", "a,b\r\n1,2\r\n3,4", "a,b\n1\n1,2,3\n", "a,a\n1,2\n", ",\n\n",
		"p\n1\nn/a\n3\n", "a;b\n1,5;2\n", "a\tb\n\t\n 1 \t 2 \n", "a\n\r\n\r\r\n", "x\n1\n\n", "\xEF\xBB\xBFa\n1\n",
	} {
		f.Add([]byte(seed), byte(0), byte(3))
	}
	f.Fuzz(func(t *testing.T, data []byte, pick, shape byte) {
		delim := []byte{',', ';', '\t'}[pick%3]
		in := bytes.Clone(data)
		d, _ := bothPaths(data, delim, 1+int(shape%64), 1+int(shape/64)%3)
		if d != "" {
			t.Fatalf("%q: %s", data, d)
		}
		if !bytes.Equal(in, data) {
			t.Fatal("input modified")
		}
		_, err := ReadCSV(data, "x.csv", ReadOptions{Delimiter: delim})
		var pe *ParseError
		if err != nil && !errors.As(err, &pe) {
			t.Fatalf("error %v is not a *ParseError", err)
		}
	})
}
