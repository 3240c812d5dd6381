package elasticity

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

var lineProducts = []string{"oat_latte_can", "black_bottle", "vanilla_can"}

func TestReadPrices(t *testing.T) {
	// Columns in another order, mixed case, spaces, a byte-order mark, an
	// empty optional cell and a quoted decimal comma.
	in := "\ufeffPrice, product ,unit_cost,owner,quantity\n" +
		"3.10,black_bottle,1.20,,800\n" +
		"2.49,oat_latte_can,,us,1200\n" +
		"\"2,99\",vanilla_can,1.05,rival,\n"
	for run := 0; run < 2; run++ {
		rows, err := ReadPrices(strings.NewReader(in), "prices.csv", lineProducts)
		if err != nil {
			t.Fatal(err)
		}
		for i, want := range []struct {
			product     string
			price, cost float64 // 0: missing
			qty         float64
			owner       string
			line        int
		}{
			{"oat_latte_can", 2.49, 0, 1200, "us", 3},
			{"black_bottle", 3.10, 1.20, 800, "", 2},
			{"vanilla_can", 2.99, 1.05, 0, "rival", 4},
		} {
			r := rows[i]
			get := func(p *float64) float64 {
				if p == nil {
					return 0
				}
				return *p
			}
			if r.Product != want.product || get(r.Price) != want.price || get(r.UnitCost) != want.cost || get(r.Quantity) != want.qty || r.Owner != want.owner || r.Line != want.line {
				t.Errorf("row %d: %s %v %v %v %q line %d, want %+v", i, r.Product, get(r.Price), get(r.UnitCost), get(r.Quantity), r.Owner, r.Line, want)
			}
		}
	}
}

func TestReadPricesErrors(t *testing.T) {
	head := "product,price,unit_cost\n"
	for _, test := range []struct {
		name, in, want string
	}{
		{"missing product", head + "oat_latte_can,2.49,1.1\nblack_bottle,3.10,1.2\n",
			`prices.csv: no line for product "vanilla_can"; the model's products are "oat_latte_can", "black_bottle", "vanilla_can", and each needs a line`},
		{"negative price", head + "oat_latte_can,2.49,1.1\nblack_bottle,-3.10,1.2\nvanilla_can,2.99,1\n",
			`prices.csv, line 3, column price: price -3.1 for product "black_bottle": it must be a positive number`},
		{"zero price", head + "oat_latte_can,0,1.1\n", `prices.csv, line 2, column price: price 0 for product "oat_latte_can"`},
		{"zero cost", head + "oat_latte_can,2.49,0\n", `prices.csv, line 2, column unit_cost: unit_cost 0 for product "oat_latte_can": it must be a positive number (a zero or negative unit cost has no meaning here)`},
		{"negative quantity", "product,price,quantity\noat_latte_can,2.49,-4\n", `line 2, column quantity: quantity -4`},
		{"unknown column", "product,price,cost\n", `prices.csv, line 1, column 3: unknown column "cost": the columns of a prices file are product, price, unit_cost, quantity, owner`},
		{"semicolons", "product;price\n", `the file looks separated by semicolons or tabs`},
		{"duplicate column", "product,price,Price\n", `column "price" appears twice (columns 2 and 3)`},
		{"no price column", "product,unit_cost\n", `no "price" column: the header must name at least product and price`},
		{"not in model", head + "espresso_can,2.49,1\n", `prices.csv, line 2, column product: product "espresso_can" is not in the model; the model's products are "oat_latte_can", "black_bottle", "vanilla_can"`},
		{"listed twice", head + "oat_latte_can,2.49,1\noat_latte_can,2.59,1\n", `line 3, column product: product "oat_latte_can" is listed twice (lines 2 and 3)`},
		{"not a number", head + "oat_latte_can,2.49,1\nblack_bottle,abc,1\n", `prices.csv, line 3, column price: cannot read "abc" as a number`},
		{"empty price", head + "oat_latte_can,,1\n", `line 2, column price: no price for product "oat_latte_can"`},
		{"not a finite number", head + "oat_latte_can,NaN,1\n", `line 2, column price: price NaN`},
		{"empty product", head + ",2.49,1\n", `line 2, column product: the product name is empty`},
		{"empty file", "", `prices.csv: the file is empty`},
		{"ragged", head + "oat_latte_can,2.49\n", `prices.csv, line 2: wrong number of fields`},
	} {
		_, err := ReadPrices(strings.NewReader(test.in), "prices.csv", lineProducts)
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%s: error %v\nwant it to contain %q", test.name, err, test.want)
		}
		var pe *PricesError
		if err != nil && !errors.As(err, &pe) {
			t.Errorf("%s: error is %T, not a *PricesError", test.name, err)
		}
	}
}

func TestReadPricesFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "prices.csv")
	if err := os.WriteFile(path, []byte("product,price\noat_latte_can,2.49\nblack_bottle,3.1\nvanilla_can,2.99\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	rows, err := ReadPricesFile(path, lineProducts)
	if err != nil || len(rows) != 3 || *rows[2].Price != 2.99 {
		t.Fatalf("rows %+v, error %v", rows, err)
	}
	// Without the model's products the file defines them, in file order.
	rows, err = ReadPricesFile(path, nil)
	if err != nil || len(rows) != 3 || rows[1].Product != "black_bottle" {
		t.Fatalf("rows %+v, error %v", rows, err)
	}
	if _, err := ReadPricesFile(filepath.Join(t.TempDir(), "none.csv"), lineProducts); err == nil || !strings.Contains(err.Error(), "cannot read the prices file") {
		t.Errorf("missing file: %v", err)
	}
}
