package tests

import (
	"context"
	"testing"

	"priceiv/demand"
)

// BenchmarkDBMoments measures the database path on the generated 1M-row
// panel of TestDBFourPathsAgree (4 products × 500 stores × 500 weeks)
// loaded into one PostgreSQL server of the harness and into the sharded
// set (two shard servers behind a coordinator, partitioned by store):
//
//	go test -run XXX -bench DBMoments -benchtime 2x ./tests/
//
// Each reports rows/s (rows of the table per second of the whole run:
// connection, profile, absorption and blocks) and the bytes received and
// sent per run. Only sums travel back: the bytes do not grow with the
// rows. Two models: clustered by store without effects (the per-store sums
// run on the shards), and with product×store and week effects absorbed
// by alternating projections in SQL.
func BenchmarkDBMoments(b *testing.B) {
	pg := startPG(b)
	panel := makeDBPanel(4, 500, 500, 7)
	pg.loadPanel(b, "coldbrew", "store", panel.columns(), panel.n)
	models := []struct {
		name string
		fe   []string
	}{{"cluster", nil}, {"absorb2", []string{"product*store", "week"}}}
	for _, srv := range []struct{ name, url string }{{"single", pg.singleURL()}, {"sharded", pg.coordURL()}} {
		for _, m := range models {
			b.Run(srv.name+"/"+m.name, func(b *testing.B) {
				s := &demand.Spec{Quantity: "units", Price: "price", Controls: []string{"temp"}, Shifters: []string{"bean", "freight"},
					FE: m.fe, Cluster: []string{"store"}}
				var in, out int64
				for b.Loop() {
					_, st, err := demand.MomentsFromDB(context.Background(), s, demand.DBOptions{URL: srv.url, Source: demand.SQLSource{Table: "coldbrew"}})
					if err != nil {
						b.Fatal(err)
					}
					in, out = st.BytesIn, st.BytesOut
				}
				b.ReportMetric(float64(panel.n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
				b.ReportMetric(float64(in), "bytes-in/op")
				b.ReportMetric(float64(out), "bytes-out/op")
			})
		}
	}
}
