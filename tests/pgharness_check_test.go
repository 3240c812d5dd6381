package tests

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// TestPGHarnessShardsSumOnShards loads one invented table into the single
// server and into the sharded set, and checks that both give the per-store
// counts and sums computed here, that the rows are split over the two
// shards as the coordinator's hash partitioning expects, and that the
// coordinator hands the GROUP BY store aggregation to the shards.
func TestPGHarnessShardsSumOnShards(t *testing.T) {
	c := startPG(t)
	const n, stores = 2000, 40
	rng := rand.New(rand.NewPCG(7, 11))
	store := make([]int64, n)
	week := make([]int64, n)
	x := make([]float64, n)
	for i := range n {
		store[i] = int64(rng.IntN(stores))
		week[i] = int64(1 + i%50)
		x[i] = rng.NormFloat64()
		if i%97 == 3 {
			x[i] = math.NaN() // loads as NULL
		}
	}
	c.loadPanel(t, "pgh_check", "store", []pgCol{
		{Name: "store", Type: "integer", Int: store},
		{Name: "week", Type: "integer", Int: week},
		{Name: "x", Type: "double precision", Float: x},
	}, n)

	// Generated truth per store: rows, non-NULL x, sum of x.
	type agg struct {
		rows, nonNull int64
		sum           float64
	}
	want := make(map[int64]agg)
	for i := range n {
		a := want[store[i]]
		a.rows++
		if !math.IsNaN(x[i]) {
			a.nonNull++
			a.sum += x[i]
		}
		want[store[i]] = a
	}

	ctx := context.Background()
	const byStore = "SELECT store, count(*), count(x), sum(x) FROM pgh_check GROUP BY store"
	for _, srv := range []*pgServer{c.Single, c.Coord} {
		rows, err := c.connect(t, srv.URL).Query(ctx, byStore)
		if err != nil {
			t.Fatalf("%s: %v", srv.Name, err)
		}
		got := 0
		for rows.Next() {
			var s, cnt, cntX int64
			var sum float64
			if err := rows.Scan(&s, &cnt, &cntX, &sum); err != nil {
				t.Fatalf("%s: %v", srv.Name, err)
			}
			got++
			w, ok := want[s]
			if !ok {
				t.Errorf("%s: store %d was not loaded", srv.Name, s)
				continue
			}
			// Summation order may differ from the one here, so sums agree
			// to rounding, not bit for bit.
			if cnt != w.rows || cntX != w.nonNull || math.Abs(sum-w.sum) > 1e-12*float64(w.rows) {
				t.Errorf("%s: store %d: count %d, count(x) %d, sum %.17g; want %d, %d, %.17g",
					srv.Name, s, cnt, cntX, sum, w.rows, w.nonNull, w.sum)
			}
		}
		if err := rows.Err(); err != nil {
			t.Fatalf("%s: %v", srv.Name, err)
		}
		if got != len(want) {
			t.Errorf("%s: %d stores, want %d", srv.Name, got, len(want))
		}
	}

	// The coordinator's rows are exactly the shards' own rows.
	var total int64
	if err := c.connect(t, c.coordURL()).QueryRow(ctx, "SELECT count(*) FROM pgh_check").Scan(&total); err != nil {
		t.Fatal(err)
	}
	var onShards int64
	for k, s := range c.Shards {
		var cnt int64
		if err := c.connect(t, s.URL).QueryRow(ctx, "SELECT count(*) FROM pgh_check_shard"+string(rune('0'+k))).Scan(&cnt); err != nil {
			t.Fatal(err)
		}
		if cnt == 0 {
			t.Errorf("shard %d is empty", k)
		}
		onShards += cnt
	}
	if total != n || onShards != total {
		t.Errorf("coordinator counts %d rows, shards %d, loaded %d", total, onShards, n)
	}

	// Each store's rows sit on the shard the coordinator prunes to: a
	// WHERE store = s scans one partition only (partition pruning), so a
	// row on the wrong shard would be missed.
	coord := c.connect(t, c.coordURL())
	for s, w := range want {
		var cnt int64
		if err := coord.QueryRow(ctx, "SELECT count(*) FROM pgh_check WHERE store = $1", s).Scan(&cnt); err != nil {
			t.Fatal(err)
		}
		if cnt != w.rows {
			t.Errorf("coordinator, store %d alone: %d rows, want %d", s, cnt, w.rows)
		}
	}

	// PostgreSQL 15 documentation, F.38 postgres_fdw, "Remote Query
	// Optimization": postgres_fdw sends aggregates to the remote server when
	// it can; and runtime-config-query, enable_partitionwise_aggregate:
	// with it on, aggregation on a partitioned table is done per partition,
	// wholly when GROUP BY includes the partition key. So GROUP BY store on
	// a table hash-partitioned by store should become one pushed-down
	// aggregate per shard. That EXPLAIN VERBOSE labels such a Foreign Scan
	// "Relations: Aggregate on (...)" is from memory (postgres_fdw's
	// regression output). The shards' own SQL, on the "Remote SQL:" line,
	// carries the GROUP BY (postgres_fdw writes it by position, GROUP BY 1).
	plan := c.explain(t, c.coordURL(), byStore)
	if got := strings.Count(plan, "Relations: Aggregate on"); got != 2 {
		t.Errorf("coordinator plan has %d aggregates pushed to shards, want 2:\n%s", got, plan)
	}
	if got := strings.Count(plan, "Foreign Scan"); got != 2 {
		t.Errorf("coordinator plan has %d foreign scans, want 2:\n%s", got, plan)
	}
	remoteGroupBy := 0
	for _, line := range strings.Split(plan, "\n") {
		if strings.Contains(line, "Remote SQL:") && strings.Contains(line, " GROUP BY ") {
			remoteGroupBy++
		}
	}
	if remoteGroupBy != 2 {
		t.Errorf("coordinator plan sends GROUP BY to the shards %d times, want 2:\n%s", remoteGroupBy, plan)
	}
	if strings.Contains(plan, pgPassword) {
		t.Errorf("coordinator plan shows the password")
	}
}
