package demand_test

import (
	"fmt"
	"strings"

	"priceiv/demand"
)

// ExampleReadCSV reads a small panel: numeric columns become numbers, the
// rest become ids, and an empty cell is missing.
func ExampleReadCSV() {
	data := []byte("product,store,week,units,price\nOat Latte Can,S001,1,120,2.99\nOat Latte Can,S001,2,,3.09\n")
	p, err := demand.ReadCSV(data, "sales.csv", demand.ReadOptions{})
	if err != nil {
		fmt.Println(err)
		return
	}
	units, _ := p.Float("units")
	fmt.Println(p.N, "rows;", "product levels:", p.Text["product"].Levels, "; units:", units)
	_, err = p.Float("product")
	fmt.Println(err)
	// Output:
	// 2 rows; product levels: [Oat Latte Can] ; units: [120 NaN]
	// sales.csv: column "product" holds text (for example "Oat Latte Can" on line 2), but it is used as a number; use it as an id (--fe, --cluster) or pick a numeric column
}

// ExampleParseDerive derives a column within each store, ordered by week.
func ExampleParseDerive() {
	data := []byte("store,week,price\nS001,1,2.00\nS001,2,2.20\nS002,1,3.00\nS002,2,2.70\n")
	p, _ := demand.ReadCSV(data, "sales.csv", demand.ReadOptions{})
	name, e, err := demand.ParseDerive("dlp=diff(log(price),1)")
	if err != nil {
		fmt.Println(err)
		return
	}
	if err := demand.Derive(p, name, e, demand.PanelKeys{Unit: "store", Time: "week"}); err != nil {
		fmt.Println(err)
		return
	}
	for _, v := range p.Num["dlp"] {
		fmt.Printf("%.4f ", v)
	}
	fmt.Println()
	// Output:
	// NaN 0.0953 NaN -0.1054
}

// ExampleScript prints the SQL that has a warehouse engine compute the
// moment blocks of a log-log demand model clustered by store; the engine's
// result, saved as CSV, is read back by ReadMomentsFile and
// BuildFromMoments.
func ExampleScript() {
	s := &demand.Spec{Quantity: "units", Price: "price", Shifters: demand.List{"bean_index"}, Cluster: demand.List{"store"}, Vcov: "cluster"}
	sql, err := demand.Script(s, demand.SQLSource{Table: "coldbrew_weekly"}, demand.ANSI, false)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, line := range strings.Split(sql, "\n") {
		if strings.HasPrefix(line, "CREATE") || strings.HasPrefix(line, "GROUP BY") || strings.HasPrefix(line, "DROP") {
			fmt.Println(line)
		}
	}
	// Output:
	// CREATE TABLE piv_prof AS
	// GROUP BY miss, gp0;
	// CREATE TABLE piv_blk0 AS
	// GROUP BY g0;
	// DROP TABLE IF EXISTS piv_prof;
	// DROP TABLE IF EXISTS piv_blk0;
}
