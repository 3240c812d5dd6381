package demand

import (
	"context"
	"errors"
	"fmt"
	"math"
	"net"
	neturl "net/url"
	"strings"
	"sync/atomic"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// DBOptions says where the SQL path finds the data.
type DBOptions struct {
	// URL is a PostgreSQL connection URL (postgres://user@host:port/db)
	// or key=value string; empty uses the standard PG* environment
	// variables. Its password is never printed.
	URL string
	// Source is the table or query holding the panel.
	Source SQLSource
}

// DBStats reports what a run of the SQL path cost.
type DBStats struct {
	// Statements is the number of SQL statements run.
	Statements int
	// Sweeps is the number of absorption sweeps (0 without effects).
	Sweeps int
	// BytesIn and BytesOut count the bytes received from and sent to the
	// server, SQL text included.
	BytesIn, BytesOut int64
	// ResultRows is the number of rows of the final result (the moments
	// file), the only data that leaves the server.
	ResultRows int
	// Elapsed is the wall time of the run.
	Elapsed time.Duration
	// Server is host:port/database (no user, no password).
	Server string
}

// MomentsFromDB connects to PostgreSQL, has it compute the moment
// blocks of the spec's model over the source (see Script for the SQL),
// and returns the rows of the result with what the run cost. The
// database does every pass over the rows: without fixed effects a
// profile pass and one GROUP BY per clustering dimension (two more with
// HC1); with fixed effects, a copy of the used columns into a temporary
// table, singleton rounds, one GROUP BY per effect per sweep, and the
// passes over the absorbed columns. Only sums travel back.
func MomentsFromDB(ctx context.Context, s *Spec, opt DBOptions) ([]MomentRow, *DBStats, error) {
	rows, _, st, err := momentsFromDB(ctx, s, opt)
	return rows, st, err
}

// momentsFromDB is MomentsFromDB, also returning the plan.
func momentsFromDB(ctx context.Context, s *Spec, opt DBOptions) ([]MomentRow, *sqlPlan, *DBStats, error) {
	start := time.Now()
	p, err := newSQLPlan(s, opt.Source, Postgres, WantsHC1(s))
	if err != nil {
		return nil, nil, nil, err
	}
	if p.from == "" {
		return nil, nil, nil, errNoSource
	}
	conn, counter, server, err := connect(ctx, opt.URL)
	if err != nil {
		return nil, nil, nil, err
	}
	defer conn.Close(context.Background())
	st := &DBStats{Server: server}
	label := opt.Source.label() + " in " + server
	if err := describe(ctx, conn, p, label); err != nil {
		return nil, nil, nil, err
	}
	r := &connRunner{ctx: ctx, conn: conn, stats: st}
	check := func(q string) error {
		rows, err := r.moments(q)
		if err != nil {
			return err
		}
		m, err := newMomentSet(rows)
		if err != nil {
			return err
		}
		_, err = profileDrops(p, m, label, &Design{})
		return err
	}
	run, err := p.run(r, check)
	if err != nil {
		return nil, nil, nil, err
	}
	// The final query's rows, with the block tables read as they are:
	// the same rows, fewer bytes.
	narrow, wide := p.final(run)
	rows, err := r.moments(strings.Join(narrow, "\nUNION ALL "))
	if err != nil {
		return nil, nil, nil, err
	}
	for _, w := range wide {
		if rows, err = r.wide(w, rows); err != nil {
			return nil, nil, nil, err
		}
	}
	st.ResultRows = len(rows)
	for _, x := range rows {
		if x.Block == "absorb" && x.Term == "sweeps" {
			st.Sweeps = int(x.Value)
		}
	}
	st.BytesIn, st.BytesOut = counter.in.Load(), counter.out.Load()
	st.Elapsed = time.Since(start)
	return rows, p, st, nil
}

// BuildFromDB is MomentsFromDB followed by the Design the moments give:
// the same design Build gives for the rows, without the rows (Cols and
// Raw are nil).
func BuildFromDB(ctx context.Context, s *Spec, opt DBOptions) (*Design, *DBStats, error) {
	rows, p, st, err := momentsFromDB(ctx, s, opt)
	if err != nil {
		return nil, nil, err
	}
	d, err := designFromMoments(p, rows, opt.Source.label()+" in "+st.Server)
	if err != nil {
		return nil, nil, err
	}
	return d, st, nil
}

// byteCounter counts the bytes of a connection.
type byteCounter struct{ in, out atomic.Int64 }

type countedConn struct {
	net.Conn
	c *byteCounter
}

func (c countedConn) Read(b []byte) (int, error) {
	n, err := c.Conn.Read(b)
	c.c.in.Add(int64(n))
	return n, err
}

func (c countedConn) Write(b []byte) (int, error) {
	n, err := c.Conn.Write(b)
	c.c.out.Add(int64(n))
	return n, err
}

// connect opens one connection (temporary tables live as long as it).
// Errors name the host and port and never the password.
func connect(ctx context.Context, url string) (*pgx.Conn, *byteCounter, string, error) {
	cfg, err := pgx.ParseConfig(url)
	if err != nil {
		reason := ""
		if inner := errors.Unwrap(err); inner != nil && (url == "" || !strings.Contains(inner.Error(), url)) && !containsPassword(inner.Error(), url) {
			reason = " (" + inner.Error() + ")"
		}
		return nil, nil, "", fmt.Errorf("--db: the address is not a PostgreSQL connection URL (postgres://user@host:port/database) or key=value string%s; the standard PG* environment variables are used when --db is empty", reason)
	}
	if cfg.ConnectTimeout == 0 {
		cfg.ConnectTimeout = 15 * time.Second
	}
	counter := &byteCounter{}
	dialer := &net.Dialer{KeepAlive: 5 * time.Minute}
	cfg.DialFunc = func(ctx context.Context, network, addr string) (net.Conn, error) {
		c, err := dialer.DialContext(ctx, network, addr)
		if err != nil {
			return nil, err
		}
		return countedConn{c, counter}, nil
	}
	server := fmt.Sprintf("%s:%d/%s", cfg.Host, cfg.Port, cfg.Database)
	conn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		var pe *pgconn.PgError
		if errors.As(err, &pe) {
			return nil, nil, "", fmt.Errorf("the database server at host %s port %d refused the connection: %s (SQLSTATE %s); check the user, database name and password in --db or the PG* environment variables", cfg.Host, cfg.Port, pe.Message, pe.Code)
		}
		reason := "no answer"
		var op *net.OpError
		if errors.As(err, &op) && op.Err != nil {
			reason = op.Err.Error()
		} else if errors.Is(err, context.DeadlineExceeded) {
			reason = "timed out"
		}
		return nil, nil, "", fmt.Errorf("cannot reach the database at host %s port %d (%s): check that the server runs and accepts TCP connections there, and the host and port in --db", cfg.Host, cfg.Port, reason)
	}
	return conn, counter, server, nil
}

// numericOIDs are the PostgreSQL types a model column may have.
var numericOIDs = map[uint32]string{
	20: "bigint", 21: "smallint", 23: "integer", 700: "real", 701: "double precision", 1700: "numeric",
}

// describe checks the source exists and holds the model's columns, with
// numeric types where the model needs numbers.
func describe(ctx context.Context, conn *pgx.Conn, p *sqlPlan, label string) error {
	rows, err := conn.Query(ctx, "SELECT * FROM "+p.from+" LIMIT 0")
	if err != nil {
		return sourceError(ctx, conn, p, err)
	}
	fds := rows.FieldDescriptions()
	rows.Close()
	if err := rows.Err(); err != nil {
		return sourceError(ctx, conn, p, err)
	}
	types := map[string]uint32{}
	var known []string
	for _, f := range fds {
		types[f.Name] = f.DataTypeOID
		known = append(known, f.Name)
	}
	names, numeric := p.sourceColumns()
	for _, n := range names {
		oid, ok := types[n]
		if !ok {
			return &UnknownColumnError{Source: label, Name: n, Close: closeNames(n, known, 3), Known: len(known),
				Lister: "psql's \\d TABLE lists them; in --query, name the column in the SELECT"}
		}
		if numeric[n] {
			if _, ok := numericOIDs[oid]; !ok {
				tn := fmt.Sprintf("type %d", oid)
				if t, ok := conn.TypeMap().TypeForOID(oid); ok {
					tn = t.Name
				}
				return fmt.Errorf("%w: %s: column %q has SQL type %s, but the model uses it as a number: choose a numeric column (integer, bigint, real, double precision or numeric), or convert it in --query with CAST(%s AS double precision)",
					ErrNotNumeric, label, n, tn, quoteIdent(n))
			}
		}
	}
	return nil
}

// sourceError explains why the source could not be read: an unknown
// table (with the close names), or the query's own error.
func sourceError(ctx context.Context, conn *pgx.Conn, p *sqlPlan, err error) error {
	var pe *pgconn.PgError
	if !errors.As(err, &pe) {
		return fmt.Errorf("reading %s: %w", p.source.label(), err)
	}
	if pe.Code == "42P01" && p.source.Table != "" {
		var tables []string
		rows, qerr := conn.Query(ctx, `SELECT CASE WHEN table_schema = 'public' THEN table_name ELSE table_schema || '.' || table_name END
			FROM information_schema.tables WHERE table_schema NOT IN ('pg_catalog', 'information_schema') ORDER BY 1`)
		if qerr == nil {
			for rows.Next() {
				var t string
				if rows.Scan(&t) == nil {
					tables = append(tables, t)
				}
			}
			rows.Close()
		}
		msg := fmt.Sprintf("the database has no table %q", p.source.Table)
		if c := closeNames(p.source.Table, tables, 3); len(c) > 0 {
			msg += fmt.Sprintf("; did you mean %s?", strings.Join(quoteAll(c), " or "))
		} else if len(tables) == 1 {
			msg += " (it has 1 table)"
		} else if len(tables) > 0 {
			msg += fmt.Sprintf(" (it has %d tables)", len(tables))
		}
		return fmt.Errorf("%w: %s: check --table (schema.table for another schema)", ErrUnknownTable, msg)
	}
	if p.source.Query != "" {
		return fmt.Errorf("--query failed in the database: %s (SQLSTATE %s)", pe.Message, pe.Code)
	}
	return fmt.Errorf("reading %s: %s (SQLSTATE %s)", p.source.label(), pe.Message, pe.Code)
}

func quoteAll(s []string) []string {
	out := make([]string, len(s))
	for i, x := range s {
		out[i] = fmt.Sprintf("%q", x)
	}
	return out
}

// connRunner runs a plan on a connection.
type connRunner struct {
	ctx   context.Context
	conn  *pgx.Conn
	stats *DBStats
}

func (r *connRunner) printing() bool { return false }

func (r *connRunner) exec(sql string) (int64, error) {
	r.stats.Statements++
	tag, err := r.conn.Exec(r.ctx, sql)
	if err != nil {
		return 0, stepError(sql, err)
	}
	return tag.RowsAffected(), nil
}

func (r *connRunner) values(sql string) ([]float64, error) {
	r.stats.Statements++
	rows, err := r.conn.Query(r.ctx, sql)
	if err != nil {
		return nil, stepError(sql, err)
	}
	defer rows.Close()
	if !rows.Next() {
		if err := rows.Err(); err != nil {
			return nil, stepError(sql, err)
		}
		return nil, fmt.Errorf("the database returned no row for: %s", firstLine(sql))
	}
	vals, err := rows.Values()
	if err != nil {
		return nil, stepError(sql, err)
	}
	out := make([]float64, len(vals))
	for i, v := range vals {
		switch x := v.(type) {
		case float64:
			out[i] = x
		case nil:
			out[i] = 0
		default:
			return nil, fmt.Errorf("the database returned %T where a number was expected in: %s", v, firstLine(sql))
		}
	}
	return out, rows.Err()
}

// moments runs a query whose rows are (block, key, term, value).
func (r *connRunner) moments(sql string) ([]MomentRow, error) {
	r.stats.Statements++
	rows, err := r.conn.Query(r.ctx, sql)
	if err != nil {
		return nil, stepError(sql, err)
	}
	defer rows.Close()
	var out []MomentRow
	for rows.Next() {
		var m MomentRow
		var v *float64
		if err := rows.Scan(&m.Block, &m.Key, &m.Term, &v); err != nil {
			return nil, stepError(sql, err)
		}
		m.Value = math.NaN() // NULL: a sum over no rows
		if v != nil {
			m.Value = *v
		}
		out = append(out, m)
	}
	if err := rows.Err(); err != nil {
		return nil, stepError(sql, err)
	}
	return out, nil
}

// wide reads a block table as it is and appends its rows as moment rows.
func (r *connRunner) wide(w widePart, out []MomentRow) ([]MomentRow, error) {
	r.stats.Statements++
	q := w.sql()
	rows, err := r.conn.Query(r.ctx, q)
	if err != nil {
		return nil, stepError(q, err)
	}
	defer rows.Close()
	vals := make([]*float64, len(w.terms))
	dst := make([]any, len(w.terms)+1)
	var key string
	dst[0] = &key
	for i := range vals {
		dst[i+1] = &vals[i]
	}
	for rows.Next() {
		if err := rows.Scan(dst...); err != nil {
			return nil, stepError(q, err)
		}
		for i, t := range w.terms {
			m := MomentRow{Block: w.block, Key: key, Term: t, Value: math.NaN()}
			if vals[i] != nil {
				m.Value = *vals[i]
			}
			out = append(out, m)
		}
	}
	if err := rows.Err(); err != nil {
		return nil, stepError(q, err)
	}
	return out, nil
}

// stepError reports a failed statement with its first line.
func stepError(sql string, err error) error {
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		return fmt.Errorf("the database refused a statement of the SQL path (%s): %s (SQLSTATE %s)", firstLine(sql), pe.Message, pe.Code)
	}
	return fmt.Errorf("the database connection failed during %q: %w", firstLine(sql), err)
}

func firstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		s = s[:i]
	}
	if len(s) > 120 {
		s = s[:120] + "…"
	}
	return s
}

// EstimateByProductDB is EstimateByProduct with each product's moment
// blocks computed by the database: the SQL path runs once per product,
// on the source narrowed to that product's rows (one set of passes per
// product). It also returns what each run cost.
func EstimateByProductDB(ctx context.Context, s *Spec, opt DBOptions) (*ProductTable, []*DBStats, error) {
	if err := checkProductSpec(s, "--by product"); err != nil {
		return nil, nil, err
	}
	p, err := newSQLPlan(s, opt.Source, Postgres, false)
	if err != nil {
		return nil, nil, err
	}
	if p.from == "" {
		return nil, nil, errNoSource
	}
	conn, _, server, err := connect(ctx, opt.URL)
	if err != nil {
		return nil, nil, err
	}
	label := opt.Source.label() + " in " + server
	p.fes = append(p.fes, sqlKey{name: s.Product, parts: []string{s.Product}}) // described as an id column
	err = describe(ctx, conn, p, label)
	p.fes = p.fes[:len(p.fes)-1]
	if err != nil {
		conn.Close(ctx)
		return nil, nil, err
	}
	prod := quoteIdent(s.Product)
	text := "CAST(" + prod + " AS VARCHAR(1000))"
	var levels []string
	rows, err := conn.Query(ctx, "SELECT DISTINCT "+text+" FROM "+p.from+" WHERE "+prod+" IS NOT NULL ORDER BY 1")
	if err == nil {
		for rows.Next() {
			var l string
			if err = rows.Scan(&l); err != nil {
				break
			}
			levels = append(levels, l)
		}
		rows.Close()
		if err == nil {
			err = rows.Err()
		}
	}
	var missing int64
	if err == nil {
		err = conn.QueryRow(ctx, "SELECT COUNT(*) FROM "+p.from+" WHERE "+prod+" IS NULL").Scan(&missing)
	}
	conn.Close(ctx)
	if err != nil {
		return nil, nil, stepError("SELECT DISTINCT "+text, err)
	}
	if len(levels) == 0 {
		return nil, nil, fmt.Errorf("%w: %s: no rows with a product (%s) to estimate from", ErrEmpty, label, s.Product)
	}
	t := newProductTable("by product", NewPanel(label, 0), s)
	if missing > 0 {
		t.Dropped = append(t.Dropped, Drop{Reason: "missing value", Column: s.Product, Rows: int(missing)})
	}
	var stats []*DBStats
	err = fillProducts(t, levels, func(k int) (*Design, error) {
		sub := DBOptions{URL: opt.URL, Source: SQLSource{Query: "SELECT * FROM " + p.from + " WHERE " + text + " = " + quoteLit(levels[k])}}
		mr, sp, st, err := momentsFromDB(ctx, s, sub)
		if err != nil {
			return nil, err
		}
		stats = append(stats, st)
		return designFromMoments(sp, mr, fmt.Sprintf("%s, %s %s", label, s.Product, levels[k]))
	})
	if err != nil {
		return nil, nil, err
	}
	return t, stats, nil
}

// containsPassword reports whether text holds the password of a
// connection URL or key=value string (any text after "password=" or
// between "user:" and "@").
func containsPassword(text, url string) bool {
	var pw string
	if i := strings.Index(url, "password="); i >= 0 {
		pw = url[i+len("password="):]
		if j := strings.IndexAny(pw, " &"); j >= 0 {
			pw = pw[:j]
		}
	} else if i := strings.Index(url, "://"); i >= 0 {
		rest := url[i+3:]
		if at := strings.LastIndex(rest, "@"); at >= 0 {
			if c := strings.Index(rest[:at], ":"); c >= 0 {
				pw = rest[c+1 : at]
			}
		}
	}
	return pw != "" && strings.Contains(text, pw)
}

// RedactURL returns a PostgreSQL connection URL or key=value string with
// its password taken out (user, host, port, database and options kept),
// for writing down where data came from.
func RedactURL(s string) string {
	if s == "" {
		return s
	}
	if strings.Contains(s, "://") {
		u, err := neturl.Parse(s)
		if err != nil {
			return "(a connection URL that does not parse)"
		}
		if u.User != nil {
			u.User = neturl.User(u.User.Username())
		}
		q := u.Query()
		if q.Has("password") {
			q.Del("password")
			u.RawQuery = q.Encode()
		}
		return u.String()
	}
	var kept []string
	for _, f := range strings.Fields(s) {
		if !strings.HasPrefix(strings.ToLower(f), "password=") {
			kept = append(kept, f)
		}
	}
	return strings.Join(kept, " ")
}
