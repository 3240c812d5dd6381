package tests

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"priceiv/demand"
	"priceiv/supplyshifters"
)

// smallPanel loads a small generated panel (2 products × 30 stores × 20
// weeks, with missing prices and freight indices) as table "small" on the
// single server and the sharded set, once per test binary.
var smallPanel = sync.OnceValue(func() *dbPanel { return makeDBPanel(2, 30, 20, 3) })

func loadSmall(t *testing.T) *pgCluster {
	t.Helper()
	pg := startPG(t)
	smallOnce.Do(func() { pg.loadPanel(t, "small", "store", smallPanel().columns(), smallPanel().n) })
	return pg
}

var smallOnce sync.Once

// smallFromFile writes the small panel as CSV and reads it back, the file
// path's panel to compare the database path with.
func smallFromFile(t *testing.T) *demand.Panel {
	t.Helper()
	path := filepath.Join(t.TempDir(), "small.csv")
	smallPanel().writeCSV(t, path)
	raw, err := demand.ReadPanelFile(path, demand.ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	return raw
}

func smallSpec() *demand.Spec {
	return &demand.Spec{Quantity: "units", Price: "price", Controls: []string{"temp"}, Shifters: []string{"bean", "freight"},
		FE: []string{"week"}, Cluster: []string{"store"}}
}

func dbErr(t *testing.T, url string, s *demand.Spec, src demand.SQLSource) error {
	t.Helper()
	_, _, err := demand.BuildFromDB(context.Background(), s, demand.DBOptions{URL: url, Source: src})
	if err == nil {
		t.Fatalf("no error for %+v", src)
	}
	if strings.Contains(err.Error(), pgPassword) {
		t.Errorf("the error echoes the password: %v", err)
	}
	return err
}

// TestDBBadInput checks each kind of bad input of the database path gets
// its own clear message (common practice: name what was found, where, and
// the fix), and that no message echoes the password.
func TestDBBadInput(t *testing.T) {
	pg := loadSmall(t)
	url := pg.singleURL()

	t.Run("unreachable", func(t *testing.T) {
		ports, err := freePorts(1)
		if err != nil {
			t.Fatal(err)
		}
		bad := fmt.Sprintf("postgres://%s:%s@127.0.0.1:%d/%s?sslmode=disable&connect_timeout=5", pgUser, pgPassword, ports[0], pgDatabase)
		err = dbErr(t, bad, smallSpec(), demand.SQLSource{Table: "small"})
		want := fmt.Sprintf("host 127.0.0.1 port %d", ports[0])
		if !strings.Contains(err.Error(), want) || !strings.Contains(err.Error(), "cannot reach") {
			t.Errorf("error %q does not say it cannot reach %s", err, want)
		}
	})
	t.Run("unknown table", func(t *testing.T) {
		err := dbErr(t, url, smallSpec(), demand.SQLSource{Table: "smal"})
		if !errors.Is(err, demand.ErrUnknownTable) || !strings.Contains(err.Error(), `no table "smal"`) || !strings.Contains(err.Error(), `"small"`) {
			t.Errorf("error %q does not name the table and the close name small", err)
		}
	})
	t.Run("unknown column", func(t *testing.T) {
		s := smallSpec()
		s.Price = "prise"
		err := dbErr(t, url, s, demand.SQLSource{Table: "small"})
		var uc *demand.UnknownColumnError
		if !errors.As(err, &uc) || len(uc.Close) == 0 || uc.Close[0] != "price" {
			t.Errorf("error %q is not an unknown-column error naming price", err)
		}
	})
	t.Run("text column as a number", func(t *testing.T) {
		s := smallSpec()
		s.Controls = []string{"product"}
		err := dbErr(t, url, s, demand.SQLSource{Table: "small"})
		if !errors.Is(err, demand.ErrNotNumeric) || !strings.Contains(err.Error(), "SQL type text") {
			t.Errorf("error %q does not say product is text", err)
		}
	})
	t.Run("zero rows", func(t *testing.T) {
		err := dbErr(t, url, smallSpec(), demand.SQLSource{Query: "SELECT * FROM small WHERE week < 0"})
		if !errors.Is(err, demand.ErrEmpty) || !strings.Contains(err.Error(), "returns no rows") {
			t.Errorf("error %q does not say the query returns no rows", err)
		}
	})
	t.Run("zero under a log", func(t *testing.T) {
		err := dbErr(t, url, smallSpec(), demand.SQLSource{Query: "SELECT product, store, week, CASE WHEN week = 3 THEN 0 ELSE units END AS units, price, temp, bean, freight FROM small"})
		if !errors.Is(err, demand.ErrNonPositiveLog) || !strings.Contains(err.Error(), `quantity column "units"`) {
			t.Errorf("error %q does not count the zero units", err)
		}
	})
	t.Run("bad query", func(t *testing.T) {
		err := dbErr(t, url, smallSpec(), demand.SQLSource{Query: "SELEC * FROM small"})
		if !strings.Contains(err.Error(), "--query failed") {
			t.Errorf("error %q does not blame the query", err)
		}
	})
}

// TestDBMissingValuesCounted checks that rows with NULLs in used columns
// are dropped and counted by column, as the file path counts empty cells
// (each row once, under the first missing column in model order).
func TestDBMissingValuesCounted(t *testing.T) {
	pg := loadSmall(t)
	p := smallPanel()
	wantPrice, wantFreight := 0, 0
	for i := 0; i < p.n; i++ {
		switch {
		case math.IsNaN(p.price[i]):
			wantPrice++
		case math.IsNaN(p.fgt[i]):
			wantFreight++
		}
	}
	s := smallSpec()
	s.FE = nil
	for _, url := range []string{pg.singleURL(), pg.coordURL()} {
		d, _, err := demand.BuildFromDB(context.Background(), s, demand.DBOptions{URL: url, Source: demand.SQLSource{Table: "small"}})
		if err != nil {
			t.Fatal(err)
		}
		got := map[string]int{}
		for _, dr := range d.Dropped {
			got[dr.Column] = dr.Rows
		}
		if got["price"] != wantPrice || got["freight"] != wantFreight || d.N != p.n-wantPrice-wantFreight {
			t.Errorf("dropped %v, n %d; want price %d, freight %d, n %d", d.Dropped, d.N, wantPrice, wantFreight, p.n-wantPrice-wantFreight)
		}
	}
	if wantPrice+wantFreight == 0 {
		t.Fatal("the generated panel has no missing cells to count")
	}
}

// TestDBMomentsFileMismatch checks that a moments file made for another
// model is refused with the block it lacks named.
func TestDBMomentsFileMismatch(t *testing.T) {
	pg := loadSmall(t)
	noCluster := smallSpec()
	noCluster.Cluster = nil
	noCluster.Vcov = "iid"
	rows, _, err := demand.MomentsFromDB(context.Background(), noCluster, demand.DBOptions{URL: pg.singleURL(), Source: demand.SQLSource{Table: "small"}})
	if err != nil {
		t.Fatal(err)
	}
	_, err = demand.BuildFromMoments(smallSpec(), rows, "m.csv")
	if !errors.Is(err, demand.ErrMoments) || !strings.Contains(err.Error(), `block "cluster:0"`) {
		t.Errorf("clustered model from a file without clusters: %v", err)
	}
	hc := smallSpec()
	hc.Cluster = nil
	hc.Vcov = "hc1"
	_, err = demand.BuildFromMoments(hc, rows, "m.csv")
	if !errors.Is(err, demand.ErrMoments) || !strings.Contains(err.Error(), `block "fourth"`) {
		t.Errorf("HC1 model from a file without fourth-order sums: %v", err)
	}
	other := smallSpec()
	other.Cluster, other.Vcov = nil, "iid"
	other.Shifters = []string{"bean"}
	_, err = demand.BuildFromMoments(other, rows, "m.csv")
	if !errors.Is(err, demand.ErrMoments) || !strings.Contains(err.Error(), "[units, price, temp, bean, freight]") {
		t.Errorf("model with other columns: %v", err)
	}
	// A file cut short loses blocks: the blocks it lacks are named.
	var cut []demand.MomentRow
	for _, r := range rows {
		if r.Block != "stat" {
			cut = append(cut, r)
		}
	}
	if _, err = demand.BuildFromMoments(noCluster, cut, "m.csv"); !errors.Is(err, demand.ErrMoments) || !strings.Contains(err.Error(), `block "stat"`) {
		t.Errorf("file without its stat block: %v", err)
	}
}

// TestDBPartitionwisePushdown checks that, on the sharded coordinator,
// the per-cluster sums of a model clustered by the partition column are
// computed on the shards: EXPLAIN shows one foreign scan per shard whose
// remote SQL groups (postgres_fdw's aggregate pushdown under
// enable_partitionwise_aggregate; PostgreSQL 15 documentation, F.38
// postgres_fdw "Remote Query Optimization" and 20.7.2; the
// "Relations: Aggregate on" wording is from memory).
func TestDBPartitionwisePushdown(t *testing.T) {
	pg := loadSmall(t)
	s := smallSpec()
	s.FE = nil
	script, err := demand.Script(s, demand.SQLSource{Table: "small"}, demand.Postgres, false)
	if err != nil {
		t.Fatal(err)
	}
	// Both passes over the table: the profile (rows kept and dropped)
	// and the per-cluster blocks.
	for _, table := range []string{"piv_prof", "piv_blk0"} {
		head := "CREATE TEMPORARY TABLE " + table + " AS\n"
		i := strings.Index(script, head)
		if i < 0 {
			t.Fatalf("the script has no statement making %s", table)
		}
		q := script[i+len(head):]
		q = q[:strings.Index(q, ";\n")]
		plan := pg.explain(t, pg.coordURL(), q)
		if n := strings.Count(plan, "Relations: Aggregate on"); n != 2 {
			t.Errorf("%s: want the aggregate pushed to both shards, found %d pushed aggregates in:\n%s", table, n, plan)
		}
	}
}

// TestDBCommandLine runs the program against the single server: estimate
// --db with --save-moments, estimate --moments on the saved file (the same
// numbers), sql --dialect ansi, and an unreachable server; no output
// carries the password.
func TestDBCommandLine(t *testing.T) {
	pg := loadSmall(t)
	dir := t.TempDir()
	bin := buildProgram(t)
	run := func(args ...string) (string, string, error) {
		cmd := exec.Command(bin, args...)
		var o, e bytes.Buffer
		cmd.Stdout, cmd.Stderr = &o, &e
		err := cmd.Run()
		if strings.Contains(o.String()+e.String(), pgPassword) {
			t.Errorf("priceiv %s: the output echoes the password", strings.Join(args, " "))
		}
		return o.String(), e.String(), err
	}
	model := []string{"--quantity", "units", "--price", "price", "--controls", "temp", "--shifters", "bean,freight", "--fe", "week", "--cluster", "store", "--format", "json"}
	mfile := filepath.Join(dir, "moments.csv")
	out, errOut, err := run(append([]string{"estimate", "--db", pg.singleURL(), "--table", "small", "--save-moments", mfile}, model...)...)
	if err != nil {
		t.Fatalf("estimate --db: %v\n%s", err, errOut)
	}
	var a, b map[string]any
	if err := json.Unmarshal([]byte(out), &a); err != nil {
		t.Fatalf("estimate --db output is not JSON: %v\n%s", err, out)
	}
	if !strings.Contains(out, "moment blocks computed by PostgreSQL") {
		t.Errorf("the result does not say where the sums were computed:\n%s", out)
	}
	// The cluster bootstrap works from the per-cluster blocks alone.
	boot, errOut, err := run(append([]string{"estimate", "--db", pg.singleURL(), "--table", "small", "--bootstrap", "199", "--seed", "5"}, model...)...)
	if err != nil {
		t.Fatalf("estimate --db --bootstrap: %v\n%s", err, errOut)
	}
	var bj map[string]any
	if err := json.Unmarshal([]byte(boot), &bj); err != nil {
		t.Fatal(err)
	}
	els, _ := dig(bj, "elasticities").([]any)
	if len(els) != 1 || dig(els[0], "bootstrap", "replicates") != 199.0 || dig(els[0], "bootstrap", "clusters") != 30.0 {
		t.Errorf("bootstrap band from the database: %v", dig(bj, "elasticities"))
	}
	// The same run kept in a spec file, the source a multi-line query,
	// the password left to PGPASSWORD.
	spec := filepath.Join(dir, "model.yaml")
	yaml := fmt.Sprintf("db: postgres://%s@127.0.0.1:%d/%s?sslmode=disable\nquery: |\n  SELECT *\n  FROM small\nquantity: units\nprice: price\ncontrols: [temp]\nshifters: [bean, freight]\nfe: [week]\ncluster: [store]\n",
		pgUser, pg.Single.Port, pgDatabase)
	if err := os.WriteFile(spec, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(bin, "estimate", "--spec", spec, "--format", "json")
	cmd.Env = append(os.Environ(), "PGPASSWORD="+pgPassword)
	fromSpec, err := cmd.Output()
	if err != nil {
		t.Fatalf("estimate --spec with a database source: %v", err)
	}
	var sj map[string]any
	if err := json.Unmarshal(fromSpec, &sj); err != nil {
		t.Fatal(err)
	}
	if cs, _ := json.Marshal(dig(sj, "coefficients")); string(cs) != func() string { c, _ := json.Marshal(dig(a, "coefficients")); return string(c) }() {
		t.Errorf("spec-file database run gives other coefficients:\n%s", cs)
	}
	out2, errOut, err := run(append([]string{"estimate", "--moments", mfile}, model...)...)
	if err != nil {
		t.Fatalf("estimate --moments: %v\n%s", err, errOut)
	}
	if err := json.Unmarshal([]byte(out2), &b); err != nil {
		t.Fatal(err)
	}
	ca, _ := json.Marshal(dig(a, "coefficients"))
	cb, _ := json.Marshal(dig(b, "coefficients"))
	if string(ca) != string(cb) || len(ca) < 20 {
		t.Errorf("--moments gives other coefficients than --db:\n%s\n%s", ca, cb)
	}
	sql, _, err := run("sql", "--dialect", "ansi", "--table", "sales.small", "--quantity", "units", "--price", "price", "--shifters", "bean", "--fe", "store,week")
	if err != nil || !strings.Contains(sql, `CREATE TABLE piv_rows AS`) || !strings.Contains(sql, `FROM "sales"."small"`) || strings.Contains(sql, "TEMPORARY") {
		t.Errorf("sql --dialect ansi: %v\n%s", err, sql)
	}
	// --by product: the database runs once per product; the table equals
	// the file path's.
	csvPath := filepath.Join(dir, "small.csv")
	smallPanel().writeCSV(t, csvPath)
	by := []string{"--by", "product", "--quantity", "units", "--price", "price", "--controls", "temp", "--shifters", "bean,freight", "--fe", "store", "--cluster", "store", "--format", "json"}
	fromDB, errOut, err := run(append([]string{"estimate", "--db", pg.coordURL(), "--table", "small"}, by...)...)
	if err != nil {
		t.Fatalf("estimate --db --by: %v\n%s", err, errOut)
	}
	fromFile, errOut, err := run(append([]string{"estimate", csvPath}, by...)...)
	if err != nil {
		t.Fatalf("estimate FILE --by: %v\n%s", err, errOut)
	}
	var ea, eb map[string]any
	if err := json.Unmarshal([]byte(fromDB), &ea); err != nil {
		t.Fatalf("--by output: %v\n%s", err, fromDB)
	}
	if err := json.Unmarshal([]byte(fromFile), &eb); err != nil {
		t.Fatal(err)
	}
	ra, _ := dig(ea, "elasticities").([]any)
	rb, _ := dig(eb, "elasticities").([]any)
	if len(ra) != 2 || len(rb) != 2 {
		t.Fatalf("--by product: %d rows from the database, %d from the file; want 2", len(ra), len(rb))
	}
	for i := range ra {
		for _, k := range []string{"own_price", "std_error", "first_stage_f"} {
			x, _ := dig(ra[i], k).(float64)
			y, _ := dig(rb[i], k).(float64)
			if math.Abs(x-y) > 1e-10*math.Abs(y) || y == 0 {
				t.Errorf("--by product row %d %s: database %.15g, file %.15g", i, k, x, y)
			}
		}
	}

	if _, errOut, err := run(append([]string{"estimate", csvPath, "--save-moments", filepath.Join(dir, "x.csv")}, model...)...); err == nil || !strings.Contains(errOut, "--save-moments writes the sums a database returned") {
		t.Errorf("--save-moments with a file: %v\n%s", err, errOut)
	}

	ports, _ := freePorts(1)
	_, errOut, err = run(append([]string{"estimate", "--db", fmt.Sprintf("postgres://%s:%s@127.0.0.1:%d/x?connect_timeout=5", pgUser, pgPassword, ports[0]), "--table", "small"}, model...)...)
	if err == nil || !strings.Contains(errOut, fmt.Sprintf("port %d", ports[0])) {
		t.Errorf("unreachable server: %v\n%s", err, errOut)
	}
}

// dig follows keys into decoded JSON.
func dig(v any, keys ...string) any {
	for _, k := range keys {
		m, ok := v.(map[string]any)
		if !ok {
			return nil
		}
		v = m[k]
	}
	return v
}

// program is the priceiv binary built once for the command-line tests.
var program struct {
	once sync.Once
	path string
	err  error
	out  []byte
}

// buildProgram builds cmd/priceiv into a temporary folder, removed by
// TestMain when the tests end.
func buildProgram(t *testing.T) string {
	t.Helper()
	program.once.Do(func() {
		dir, err := os.MkdirTemp("", "priceiv-bin-")
		if err != nil {
			program.err = err
			return
		}
		program.path = filepath.Join(dir, "priceiv")
		program.out, program.err = exec.Command("go", "build", "-o", program.path, "../cmd/priceiv").CombinedOutput()
	})
	if program.err != nil {
		t.Fatalf("build: %v\n%s", program.err, program.out)
	}
	return program.path
}

// TestDBCommandLineStockWatson runs the last of the six Stock & Watson
// chapter 12 cigarette rows (10-year differences, both taxes as
// instruments, HC1; values as listed in shared/reference-data/README.md)
// through the program's --db and --query options: elasticity -1.20
// (s.e. 0.20), income 0.46 (0.31), to the printed two decimals.
func TestDBCommandLineStockWatson(t *testing.T) {
	pg := startPG(t)
	cols, n := loadRefCSV(t, "cigarettes_state_panel.csv", "State")
	pg.loadPanel(t, "cig", "state", cols, n)
	bin := buildProgram(t)
	query := `SELECT LN(a.packpc) - LN(b.packpc) AS lnq, LN(a.avgprs / a.cpi) - LN(b.avgprs / b.cpi) AS lnp,
		(a.taxs - a.tax) / a.cpi - (b.taxs - b.tax) / b.cpi AS salestax, a.tax / a.cpi - b.tax / b.cpi AS cigtax,
		LN(a.income / (a.pop * a.cpi)) - LN(b.income / (b.pop * b.cpi)) AS lninc
		FROM cig a JOIN cig b ON a.state = b.state AND b.year = 1985 WHERE a.year = 1995`
	out, err := exec.Command(bin, "estimate", "--db", pg.coordURL(), "--query", query, "--outcome", "lnq", "--endogenous", "lnp",
		"--exogenous", "lninc", "--instruments", "salestax,cigtax", "--vcov", "hc1", "--format", "json").Output()
	if err != nil {
		t.Fatalf("estimate --db --query: %v", err)
	}
	var res struct {
		N      int `json:"n"`
		Coeffs []struct {
			Name     string  `json:"name"`
			Estimate float64 `json:"estimate"`
			StdError float64 `json:"std_error"`
		} `json:"coefficients"`
	}
	if err := json.Unmarshal(out, &res); err != nil {
		t.Fatal(err)
	}
	want := map[string][2]float64{"lnp": {-1.20, 0.20}, "lninc": {0.46, 0.31}}
	found := 0
	for _, c := range res.Coeffs {
		if w, ok := want[c.Name]; ok {
			found++
			if round(c.Estimate, 2) != w[0] || round(c.StdError, 2) != w[1] {
				t.Errorf("%s = %.4f (%.4f), want %.2f (%.2f) [Stock & Watson ch. 12, recalled, re-derived]", c.Name, c.Estimate, c.StdError, w[0], w[1])
			}
		}
	}
	if res.N != 48 || found != 2 {
		t.Errorf("n = %d, coefficients %v", res.N, res.Coeffs)
	}
}

// TestDBNotANumberAndNesting checks two harder cases against the file
// path on the small generated panel: a price that is NaN in the database
// (PostgreSQL keeps it as a value, not a NULL) is dropped and counted as
// missing, as an unusable cell of a file is; and with three effects of
// which two (store, product×store) are nested in the store clusters, the
// small-sample factor counts the rank of the nested effects' dummies as
// Build does, so the cluster-robust standard errors agree to 1e-10
// relative (common practice for the same computation in another order).
// --max-sweeps 1 is taken as two sweeps (the second measures the change).
func TestDBNotANumberAndNesting(t *testing.T) {
	pg := loadSmall(t)
	s := smallSpec()
	s.FE = []string{"store", "week"}
	q := "SELECT product, store, week, units, CASE WHEN week = 4 AND store = 7 THEN CAST('NaN' AS double precision) ELSE price END AS price, temp, bean, freight FROM small"
	d, _, err := demand.BuildFromDB(context.Background(), s, demand.DBOptions{URL: pg.singleURL(), Source: demand.SQLSource{Query: q}})
	if err != nil {
		t.Fatal(err)
	}
	ref, _, _ := demand.BuildFromDB(context.Background(), s, demand.DBOptions{URL: pg.singleURL(), Source: demand.SQLSource{Table: "small"}})
	var gotPrice, refPrice int
	for _, dr := range d.Dropped {
		if dr.Column == "price" {
			gotPrice = dr.Rows
		}
	}
	for _, dr := range ref.Dropped {
		if dr.Column == "price" {
			refPrice = dr.Rows
		}
	}
	// Week 4 of store 7 has 2 rows (one per product), both made NaN here
	// unless already missing.
	if gotPrice < refPrice+1 || gotPrice > refPrice+2 || d.N != ref.N-(gotPrice-refPrice) {
		t.Errorf("NaN prices: dropped %v (n %d); without them %v (n %d)", d.Dropped, d.N, ref.Dropped, ref.N)
	}

	raw := smallFromFile(t)
	three := smallSpec()
	three.FE = []string{"store", "week", "product*store"}
	three.Tolerance = 1e-13
	fileD, err := demand.Build(raw, three, 0)
	if err != nil {
		t.Fatal(err)
	}
	fileFit, _, err := fileD.Fit()
	if err != nil {
		t.Fatal(err)
	}
	dbD, _, err := demand.BuildFromDB(context.Background(), three, demand.DBOptions{URL: pg.coordURL(), Source: demand.SQLSource{Table: "small"}})
	if err != nil {
		t.Fatal(err)
	}
	dbFit, _, err := dbD.Fit()
	if err != nil {
		t.Fatal(err)
	}
	if fileFit.Vcov.SmallSample != dbFit.Vcov.SmallSample || fileD.Absorption.DoF != dbD.Absorption.DoF {
		t.Errorf("small-sample factor: file %q (absorbed %d), database %q (absorbed %d)", fileFit.Vcov.SmallSample, fileD.Absorption.DoF, dbFit.Vcov.SmallSample, dbD.Absorption.DoF)
	}
	for j := range fileFit.Coef {
		if e := math.Abs(fileFit.SE(j)-dbFit.SE(j)) / fileFit.SE(j); e > 1e-10 {
			t.Errorf("s.e. %d: file %.15g, database %.15g", j, fileFit.SE(j), dbFit.SE(j))
		}
	}

	one := smallSpec()
	one.FE = []string{"store", "week"}
	one.MaxSweeps = 1
	one.Tolerance = 1e-3
	_, _, err = demand.BuildFromDB(context.Background(), one, demand.DBOptions{URL: pg.singleURL(), Source: demand.SQLSource{Table: "small"}})
	if err == nil || !strings.Contains(err.Error(), "did not converge in 2 sweeps") {
		t.Errorf("--max-sweeps 1 on a panel needing more: %v; want the not-converged error after 2 sweeps", err)
	}
}

// TestDBHeteroskedasticityRobustWithEffects checks the HC1 pass of the
// database path with absorbed effects (the fourth-order sums of the
// absorbed columns) against the file path on the small generated panel:
// estimates, HC1 standard errors, the robust first-stage F and the
// Kleibergen-Paap and effective F of the diagnostics agree to 1e-9
// relative (the two paths centre the fourth-order sums differently, so
// they agree to rounding, not bit for bit; common practice).
func TestDBHeteroskedasticityRobustWithEffects(t *testing.T) {
	pg := loadSmall(t)
	s := smallSpec()
	s.FE = []string{"store", "week"}
	s.Cluster = nil
	s.Vcov = "hc1"
	s.Tolerance = 1e-13
	raw := smallFromFile(t)
	fileD, err := demand.Build(raw, s, 0)
	if err != nil {
		t.Fatal(err)
	}
	dbD, _, err := demand.BuildFromDB(context.Background(), s, demand.DBOptions{URL: pg.singleURL(), Source: demand.SQLSource{Table: "small"}})
	if err != nil {
		t.Fatal(err)
	}
	type stats struct{ coef, se []float64 }
	var got [2]stats
	var fsF, kp, eff [2]float64
	for i, d := range []*demand.Design{fileD, dbD} {
		fit, fs, err := d.Fit()
		if err != nil {
			t.Fatal(err)
		}
		for j := range fit.Coef {
			got[i].coef = append(got[i].coef, fit.Coef[j])
			got[i].se = append(got[i].se, fit.SE(j))
		}
		fsF[i] = fs[0].F.F
		dg, err := supplyshifters.Diagnose(d, fit, supplyshifters.Options{})
		if err != nil {
			t.Fatal(err)
		}
		kp[i], eff[i] = float64(dg.WeakIV.KPWald.Value), float64(dg.WeakIV.Effective.F)
	}
	rel := func(a, b float64) float64 { return math.Abs(a-b) / math.Abs(a) }
	for j := range got[0].coef {
		if rel(got[0].coef[j], got[1].coef[j]) > 1e-9 || rel(got[0].se[j], got[1].se[j]) > 1e-9 {
			t.Errorf("term %d: file %.12g (%.12g), database %.12g (%.12g)", j, got[0].coef[j], got[0].se[j], got[1].coef[j], got[1].se[j])
		}
	}
	for _, c := range []struct {
		what string
		v    [2]float64
	}{{"first-stage F", fsF}, {"Kleibergen-Paap rk Wald F", kp}, {"effective F", eff}} {
		if rel(c.v[0], c.v[1]) > 1e-9 || c.v[0] == 0 {
			t.Errorf("%s: file %.12g, database %.12g", c.what, c.v[0], c.v[1])
		}
	}
}

// TestDBANSIScript runs the script of --dialect ansi (plain tables, every
// loop written out) on the single server, as a warehouse would run it,
// and checks that its result, read as a moments file, gives the estimate
// the PostgreSQL path gives (1e-10 relative; common practice), that the
// script leaves no table behind, and that it works with two-way
// clustering and three effects.
func TestDBANSIScript(t *testing.T) {
	pg := loadSmall(t)
	s := smallSpec()
	s.FE = []string{"product*store", "week", "store"}
	s.Cluster = []string{"store", "week"}
	s.Tolerance = 1e-13
	s.MaxSweeps = 60
	script, err := demand.Script(s, demand.SQLSource{Table: "small"}, demand.ANSI, false)
	if err != nil {
		t.Fatal(err)
	}
	rows := runScript(t, pg, pg.singleURL(), script)
	fromScript, err := demand.BuildFromMoments(s, rows, "ansi result")
	if err != nil {
		t.Fatal(err)
	}
	fromDB, _, err := demand.BuildFromDB(context.Background(), s, demand.DBOptions{URL: pg.singleURL(), Source: demand.SQLSource{Table: "small"}})
	if err != nil {
		t.Fatal(err)
	}
	a := summarize(t, "ansi", fromScript)
	b := summarize(t, "postgres", fromDB)
	if a.n != b.n || a.dof != b.dof || fmt.Sprint(a.clusters) != fmt.Sprint(b.clusters) {
		t.Errorf("ansi script: n %d, absorbed %d, clusters %v; postgres path: %d, %d, %v", a.n, a.dof, a.clusters, b.n, b.dof, b.clusters)
	}
	for j := range a.coef {
		if math.Abs(a.coef[j]-b.coef[j]) > 1e-10*math.Abs(b.coef[j]) || math.Abs(a.se[j]-b.se[j]) > 1e-10*b.se[j] {
			t.Errorf("term %d: ansi %.15g (%.15g), postgres %.15g (%.15g)", j, a.coef[j], a.se[j], b.coef[j], b.se[j])
		}
	}
	var left int
	if err := pg.connect(t, pg.singleURL()).QueryRow(context.Background(), "SELECT COUNT(*) FROM information_schema.tables WHERE table_name LIKE 'piv\\_%'").Scan(&left); err != nil {
		t.Fatal(err)
	}
	if left != 0 {
		t.Errorf("the ansi script left %d piv_ tables behind", left)
	}
}
