package tests

import (
	"bufio"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"priceiv/demand"
)

// dbPanel is an invented product × store × week panel for the
// generated-truth tests of the database path, with the columns of the
// demand model and a few missing cells:
//
//	ln q = a_ps + s_w - 1.8 ln p + 0.2 temp + u
//	ln p = 0.5 + 0.6 bean_pw + 0.4 freight_rw + 0.2 a_ps + 0.5 u + v
//
// a_ps ~ N(0, 0.5²) per product and store, s_w = 0.15 sin(2πw/52),
// u ~ N(0, 0.3²), v ~ N(0, 0.2²), bean a random walk per product and
// freight per region (store mod 20). One row in 1000 has no price and one
// in 2000 no freight index.
type dbPanel struct {
	n                               int
	product                         []string
	store, week                     []int64
	units, price, temp, bean, fgt   []float64
	products, stores, weeks, region int
}

func makeDBPanel(products, stores, weeks int, seed uint64) *dbPanel {
	rng := rand.New(rand.NewPCG(seed, 99))
	n := products * stores * weeks
	p := &dbPanel{n: n, products: products, stores: stores, weeks: weeks, region: 20}
	bean := randomWalks(rng, products, weeks, 0.04)
	fr := randomWalks(rng, p.region, weeks, 0.03)
	for pr := 0; pr < products; pr++ {
		for s := 0; s < stores; s++ {
			a := 0.5 * rng.NormFloat64()
			for w := 0; w < weeks; w++ {
				u, v := 0.3*rng.NormFloat64(), 0.2*rng.NormFloat64()
				temp := 15 + 8*math.Sin(2*math.Pi*float64(w)/52) + rng.NormFloat64()
				lb, lf := bean[pr][w], fr[s%p.region][w]
				lp := 0.5 + 0.6*lb + 0.4*lf + 0.2*a + 0.5*u + v
				lq := 3 + a + 0.15*math.Sin(2*math.Pi*float64(w)/52) - 1.8*lp + 0.02*temp + u
				price := math.Exp(lp)
				freight := math.Exp(lf)
				if rng.IntN(1000) == 0 {
					price = math.NaN()
				}
				if rng.IntN(2000) == 0 {
					freight = math.NaN()
				}
				p.product = append(p.product, fmt.Sprintf("P%02d", pr+1))
				p.store = append(p.store, int64(s+1))
				p.week = append(p.week, int64(w+1))
				p.units = append(p.units, math.Round(math.Exp(lq)*100)/100+0.01)
				p.price = append(p.price, price)
				p.temp = append(p.temp, temp)
				p.bean = append(p.bean, math.Exp(lb))
				p.fgt = append(p.fgt, freight)
			}
		}
	}
	return p
}

func (p *dbPanel) columns() []pgCol {
	return []pgCol{
		{Name: "product", Type: "text", Text: p.product},
		{Name: "store", Type: "integer", Int: p.store},
		{Name: "week", Type: "integer", Int: p.week},
		{Name: "units", Type: "double precision", Float: p.units},
		{Name: "price", Type: "double precision", Float: p.price},
		{Name: "temp", Type: "double precision", Float: p.temp},
		{Name: "bean", Type: "double precision", Float: p.bean},
		{Name: "freight", Type: "double precision", Float: p.fgt},
	}
}

// writeCSV writes the panel as a CSV file (values exact; empty cells
// missing).
func (p *dbPanel) writeCSV(t testing.TB, path string) {
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	w.WriteString("product,store,week,units,price,temp,bean,freight\n")
	num := func(v float64) {
		if !math.IsNaN(v) {
			w.WriteString(strconv.FormatFloat(v, 'g', -1, 64))
		}
	}
	for i := 0; i < p.n; i++ {
		w.WriteString(p.product[i])
		w.WriteByte(',')
		w.WriteString(strconv.FormatInt(p.store[i], 10))
		w.WriteByte(',')
		w.WriteString(strconv.FormatInt(p.week[i], 10))
		for _, v := range []float64{p.units[i], p.price[i], p.temp[i], p.bean[i], p.fgt[i]} {
			w.WriteByte(',')
			num(v)
		}
		w.WriteByte('\n')
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
}

// runScript runs a printed postgres script on one connection, as a data
// engineer would, and returns the rows of its final query.
func runScript(t testing.TB, pg *pgCluster, url, script string) []demand.MomentRow {
	t.Helper()
	conn := pg.connect(t, url)
	res, err := conn.PgConn().Exec(context.Background(), script).ReadAll()
	if err != nil {
		t.Fatalf("running the printed script: %v", err)
	}
	var last [][][]byte
	for _, r := range res {
		if len(r.FieldDescriptions) == 4 && r.FieldDescriptions[0].Name == "block" {
			last = r.Rows
		}
	}
	var rows []demand.MomentRow
	for _, r := range last {
		m := demand.MomentRow{Block: string(r[0]), Key: string(r[1]), Term: string(r[2]), Value: math.NaN()}
		if r[3] != nil {
			v, err := strconv.ParseFloat(string(r[3]), 64)
			if err != nil {
				t.Fatal(err)
			}
			m.Value = v
		}
		rows = append(rows, m)
	}
	return rows
}

// pathResult is what the identity test compares across paths.
type pathResult struct {
	name     string
	n, dof   int
	coef, se []float64
	fsF      float64
	dropped  []demand.Drop
	clusters []int
}

func summarize(t testing.TB, name string, d *demand.Design) pathResult {
	t.Helper()
	fit, fs, err := d.Fit()
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	r := pathResult{name: name, n: d.N, dropped: d.Dropped, clusters: fit.Vcov.Clusters, fsF: fs[0].F.F}
	if d.Absorption != nil {
		r.dof = d.Absorption.DoF
	}
	for j := range fit.Coef {
		r.coef = append(r.coef, fit.Coef[j])
		r.se = append(r.se, fit.SE(j))
	}
	return r
}

// TestDBFourPathsAgree estimates one model four ways on a generated
// 1M-row panel (4 products × 500 stores × 500 weeks) with two absorbed
// effects (product×store and week), clustered by store: from a CSV file,
// from PostgreSQL on one server, from the sharded coordinator (the table
// partitioned by store over two servers with postgres_fdw), and from a
// moments file made by running the printed SQL script. The estimates,
// cluster-robust standard errors and first-stage F agree to 1e-10
// relative (common practice for "the same computation": the sums differ
// only in the order of additions), and the counts of rows, dropped rows,
// clusters and absorbed parameters are equal.
func TestDBFourPathsAgree(t *testing.T) {
	if testing.Short() {
		t.Skip("1M-row identity check; run without -short")
	}
	pg := startPG(t)
	panel := makeDBPanel(4, 500, 500, 7)
	dir := t.TempDir()
	csvPath := filepath.Join(dir, "panel.csv")
	panel.writeCSV(t, csvPath)
	pg.loadPanel(t, "coldbrew", "store", panel.columns(), panel.n)

	spec := func() *demand.Spec {
		return &demand.Spec{Quantity: "units", Price: "price", Controls: []string{"temp"}, Shifters: []string{"bean", "freight"},
			FE: []string{"product*store", "week"}, Cluster: []string{"store"}, Tolerance: 1e-13, MaxSweeps: 8}
	}
	var results []pathResult

	t0 := time.Now()
	raw, err := demand.ReadPanelFile(csvPath, demand.ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	s := spec()
	p, drops, err := demand.Prepare(raw, s)
	if err != nil {
		t.Fatal(err)
	}
	d, err := demand.BuildLean(p, s, 0)
	if err != nil {
		t.Fatal(err)
	}
	d.Dropped = append(drops, d.Dropped...)
	results = append(results, summarize(t, "csv", d))
	t.Logf("csv file: %v", time.Since(t0))

	for _, srv := range []struct{ name, url string }{{"single server", pg.singleURL()}, {"sharded", pg.coordURL()}} {
		t0 := time.Now()
		d, st, err := demand.BuildFromDB(context.Background(), spec(), demand.DBOptions{URL: srv.url, Source: demand.SQLSource{Table: "coldbrew"}})
		if err != nil {
			t.Fatalf("%s: %v", srv.name, err)
		}
		results = append(results, summarize(t, srv.name, d))
		t.Logf("%s: %v, %d statements, %d sweeps, %d bytes in, %d out, %d result rows", srv.name, time.Since(t0), st.Statements, st.Sweeps, st.BytesIn, st.BytesOut, st.ResultRows)
	}

	t0 = time.Now()
	script, err := demand.Script(spec(), demand.SQLSource{Table: "coldbrew"}, demand.Postgres, demand.WantsHC1(spec()))
	if err != nil {
		t.Fatal(err)
	}
	rows := runScript(t, pg, pg.singleURL(), script)
	mpath := filepath.Join(dir, "moments.csv")
	f, err := os.Create(mpath)
	if err != nil {
		t.Fatal(err)
	}
	if err := demand.WriteMoments(f, rows); err != nil {
		t.Fatal(err)
	}
	f.Close()
	back, err := demand.ReadMomentsFile(mpath)
	if err != nil {
		t.Fatal(err)
	}
	dm, err := demand.BuildFromMoments(spec(), back, mpath)
	if err != nil {
		t.Fatal(err)
	}
	results = append(results, summarize(t, "moments file", dm))
	t.Logf("printed script and moments file: %v (%d rows)", time.Since(t0), len(rows))

	ref := results[0]
	if ref.n < 990000 || ref.dof != 2000+500-1 {
		t.Fatalf("csv path: n = %d, absorbed %d; want about 1M rows and 2499 absorbed parameters", ref.n, ref.dof)
	}
	rel := func(a, b float64) float64 { return math.Abs(a-b) / math.Max(math.Abs(a), 1e-300) }
	for _, r := range results[1:] {
		if r.n != ref.n || r.dof != ref.dof || fmt.Sprint(r.clusters) != fmt.Sprint(ref.clusters) {
			t.Errorf("%s: n %d, absorbed %d, clusters %v; csv: %d, %d, %v", r.name, r.n, r.dof, r.clusters, ref.n, ref.dof, ref.clusters)
		}
		if fmt.Sprint(r.dropped) != fmt.Sprint(ref.dropped) {
			t.Errorf("%s: dropped %v; csv: %v", r.name, r.dropped, ref.dropped)
		}
		for j := range ref.coef {
			if e := rel(ref.coef[j], r.coef[j]); e > 1e-10 {
				t.Errorf("%s: coefficient %d = %.15g, csv %.15g (relative %.2g)", r.name, j, r.coef[j], ref.coef[j], e)
			}
			if e := rel(ref.se[j], r.se[j]); e > 1e-10 {
				t.Errorf("%s: s.e. %d = %.15g, csv %.15g (relative %.2g)", r.name, j, r.se[j], ref.se[j], e)
			}
		}
		if e := rel(ref.fsF, r.fsF); e > 1e-10 {
			t.Errorf("%s: first-stage F %.15g, csv %.15g", r.name, r.fsF, ref.fsF)
		}
	}
	// The generated truth is recovered (a sanity check on the panel).
	if math.Abs(ref.coef[0]+1.8) > 0.02 {
		t.Errorf("elasticity %.4f, truth -1.8", ref.coef[0])
	}
}
