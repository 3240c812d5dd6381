package main

import (
	"strings"
	"testing"
)

// The source is one choice: a spec file's query gives way to --table on
// the command line, and a spec naming both a file and a database is
// refused.
func TestSQLSourceFromSpec(t *testing.T) {
	spec := writeFile(t, "model.yaml", "query: SELECT * FROM weekly WHERE region = 'north'\nquantity: units\nprice: price\nshifters: [bean_index]\ncluster: [store]\n")
	out, _, err := run(t, "sql", "--spec", spec, "--dialect", "ansi")
	if err != nil || !strings.Contains(out, "FROM (SELECT * FROM weekly WHERE region = 'north') AS piv_src") {
		t.Errorf("source from the spec file: %v\n%s", err, out)
	}
	out, _, err = run(t, "sql", "--spec", spec, "--dialect", "ansi", "--table", "sales")
	if err != nil || !strings.Contains(out, `FROM "sales"`) || strings.Contains(out, "weekly") {
		t.Errorf("--table over the spec file's query: %v\n%s", err, out)
	}
	both := writeFile(t, "both.yaml", "data: sales.csv\ntable: weekly\nquantity: units\nprice: price\nshifters: [bean_index]\n")
	if _, _, err := run(t, "estimate", "--spec", both); err == nil || !strings.Contains(err.Error(), "two sources") {
		t.Errorf("spec with a file and a table: %v", err)
	}
	if _, _, err := run(t, "sql", "--quantity", "units", "--price", "price", "--shifters", "bean_index"); err == nil || !strings.Contains(err.Error(), "--table") {
		t.Errorf("sql without a source: %v", err)
	}
}
