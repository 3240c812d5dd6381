package tests

import (
	"bytes"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"testing"

	"priceiv/demand"
	"priceiv/elasticity"
	"priceiv/ivcore"
	"priceiv/supplyshifters"
)

// The benchmarks run on the invented unbalanced store panel of
// WriteUnbalanced (20 products, stretches of 50-200 of 200 weeks),
// resized by its number of stores to about 100k and 1M rows, and 10M rows
// with PRICEIV_BENCH_LARGE=1:
//
//	go test -run XXX -bench . -benchtime 3x ./tests/
//	PRICEIV_BENCH_LARGE=1 go test -run XXX -bench . -benchtime 1x -timeout 30m ./tests/
//
// Each reports rows/s (rows of the panel per second of one operation)
// and the bytes and allocations per operation. The model is the one of
// tests/bench/compare.sh: log-log 2SLS of units on price with bean and
// freight as shifters, product×store and week effects absorbed, clustered
// by store.

// benchSizes are the approximate panel sizes.
func benchSizes() []int {
	s := []int{100_000, 1_000_000}
	if os.Getenv("PRICEIV_BENCH_LARGE") == "1" {
		s = append(s, 10_000_000)
	}
	return s
}

// benchFiles caches the generated CSV bytes by approximate size.
var benchFiles sync.Map

// benchCSV returns the panel of about n rows as CSV bytes.
func benchCSV(b *testing.B, n int) []byte {
	if v, ok := benchFiles.Load(n); ok {
		return v.([]byte)
	}
	var buf bytes.Buffer
	buf.Grow(n * 48)
	if _, err := WriteUnbalanced(&buf, UnbalancedRows(n)); err != nil {
		b.Fatal(err)
	}
	benchFiles.Store(n, buf.Bytes())
	return buf.Bytes()
}

// benchSpec is the model of the comparison script.
func benchSpec() *demand.Spec {
	return &demand.Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "freight"},
		FE: []string{"product*store", "week"}, Cluster: []string{"store"}}
}

// benchPanel reads the panel of about n rows.
func benchPanel(b *testing.B, n int) *demand.Panel {
	p, err := demand.ReadCSV(benchCSV(b, n), "bench.csv", demand.ReadOptions{})
	if err != nil {
		b.Fatal(err)
	}
	return p
}

// benchFile writes data to a file in a temporary folder and returns its path.
func benchFile(b *testing.B, name string, write func(io.Writer) error) string {
	path := filepath.Join(b.TempDir(), name)
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	if err := write(f); err != nil {
		b.Fatal(err)
	}
	if err := f.Close(); err != nil {
		b.Fatal(err)
	}
	return path
}

// reportRows reports rows per second of one operation.
func reportRows(b *testing.B, rows int) {
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

// BenchmarkLoad measures reading a panel CSV held in memory into columns
// (MB/s is of the CSV text).
func BenchmarkLoad(b *testing.B) {
	for _, n := range benchSizes() {
		data := benchCSV(b, n)
		rows := bytes.Count(data, []byte{'\n'}) - 1
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			b.ReportAllocs()
			var p *demand.Panel
			for b.Loop() {
				var err error
				if p, err = demand.ReadCSV(data, "bench", demand.ReadOptions{}); err != nil {
					b.Fatal(err)
				}
			}
			reportRows(b, rows)
			// Memory of the loaded panel against its numeric columns
			// (target: at most 1.5): bytes allocated per load over 8 bytes
			// per numeric cell.
			numeric := 0
			for range p.Num {
				numeric += 8 * p.N
			}
			b.ReportMetric(panelBytes(p)/float64(numeric), "panel/numeric")
		})
	}
}

// panelBytes is the memory held by a panel's columns: 8 bytes a numeric
// cell, 4 bytes a text code, and the level strings.
func panelBytes(p *demand.Panel) float64 {
	n := 0
	for _, x := range p.Num {
		n += 8 * cap(x)
	}
	for _, t := range p.Text {
		n += 4 * cap(t.Codes)
		for _, l := range t.Levels {
			n += len(l) + 16
		}
	}
	return float64(n)
}

// BenchmarkParquetLoad measures reading the Parquet copy of the panel
// (written by demand.WriteParquet, as priceiv convert does) from a file
// (MB/s is of the Parquet file; the file is in the page cache after the
// first read).
func BenchmarkParquetLoad(b *testing.B) {
	for _, n := range benchSizes() {
		p := benchPanel(b, n)
		path := benchFile(b, "bench.parquet", func(w io.Writer) error { return demand.WriteParquet(w, p) })
		st, err := os.Stat(path)
		if err != nil {
			b.Fatal(err)
		}
		rows := p.N
		p = nil
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.SetBytes(st.Size())
			b.ReportAllocs()
			for b.Loop() {
				if _, err := demand.ReadParquetFile(path, demand.ReadOptions{}); err != nil {
					b.Fatal(err)
				}
			}
			reportRows(b, rows)
		})
	}
}

// BenchmarkAbsorb measures absorbing the product×store and week effects
// from the four model columns (log units, log price, bean, freight), into
// destination columns reused across operations. "sweeps" is the largest
// number of sweeps any column needed.
func BenchmarkAbsorb(b *testing.B) {
	for _, n := range benchSizes() {
		p := benchPanel(b, n)
		d, err := demand.Build(p, benchSpec(), 0)
		if err != nil {
			b.Fatal(err)
		}
		if d.N != p.N {
			b.Fatalf("%d of %d rows used; the benchmark panel should lose none", d.N, p.N)
		}
		var effects []ivcore.Effect
		for _, name := range []string{"product*store", "week"} {
			codes, levels, err := p.IDs(name)
			if err != nil {
				b.Fatal(err)
			}
			effects = append(effects, ivcore.Effect{Name: name, Codes: codes, Levels: len(levels)})
		}
		raw := d.Raw
		dst := make([][]float64, len(raw))
		for j := range dst {
			dst[j] = make([]float64, d.N)
		}
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			sweeps := 0
			for b.Loop() {
				ab, err := ivcore.Absorb(dst, raw, effects, ivcore.AbsorbOptions{})
				if err != nil {
					b.Fatal(err)
				}
				sweeps = ab.Iterations
			}
			reportRows(b, d.N)
			b.ReportMetric(float64(sweeps), "sweeps")
		})
	}
}

// BenchmarkEstimate measures building the design (logs, missing values,
// singletons, absorption, moment blocks) and fitting 2SLS with
// cluster-robust errors, on a panel already in memory.
func BenchmarkEstimate(b *testing.B) {
	for _, n := range benchSizes() {
		p := benchPanel(b, n)
		spec := benchSpec()
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				d, err := demand.BuildLean(p, spec, 0)
				if err != nil {
					b.Fatal(err)
				}
				if _, _, err := d.Fit(); err != nil {
					b.Fatal(err)
				}
			}
			reportRows(b, p.N)
		})
	}
}

// BenchmarkBootstrap measures 999 pairs cluster-bootstrap replicates of the
// 2SLS fit (store clusters) from the moment blocks, after the design is
// built: a replicate costs O(G·k²), so ns/op should not grow with the rows.
func BenchmarkBootstrap(b *testing.B) {
	const B = 999
	for _, n := range benchSizes() {
		p := benchPanel(b, n)
		d, err := demand.Build(p, benchSpec(), 0)
		if err != nil {
			b.Fatal(err)
		}
		p = nil
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := ivcore.ClusterBootstrap(d.Moments, 0, d.Model, ivcore.TSLS, B, 1, 0, nil); err != nil {
					b.Fatal(err)
				}
			}
			reportRows(b, d.N)
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*B), "ns/replicate")
		})
	}
}

// BenchmarkEstimateCommand measures the whole path of `priceiv estimate
// PANEL.csv --format json` for the comparison model: read the CSV file,
// prepare, build, fit, summarize, shifter diagnostics, margins, and write
// the JSON (to io.Discard). It follows runEstimate and the RunE of
// cmd/priceiv/estimate.go.
func BenchmarkEstimateCommand(b *testing.B) {
	for _, n := range benchSizes() {
		data := benchCSV(b, n)
		path := benchFile(b, "bench.csv", func(w io.Writer) error { _, err := w.Write(data); return err })
		rows := bytes.Count(data, []byte{'\n'}) - 1
		spec := benchSpec()
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			b.ReportAllocs()
			for b.Loop() {
				if err := estimateCommand(path, spec, io.Discard); err != nil {
					b.Fatal(err)
				}
			}
			reportRows(b, rows)
		})
	}
}

// estimateCommand runs the pooled estimate path of the command line.
func estimateCommand(path string, spec *demand.Spec, w io.Writer) error {
	panel, err := demand.ReadPanelFile(path, demand.ReadOptions{})
	if err != nil {
		return err
	}
	p, drops, err := demand.Prepare(panel, spec)
	if err != nil {
		return err
	}
	d, err := demand.BuildLean(p, spec, 0)
	if err != nil {
		return err
	}
	d.Dropped = append(drops, d.Dropped...)
	fit, fs, err := d.Fit()
	if err != nil {
		return err
	}
	res := d.Summarize(fit, fs)
	res.Cautions = elasticity.Cautions
	signs, err := spec.ExpectedSigns()
	if err != nil {
		return err
	}
	dg, err := supplyshifters.Diagnose(d, fit, supplyshifters.Options{ExpectSign: signs, Level: d.Level})
	if err != nil {
		return err
	}
	rep := elasticity.PooledMarkups(res, nil)
	res.Cautions = nil
	return elasticity.WriteCombined(w, "json",
		func(w io.Writer, f string) error { return elasticity.WriteEstimate(w, res, f) },
		func(w io.Writer, f string) error { return elasticity.WriteDiagnostics(w, dg, f) },
		func(w io.Writer, f string) error { return elasticity.WritePricing(w, rep, f) })
}
