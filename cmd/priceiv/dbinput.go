package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"priceiv/demand"
	"priceiv/elasticity"
)

// dbFlags binds the options of the SQL path: where the data lives, or
// the file of sums an engine returned.
type dbFlags struct {
	url, table, query string
	moments, save     string
}

func (f *dbFlags) register(fs *pflag.FlagSet) {
	fs.StringVar(&f.url, "db", "", "PostgreSQL URL (postgres://user@host:port/database); the database computes the moment blocks and only sums travel (empty with --table or --query: the PG* environment variables)")
	fs.StringVar(&f.table, "table", "", "with --db: the table holding the panel (schema.table for another schema)")
	fs.StringVar(&f.query, "query", "", "with --db: a SELECT giving the panel, instead of --table")
	fs.StringVar(&f.moments, "moments", "", "estimate from a moments file: the result of the SQL that 'priceiv sql' prints, run on any engine")
	fs.StringVar(&f.save, "save-moments", "", "with --db: also write the sums the database returned as a moments file")
}

// checkSave refuses --save-moments where nothing is saved: a panel file,
// or --by (one run per product).
func (f *dbFlags) checkSave(spec *demand.Spec) error {
	switch {
	case f.save == "":
		return nil
	case !f.active():
		return fmt.Errorf("--save-moments writes the sums a database returned: use it with --db and --table or --query")
	case spec.By != "":
		return fmt.Errorf("--save-moments writes the sums of one model; --by runs one per product: leave out --by, or narrow --query to one product")
	}
	return nil
}

// fromSpec takes the data's source from the spec file's db, table, query
// and moments keys (moments relative to the spec file) when the command
// line names none: the source is one choice, so a source given on the
// command line (--db, --table, --query, --moments, --data or a panel
// file argument) replaces all of the spec file's.
func (f *dbFlags) fromSpec(cmd *cobra.Command, args []string, s *demand.Spec, specPath string) error {
	if len(args) > 0 {
		return nil
	}
	for _, flag := range []string{"db", "table", "query", "moments", "data"} {
		if cmd.Flags().Changed(flag) {
			return nil
		}
	}
	if s.Data != "" && (s.DB != "" || s.Table != "" || s.Query != "" || s.Moments != "") {
		return fmt.Errorf("%s names two sources, data: %s and a database (db, table, query or moments): keep one", specPath, s.Data)
	}
	set := func(flag string, dst *string, v string) {
		if cmd.Flags().Lookup(flag) != nil && v != "" {
			*dst = v
		}
	}
	set("db", &f.url, s.DB)
	set("table", &f.table, s.Table)
	set("query", &f.query, s.Query)
	m := s.Moments
	if m != "" && specPath != "" && !strings.HasPrefix(m, "/") {
		m = joinRel(specPath, m)
	}
	set("moments", &f.moments, m)
	return nil
}

// active reports whether the data comes from a database or a moments
// file rather than a panel file.
func (f *dbFlags) active() bool {
	return f.url != "" || f.table != "" || f.query != "" || f.moments != ""
}

// check refuses combinations that cannot work.
func (f *dbFlags) check(cmd *cobra.Command, args []string, useDemo bool, spec *demand.Spec) error {
	switch {
	case useDemo:
		return fmt.Errorf("--demo generates its own panel: leave out --db, --table, --query and --moments")
	case len(args) > 0 || cmd.Flags().Changed("data"):
		return fmt.Errorf("the panel is given twice (a file and --db/--moments): give one source")
	case f.moments != "" && (f.url != "" || f.table != "" || f.query != ""):
		return fmt.Errorf("--moments reads sums already computed: leave out --db, --table and --query")
	case f.moments == "" && f.table == "" && f.query == "":
		return fmt.Errorf("--db needs the data's place: --table NAME or --query 'SELECT …'")
	case f.save != "" && f.moments != "":
		return fmt.Errorf("--save-moments writes what a database returned: use it with --db")
	case spec.Interact != "" || spec.Cross:
		return fmt.Errorf("--interact and --cross read rows; from a database or a moments file use --by (one model per product) or the pooled model")
	}
	return nil
}

func (f *dbFlags) source() demand.SQLSource {
	return demand.SQLSource{Table: f.table, Query: f.query}
}

// design returns the design of the spec's model from the database or
// the moments file, with a note of what the database run cost.
func (f *dbFlags) design(cmd *cobra.Command, spec *demand.Spec) (*demand.Design, string, error) {
	if f.moments != "" {
		rows, err := demand.ReadMomentsFile(f.moments)
		if err != nil {
			return nil, "", err
		}
		d, err := demand.BuildFromMoments(spec, rows, f.moments)
		if err != nil {
			return nil, "", err
		}
		return d, fmt.Sprintf("moment blocks read from %s (%d sums); no rows were read", f.moments, len(rows)), nil
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	rows, st, err := demand.MomentsFromDB(ctx, spec, demand.DBOptions{URL: f.url, Source: f.source()})
	if err != nil {
		return nil, "", err
	}
	if f.save != "" {
		if err := elasticity.WriteFileAtomic(f.save, func(w io.Writer) error { return demand.WriteMoments(w, rows) }); err != nil {
			return nil, "", err
		}
		fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", f.save)
	}
	d, err := demand.BuildFromMoments(spec, rows, f.where(st.Server))
	if err != nil {
		return nil, "", err
	}
	note := fmt.Sprintf("moment blocks computed by PostgreSQL at %s from %s: %d statements%s, %s sent and %s received (%d sums, no rows) in %.1f s",
		st.Server, f.what(), st.Statements, sweepNote(st.Sweeps), byteSize(st.BytesOut), byteSize(st.BytesIn), st.ResultRows, st.Elapsed.Seconds())
	fmt.Fprintln(cmd.ErrOrStderr(), note)
	return d, note, nil
}

func (f *dbFlags) what() string {
	if f.table != "" {
		return "table " + f.table
	}
	return "the query"
}

func (f *dbFlags) where(server string) string { return f.what() + " in " + server }

func sweepNote(n int) string {
	if n == 0 {
		return ""
	}
	return fmt.Sprintf(", %d absorption sweep(s)", n)
}

// byteSize writes a byte count for people.
func byteSize(n int64) string {
	switch {
	case n >= 1<<20:
		return fmt.Sprintf("%.1f MB", float64(n)/(1<<20))
	case n >= 1<<10:
		return fmt.Sprintf("%.1f kB", float64(n)/(1<<10))
	}
	return fmt.Sprintf("%d bytes", n)
}

// resolveDBSpec resolves the model options for the SQL path (no panel
// file is read).
func resolveDBSpec(cmd *cobra.Command, mf *modelFlags) (*demand.Spec, error) {
	spec, err := mf.resolve(cmd, demand.Spec{})
	if err != nil {
		return nil, err
	}
	if strings.TrimSpace(spec.Data) != "" && !cmd.Flags().Changed("data") {
		spec.Data = "" // a spec file's data: is replaced by the database
	}
	return spec, nil
}

// runProductsDB fits per-product elasticities (--by) with each product's
// sums computed by the database.
func runProductsDB(cmd *cobra.Command, db *dbFlags, spec *demand.Spec) (*demand.ProductTable, error) {
	if spec.Interact != "" {
		return nil, fmt.Errorf("--interact reads rows: from a database use --by")
	}
	if db.moments != "" {
		return nil, fmt.Errorf("a moments file holds the sums of one model: for --by, print and run the SQL once per product (--query '… WHERE product = …') and estimate each file")
	}
	s := *spec
	s.Product = spec.By
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	t, stats, err := demand.EstimateByProductDB(ctx, &s, demand.DBOptions{URL: db.url, Source: db.source()})
	if err != nil {
		return nil, err
	}
	var in, out int64
	n := 0
	for _, st := range stats {
		in += st.BytesIn
		out += st.BytesOut
		n += st.Statements
	}
	note := fmt.Sprintf("moment blocks computed by PostgreSQL from %s, one run per product: %d statements, %s sent and %s received (sums only, no rows)", db.what(), n, byteSize(out), byteSize(in))
	fmt.Fprintln(cmd.ErrOrStderr(), note)
	t.Notes = append(t.Notes, note)
	elasticity.FillRobust(t)
	return t, nil
}
