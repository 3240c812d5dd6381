package tests

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"os"
	"os/exec"
	"os/signal"
	"os/user"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// The PostgreSQL harness: four throw-away PostgreSQL servers on 127.0.0.1,
// started once per test binary on first use and stopped by TestMain.
//
//   - Single: one plain server holding whole tables.
//   - Coord: a coordinator whose tables are hash-partitioned (MODULUS 2) on a
//     named column, each partition a postgres_fdw foreign table.
//   - Shards[0], Shards[1]: the servers holding those partitions as plain
//     tables named <table>_shard0 and <table>_shard1.
//
// Every server trusts local connections; the role priceiv still has the
// password pgPassword so that tests can check it is never echoed.

const (
	pgUser     = "priceiv"
	pgPassword = "coldbrew"
	pgDatabase = "priceiv"
	// pgSkipEnv, set to 1, turns the failure for a missing PostgreSQL
	// installation into a skip.
	pgSkipEnv = "PRICEIV_SKIP_DB"
	// pgDirPrefix starts the name of the temporary directory holding the
	// data directories; the clean-up process refuses any other directory.
	pgDirPrefix = "priceiv-pg-"
)

// errNoPostgres reports that no PostgreSQL server binaries were found.
var errNoPostgres = errors.New("PostgreSQL server binaries not found (looked at pg_config --bindir and /usr/lib/postgresql/*/bin); install Debian's postgresql package: apt-get install -y postgresql")

// pgServer is one running PostgreSQL server of the harness.
type pgServer struct {
	Name string // single, coord, shard0 or shard1
	Dir  string // data directory
	Port int    // TCP port on 127.0.0.1
	URL  string // connection URL of database priceiv, password included
	log  string // server log file
}

// pgCluster is the set of servers of the harness.
type pgCluster struct {
	Single, Coord *pgServer
	Shards        [2]*pgServer

	root   string   // temporary directory holding data directories and logs
	bin    string   // PostgreSQL bin directory
	prefix []string // command prefix running a program as user postgres (empty when not root)

	reaper   *exec.Cmd      // clean-up process that outlives a crashed test binary
	reaperIn io.WriteCloser // closing it (or dying) lets the reaper clean up

	stopOnce sync.Once
	stopErr  error
}

// pgShared is the lazily started cluster shared by the tests of the package.
var pgShared struct {
	once sync.Once
	mu   sync.Mutex
	c    *pgCluster
	err  error
}

// TestMain runs the tests and then stops the shared PostgreSQL servers, if
// they were started, and removes their directories. An interrupt or a
// termination signal does the same before exiting. If the test binary dies
// in any other way (a panicking test, the -timeout panic, SIGKILL), the
// clean-up process started with the servers stops them when it sees its
// standard input close.
func TestMain(m *testing.M) {
	sig := make(chan os.Signal, 1)
	signal.Notify(sig, os.Interrupt, syscall.SIGTERM)
	go func() {
		s, ok := <-sig
		if !ok {
			return
		}
		if err := stopSharedPG(); err != nil {
			fmt.Fprintf(os.Stderr, "postgres harness: %v\n", err)
		}
		fmt.Fprintf(os.Stderr, "postgres harness: stopped servers on %v\n", s)
		os.Exit(1)
	}()
	code := m.Run()
	signal.Stop(sig)
	if program.path != "" {
		os.RemoveAll(filepath.Dir(program.path)) // the binary of the command-line tests
	}
	if err := stopSharedPG(); err != nil {
		fmt.Fprintf(os.Stderr, "postgres harness: %v\n", err)
		if code == 0 {
			code = 1
		}
	}
	os.Exit(code)
}

// stopSharedPG stops the shared cluster if it was started.
func stopSharedPG() error {
	pgShared.mu.Lock()
	c := pgShared.c
	pgShared.mu.Unlock()
	if c == nil {
		return nil
	}
	return c.stop()
}

// startPG returns the shared cluster, starting it on first use. It fails the
// test when the servers cannot be started, and when PostgreSQL is not
// installed unless PRICEIV_SKIP_DB=1, in which case it skips the test.
func startPG(t testing.TB) *pgCluster {
	t.Helper()
	pgShared.once.Do(func() {
		start := time.Now()
		c, err := launchPG()
		pgShared.mu.Lock()
		pgShared.c, pgShared.err = c, err
		pgShared.mu.Unlock()
		if err == nil {
			t.Logf("postgres harness: 4 servers up in %v", time.Since(start).Round(time.Millisecond))
		}
	})
	if pgShared.err != nil {
		if errors.Is(pgShared.err, errNoPostgres) && os.Getenv(pgSkipEnv) == "1" {
			t.Skipf("%s=1: %v", pgSkipEnv, pgShared.err)
		}
		t.Fatalf("postgres harness: %v", pgShared.err)
	}
	return pgShared.c
}

// pgBinDir finds the directory of initdb, pg_ctl and postgres.
func pgBinDir() (string, error) {
	has := func(dir string) bool {
		for _, p := range []string{"initdb", "pg_ctl", "postgres"} {
			if _, err := os.Stat(filepath.Join(dir, p)); err != nil {
				return false
			}
		}
		return true
	}
	if pgc, err := exec.LookPath("pg_config"); err == nil {
		if out, err := exec.Command(pgc, "--bindir").Output(); err == nil {
			if dir := strings.TrimSpace(string(out)); has(dir) {
				return dir, nil
			}
		}
	}
	matches, _ := filepath.Glob("/usr/lib/postgresql/*/bin")
	best, bestVer := "", -1
	for _, dir := range matches {
		ver, err := strconv.Atoi(filepath.Base(filepath.Dir(dir)))
		if err == nil && ver > bestVer && has(dir) {
			best, bestVer = dir, ver
		}
	}
	if best == "" {
		return "", errNoPostgres
	}
	return best, nil
}

// launchPG creates, starts and prepares the four servers.
func launchPG() (_ *pgCluster, err error) {
	bin, err := pgBinDir()
	if err != nil {
		return nil, err
	}
	c := &pgCluster{bin: bin}
	uid, gid := -1, -1
	if os.Geteuid() == 0 {
		u, err := user.Lookup("postgres")
		if err != nil {
			return nil, fmt.Errorf("running as root needs the postgres system user (created by Debian's postgresql package): %w", err)
		}
		uid, _ = strconv.Atoi(u.Uid)
		gid, _ = strconv.Atoi(u.Gid)
		if p, err := exec.LookPath("runuser"); err == nil {
			c.prefix = []string{p, "-u", "postgres", "--"}
		} else if p, err := exec.LookPath("setpriv"); err == nil {
			c.prefix = []string{p, "--reuid=postgres", "--regid=postgres", "--init-groups"}
		} else {
			return nil, errors.New("running as root needs runuser or setpriv to start PostgreSQL as user postgres")
		}
	}
	c.root, err = os.MkdirTemp(os.TempDir(), pgDirPrefix+"*")
	if err != nil {
		return nil, fmt.Errorf("creating temporary directory: %w", err)
	}
	if err := c.startReaper(); err != nil {
		os.RemoveAll(c.root)
		return nil, err
	}
	defer func() {
		if err != nil {
			if serr := c.stop(); serr != nil {
				err = fmt.Errorf("%w (and while cleaning up: %v)", err, serr)
			}
		}
	}()
	if uid >= 0 {
		if err := os.Chown(c.root, uid, gid); err != nil {
			return nil, fmt.Errorf("handing %s to user postgres: %w", c.root, err)
		}
	}

	ports, err := freePorts(4)
	if err != nil {
		return nil, err
	}
	names := []string{"single", "coord", "shard0", "shard1"}
	servers := make([]*pgServer, len(names))
	for i, name := range names {
		servers[i] = &pgServer{
			Name: name,
			Dir:  filepath.Join(c.root, name),
			Port: ports[i],
			URL:  pgURL(ports[i], pgDatabase),
			log:  filepath.Join(c.root, name+".log"),
		}
	}
	c.Single, c.Coord, c.Shards = servers[0], servers[1], [2]*pgServer{servers[2], servers[3]}

	// One initdb, copied to the other three data directories: four initdb
	// runs would take about four times as long.
	pwfile := filepath.Join(c.root, "pwfile")
	if err := os.WriteFile(pwfile, []byte(pgPassword+"\n"), 0o600); err != nil {
		return nil, fmt.Errorf("writing password file: %w", err)
	}
	if uid >= 0 {
		if err := os.Chown(pwfile, uid, gid); err != nil {
			return nil, fmt.Errorf("handing password file to user postgres: %w", err)
		}
	}
	if err := c.run(filepath.Join(bin, "initdb"), "-D", servers[0].Dir, "-A", "trust", "-U", pgUser,
		"--pwfile="+pwfile, "--no-sync", "-E", "UTF8", "--locale=C"); err != nil {
		return nil, err
	}
	os.Remove(pwfile)
	for _, s := range servers[1:] {
		if err := c.run("cp", "-a", servers[0].Dir, s.Dir); err != nil {
			return nil, err
		}
	}
	for _, s := range servers {
		if err := s.configure(); err != nil {
			return nil, err
		}
	}

	errs := make([]error, len(servers))
	var wg sync.WaitGroup
	for i, s := range servers {
		wg.Go(func() {
			if err := c.run(filepath.Join(bin, "pg_ctl"), "start", "-w", "-t", "60", "-s", "-D", s.Dir, "-l", s.log); err != nil {
				errs[i] = fmt.Errorf("starting server %s: %w\n%s", s.Name, err, tailFile(s.log, 2000))
				return
			}
			errs[i] = createDatabase(s)
		})
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	if err := c.setupCoordinator(); err != nil {
		return nil, err
	}
	return c, nil
}

// pgURL is the connection URL of database db on port.
func pgURL(port int, db string) string {
	return fmt.Sprintf("postgres://%s:%s@127.0.0.1:%d/%s?sslmode=disable", pgUser, pgPassword, port, db)
}

// freePorts returns n distinct TCP ports that were free on 127.0.0.1.
func freePorts(n int) ([]int, error) {
	ports := make([]int, 0, n)
	for range n {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			return nil, fmt.Errorf("finding a free port: %w", err)
		}
		defer l.Close()
		ports = append(ports, l.Addr().(*net.TCPAddr).Port)
	}
	return ports, nil
}

// configure appends the harness settings to the server's postgresql.conf:
// loopback only, durability off (the data is thrown away), small memory.
func (s *pgServer) configure() error {
	conf := fmt.Sprintf(`
# priceiv test harness
listen_addresses = '127.0.0.1'
port = %d
unix_socket_directories = '%s'
fsync = off
synchronous_commit = off
full_page_writes = off
wal_level = minimal
max_wal_senders = 0
max_wal_size = 2GB
shared_buffers = 64MB
max_connections = 20
autovacuum = off
`, s.Port, s.Dir)
	f, err := os.OpenFile(filepath.Join(s.Dir, "postgresql.conf"), os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		return fmt.Errorf("configuring server %s: %w", s.Name, err)
	}
	if _, err := f.WriteString(conf); err != nil {
		f.Close()
		return fmt.Errorf("configuring server %s: %w", s.Name, err)
	}
	return f.Close()
}

// createDatabase creates database priceiv on s.
func createDatabase(s *pgServer) error {
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, pgURL(s.Port, "postgres"))
	if err != nil {
		return fmt.Errorf("connecting to server %s: %w", s.Name, err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "CREATE DATABASE "+pgDatabase); err != nil {
		return fmt.Errorf("creating database on server %s: %w", s.Name, err)
	}
	return nil
}

// pgShardServer is the name of the postgres_fdw foreign server of shard k
// on the coordinator.
func pgShardServer(k int) string { return fmt.Sprintf("shard%d", k) }

// setupCoordinator declares the shards as postgres_fdw foreign servers and
// turns on partitionwise aggregation and joins.
func (c *pgCluster) setupCoordinator() error {
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, c.Coord.URL)
	if err != nil {
		return fmt.Errorf("connecting to coordinator: %w", err)
	}
	defer conn.Close(ctx)
	stmts := []string{"CREATE EXTENSION postgres_fdw"}
	for k, s := range c.Shards {
		stmts = append(stmts,
			fmt.Sprintf(`CREATE SERVER %s FOREIGN DATA WRAPPER postgres_fdw OPTIONS (host '127.0.0.1', port '%d', dbname '%s', fetch_size '10000', use_remote_estimate 'false')`,
				pgShardServer(k), s.Port, pgDatabase),
			fmt.Sprintf(`CREATE USER MAPPING FOR %s SERVER %s OPTIONS (user '%s', password '%s')`,
				pgUser, pgShardServer(k), pgUser, pgPassword))
	}
	stmts = append(stmts,
		"ALTER DATABASE "+pgDatabase+" SET enable_partitionwise_aggregate = on",
		"ALTER DATABASE "+pgDatabase+" SET enable_partitionwise_join = on")
	for _, q := range stmts {
		if _, err := conn.Exec(ctx, q); err != nil {
			return fmt.Errorf("setting up coordinator: %s: %w", strings.SplitN(q, " OPTIONS", 2)[0], err)
		}
	}
	return nil
}

// run runs a program as user postgres (as the current user when not root)
// in the harness directory and returns its output with any error.
func (c *pgCluster) run(prog string, args ...string) error {
	argv := append(append(slices.Clip(c.prefix), prog), args...)
	cmd := exec.Command(argv[0], argv[1:]...)
	cmd.Dir = c.root
	out, err := cmd.CombinedOutput()
	if err != nil {
		return fmt.Errorf("%s %s: %w\n%s", filepath.Base(prog), strings.Join(args, " "), err, out)
	}
	return nil
}

// pgReaperScript waits for its standard input to close, then stops every
// server under the harness directory ($1) and removes the directory. It
// ignores the terminal's signals so that it outlives an interrupted test
// binary. $2 is pg_ctl; the remaining arguments run it as user postgres.
const pgReaperScript = `trap '' INT TERM HUP
root=$1; pgctl=$2; shift 2
case "$root" in */` + pgDirPrefix + `*) ;; *) exit 1 ;; esac
cat >/dev/null
for d in "$root"/*/; do
	if [ -f "$d/postmaster.pid" ]; then "$@" "$pgctl" stop -D "$d" -m immediate -w -s >/dev/null 2>&1; fi
done
rm -rf "$root"
`

// startReaper starts the clean-up process for the harness directory.
func (c *pgCluster) startReaper() error {
	args := append([]string{"-c", pgReaperScript, "pg-reaper", c.root, filepath.Join(c.bin, "pg_ctl")}, c.prefix...)
	cmd := exec.Command("/bin/sh", args...)
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	in, err := cmd.StdinPipe()
	if err != nil {
		return fmt.Errorf("starting clean-up process: %w", err)
	}
	if err := cmd.Start(); err != nil {
		return fmt.Errorf("starting clean-up process: %w", err)
	}
	c.reaper, c.reaperIn = cmd, in
	return nil
}

// stop stops all servers (immediate shutdown) and removes their
// directories. It is safe to call more than once.
func (c *pgCluster) stop() error {
	c.stopOnce.Do(func() {
		var errs []error
		for _, s := range []*pgServer{c.Single, c.Coord, c.Shards[0], c.Shards[1]} {
			if s == nil {
				continue
			}
			if _, err := os.Stat(filepath.Join(s.Dir, "postmaster.pid")); err != nil {
				continue
			}
			if err := c.run(filepath.Join(c.bin, "pg_ctl"), "stop", "-D", s.Dir, "-m", "immediate", "-w", "-s"); err != nil {
				errs = append(errs, fmt.Errorf("stopping server %s: %w", s.Name, err))
			}
		}
		if err := os.RemoveAll(c.root); err != nil {
			errs = append(errs, fmt.Errorf("removing %s: %w", c.root, err))
		}
		if c.reaperIn != nil {
			c.reaperIn.Close()
			if err := c.reaper.Wait(); err != nil {
				errs = append(errs, fmt.Errorf("clean-up process: %w", err))
			}
		}
		c.stopErr = errors.Join(errs...)
	})
	return c.stopErr
}

// tailFile returns at most the last n bytes of a file, for error messages.
func tailFile(path string, n int) string {
	b, err := os.ReadFile(path)
	if err != nil {
		return ""
	}
	if len(b) > n {
		b = b[len(b)-n:]
	}
	return string(b)
}

// singleURL is the connection URL of the single server.
func (c *pgCluster) singleURL() string { return c.Single.URL }

// coordURL is the connection URL of the coordinator.
func (c *pgCluster) coordURL() string { return c.Coord.URL }

// connect opens a connection to url, closed when the test ends.
func (c *pgCluster) connect(t testing.TB, url string) *pgx.Conn {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("postgres harness: connecting: %v", err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	return conn
}

// explain returns the EXPLAIN (VERBOSE) plan of query on the server at url.
func (c *pgCluster) explain(t testing.TB, url, query string) string {
	t.Helper()
	conn := c.connect(t, url)
	rows, err := conn.Query(context.Background(), "EXPLAIN (VERBOSE) "+query)
	if err != nil {
		t.Fatalf("postgres harness: explain: %v", err)
	}
	lines, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		t.Fatalf("postgres harness: explain: %v", err)
	}
	return strings.Join(lines, "\n")
}

// pgCol is one column of a table loaded by loadPanel. Exactly one of
// Float, Int and Text holds the n values. NaN in Float and true in Null
// load as SQL NULL.
type pgCol struct {
	Name  string // column name: lower-case letters, digits and underscores
	Type  string // SQL type, e.g. "double precision", "integer", "text"
	Float []float64
	Int   []int64
	Text  []string
	Null  []bool // optional: true marks row i NULL
}

// pgIdent matches the table and column names loadPanel accepts, so that
// derived names such as <table>_shard0 stay plain identifiers.
var pgIdent = regexp.MustCompile(`^[a-z_][a-z0-9_]*$`)

// check validates the column for n rows.
func (col pgCol) check(n int) error {
	if !pgIdent.MatchString(col.Name) {
		return fmt.Errorf("column name %q: want lower-case letters, digits and underscores", col.Name)
	}
	set := 0
	for _, l := range []int{len(col.Float), len(col.Int), len(col.Text)} {
		if l > 0 {
			set++
			if l != n {
				return fmt.Errorf("column %s has %d values, want %d", col.Name, l, n)
			}
		}
	}
	if set != 1 && n > 0 {
		return fmt.Errorf("column %s: want exactly one of Float, Int, Text", col.Name)
	}
	if col.Null != nil && len(col.Null) != n {
		return fmt.Errorf("column %s has %d null marks, want %d", col.Name, len(col.Null), n)
	}
	if strings.ContainsAny(col.Type, ";'\"") || strings.TrimSpace(col.Type) == "" {
		return fmt.Errorf("column %s: bad type %q", col.Name, col.Type)
	}
	return nil
}

// value is row i of the column as a pgx argument; nil is NULL.
func (col *pgCol) value(i int) any {
	switch {
	case col.Null != nil && col.Null[i]:
		return nil
	case col.Float != nil:
		if math.IsNaN(col.Float[i]) {
			return nil
		}
		return col.Float[i]
	case col.Int != nil:
		return col.Int[i]
	default:
		return col.Text[i]
	}
}

// pgRowSource feeds the rows listed in idx (all n rows when idx is nil) to
// pgx's COPY.
type pgRowSource struct {
	cols []pgCol
	idx  []int
	n    int
	pos  int
	buf  []any
}

func (r *pgRowSource) row() int {
	if r.idx != nil {
		return r.idx[r.pos]
	}
	return r.pos
}

// Next advances to the next row.
func (r *pgRowSource) Next() bool {
	r.pos++
	if r.idx != nil {
		return r.pos < len(r.idx)
	}
	return r.pos < r.n
}

// Values returns the current row; the slice is reused, which pgx allows as
// it encodes each row before asking for the next.
func (r *pgRowSource) Values() ([]any, error) {
	i := r.row()
	for j := range r.cols {
		r.buf[j] = r.cols[j].value(i)
	}
	return r.buf, nil
}

// Err reports no error: the values are in memory.
func (r *pgRowSource) Err() error { return nil }

// loadPanel creates table with the given columns on the single server
// (a plain table) and on the sharded set, and loads the n rows into both.
//
// On the sharded set, shard k holds the plain table <table>_shardK and the
// coordinator holds table partitioned BY HASH (partBy) with MODULUS 2,
// whose partitions <table>_p0 and <table>_p1 are postgres_fdw foreign
// tables on those shard tables. Rows are routed in Go, with the partition
// of each distinct partBy value asked of the coordinator
// (satisfies_hash_partition), and copied straight into the shards:
// PostgreSQL 15 sends rows COPYed into a foreign partition one INSERT at
// a time. Existing tables of the same names are replaced. All tables are
// analyzed.
func (c *pgCluster) loadPanel(t testing.TB, table, partBy string, cols []pgCol, n int) {
	t.Helper()
	if err := c.load(table, partBy, cols, n); err != nil {
		t.Fatalf("postgres harness: loading %s: %v", table, err)
	}
}

// load does the work of loadPanel.
func (c *pgCluster) load(table, partBy string, cols []pgCol, n int) error {
	if !pgIdent.MatchString(table) {
		return fmt.Errorf("table name %q: want lower-case letters, digits and underscores", table)
	}
	key := -1
	defs := make([]string, len(cols))
	names := make([]string, len(cols))
	for j, col := range cols {
		if err := col.check(n); err != nil {
			return err
		}
		if col.Name == partBy {
			key = j
		}
		names[j] = col.Name
		defs[j] = pgx.Identifier{col.Name}.Sanitize() + " " + col.Type
	}
	if key < 0 {
		return fmt.Errorf("partition column %q is not among the columns", partBy)
	}
	colDefs := strings.Join(defs, ", ")
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Minute)
	defer cancel()

	coord, err := pgx.Connect(ctx, c.Coord.URL)
	if err != nil {
		return fmt.Errorf("connecting to coordinator: %w", err)
	}
	defer coord.Close(ctx)
	ident := pgx.Identifier{table}.Sanitize()
	shardTable := func(k int) string { return fmt.Sprintf("%s_shard%d", table, k) }
	stmts := []string{
		"DROP TABLE IF EXISTS " + ident,
		fmt.Sprintf("CREATE TABLE %s (%s) PARTITION BY HASH (%s)", ident, colDefs, pgx.Identifier{partBy}.Sanitize()),
	}
	for k := range c.Shards {
		stmts = append(stmts, fmt.Sprintf(
			"CREATE FOREIGN TABLE %s PARTITION OF %s FOR VALUES WITH (MODULUS 2, REMAINDER %d) SERVER %s OPTIONS (table_name '%s')",
			pgx.Identifier{fmt.Sprintf("%s_p%d", table, k)}.Sanitize(), ident, k, pgShardServer(k), shardTable(k)))
	}
	for _, q := range stmts {
		if _, err := coord.Exec(ctx, q); err != nil {
			return fmt.Errorf("coordinator: %w", err)
		}
	}

	idx, err := routeRows(ctx, coord, table, cols[key], n)
	if err != nil {
		return err
	}

	type target struct {
		srv   *pgServer
		table string
		idx   []int
	}
	targets := []target{{c.Single, table, nil}}
	for k, s := range c.Shards {
		targets = append(targets, target{s, shardTable(k), idx[k]})
	}
	errs := make([]error, len(targets))
	var wg sync.WaitGroup
	for i, tg := range targets {
		wg.Go(func() {
			want := n
			if tg.idx != nil {
				want = len(tg.idx)
			}
			src := &pgRowSource{cols: cols, idx: tg.idx, n: n, pos: -1, buf: make([]any, len(cols))}
			if err := copyTable(ctx, tg.srv.URL, tg.table, colDefs, names, src, want); err != nil {
				errs[i] = fmt.Errorf("server %s: %w", tg.srv.Name, err)
			}
		})
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return err
	}
	// The coordinator's statistics on the foreign partitions come from
	// sampling the shards' rows through postgres_fdw.
	if _, err := coord.Exec(ctx, "ANALYZE "+ident); err != nil {
		return fmt.Errorf("coordinator: analyze: %w", err)
	}
	return nil
}

// routeRows splits the row numbers by the hash partition (MODULUS 2) of
// the partition column's value, as computed by the coordinator for table.
func routeRows(ctx context.Context, coord *pgx.Conn, table string, key pgCol, n int) ([2][]int, error) {
	var idx [2][]int
	// Distinct values, in first-seen order; slot -1 stands for NULL.
	slot := make([]int, n)
	seen := map[any]int{}
	var vals []any
	for i := range n {
		v := key.value(i)
		if v == nil {
			slot[i] = -1
			continue
		}
		s, ok := seen[v]
		if !ok {
			s = len(vals)
			seen[v] = s
			vals = append(vals, v)
		}
		slot[i] = s
	}
	// Remainder of each distinct value, NULL last.
	var arr any
	switch {
	case key.Float != nil:
		a := make([]float64, len(vals))
		for i, v := range vals {
			a[i] = v.(float64)
		}
		arr = a
	case key.Int != nil:
		a := make([]int64, len(vals))
		for i, v := range vals {
			a[i] = v.(int64)
		}
		arr = a
	default:
		a := make([]string, len(vals))
		for i, v := range vals {
			a[i] = v.(string)
		}
		arr = a
	}
	q := fmt.Sprintf(`SELECT satisfies_hash_partition($1::text::regclass, 2, 0, v), satisfies_hash_partition($1::text::regclass, 2, 1, v)
FROM (SELECT v, i FROM unnest($2::%[1]s[]) WITH ORDINALITY AS u(v, i) UNION ALL SELECT NULL::%[1]s, %[2]d) AS w ORDER BY i`,
		key.Type, len(vals)+1)
	rows, err := coord.Query(ctx, q, pgx.Identifier{table}.Sanitize(), arr)
	if err != nil {
		return idx, fmt.Errorf("coordinator: routing rows: %w", err)
	}
	part := make([]int, 0, len(vals)+1)
	for rows.Next() {
		var r0, r1 bool
		if err := rows.Scan(&r0, &r1); err != nil {
			return idx, fmt.Errorf("coordinator: routing rows: %w", err)
		}
		if r0 == r1 {
			return idx, fmt.Errorf("coordinator: routing rows: value %d fits remainders 0 and 1 alike (%v)", len(part), r0)
		}
		if r0 {
			part = append(part, 0)
		} else {
			part = append(part, 1)
		}
	}
	if err := rows.Err(); err != nil {
		return idx, fmt.Errorf("coordinator: routing rows: %w", err)
	}
	if len(part) != len(vals)+1 {
		return idx, fmt.Errorf("coordinator: routing rows: %d answers for %d values", len(part), len(vals)+1)
	}
	for i, s := range slot {
		if s < 0 {
			s = len(vals)
		}
		idx[part[s]] = append(idx[part[s]], i)
	}
	// Keep both slices non-nil: a nil slice means "all rows" to pgRowSource.
	for k := range idx {
		if idx[k] == nil {
			idx[k] = []int{}
		}
	}
	return idx, nil
}

// copyTable replaces table on the server at url and COPYs the rows of src
// into it in the same transaction, which with wal_level = minimal skips
// writing the rows to the WAL; then it analyzes the table.
func copyTable(ctx context.Context, url, table, colDefs string, names []string, src *pgRowSource, want int) error {
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		return fmt.Errorf("connecting: %w", err)
	}
	defer conn.Close(ctx)
	ident := pgx.Identifier{table}.Sanitize()
	tx, err := conn.Begin(ctx)
	if err != nil {
		return err
	}
	defer tx.Rollback(ctx)
	if _, err := tx.Exec(ctx, "DROP TABLE IF EXISTS "+ident); err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, fmt.Sprintf("CREATE TABLE %s (%s)", ident, colDefs)); err != nil {
		return err
	}
	got, err := tx.CopyFrom(ctx, pgx.Identifier{table}, names, src)
	if err != nil {
		return fmt.Errorf("copy into %s: %w", table, err)
	}
	if got != int64(want) {
		return fmt.Errorf("copy into %s: %d rows, want %d", table, got, want)
	}
	if err := tx.Commit(ctx); err != nil {
		return err
	}
	if _, err := conn.Exec(ctx, "ANALYZE "+ident); err != nil {
		return fmt.Errorf("analyze %s: %w", table, err)
	}
	return nil
}
