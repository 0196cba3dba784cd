// Package postgres reads PostgreSQL tables and queries for plumb with
// pgx/v5. Every statement runs in a READ ONLY transaction on a session with
// default_transaction_read_only, a statement_timeout and
// application_name=plumb. Rows stream in the binary protocol and are decoded
// straight into stream blocks; a table can be split into TID ranges scanned
// on several connections from one exported snapshot (Options.Parallel); or
// the cross-products can be computed inside PostgreSQL (Options.Pushdown):
// one aggregate statement per table or per leaf partition, foreign
// partitions included, so that with postgres_fdw each shard computes its
// own part (pushdown.go).
//
// The password comes from the URL, PGPASSWORD or a pass file (pgx reads
// all three) and never appears in an error.
package postgres

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"

	"plumb/connectors"
)

func init() { connectors.Register("postgres", Open) }

// DefaultStatementTimeout bounds each statement when Options does not.
const DefaultStatementTimeout = time.Hour

// Source is an open PostgreSQL database (a small pool of connections).
type Source struct {
	pool     *pgxpool.Pool
	name     string // the URL with the password masked
	password string
	opts     connectors.Options
	timeout  time.Duration
	version  int // server_version_num
	mode     readMode
	push     pushStrategy
}

type readMode int

const (
	readCopy readMode = iota // COPY … TO STDOUT (FORMAT binary)
	readRows                 // binary result rows, RawValues
)

var (
	_ connectors.Source    = (*Source)(nil)
	_ connectors.Estimator = (*Source)(nil)
)

// Open connects to the database named by url (postgres://… or
// postgresql://…; key=value strings work too).
func Open(ctx context.Context, url string, opts connectors.Options) (connectors.Source, error) {
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		return nil, fmt.Errorf("postgres %s: %s", connectors.Redact(url), scrubText(err.Error(), ""))
	}
	s, err := OpenConfig(ctx, cfg, connectors.Redact(url), opts)
	if err != nil {
		return nil, err
	}
	return s, nil
}

// OpenConfig connects with a parsed pool configuration (to set a dialer or
// TLS); name is how messages name the database and must hold no password.
func OpenConfig(ctx context.Context, cfg *pgxpool.Config, name string, opts connectors.Options) (*Source, error) {
	// Binary result rows measured a little faster than COPY binary here
	// (BenchmarkScan1M), so they are the default.
	s := &Source{name: name, password: cfg.ConnConfig.Password, opts: opts, timeout: opts.StatementTimeout, mode: readRows}
	if s.timeout <= 0 {
		s.timeout = DefaultStatementTimeout
	}
	app := opts.AppName
	if app == "" {
		app = "plumb"
	}
	rp := cfg.ConnConfig.RuntimeParams
	rp["application_name"] = app
	rp["statement_timeout"] = strconv.FormatInt(s.timeout.Milliseconds(), 10)
	rp["default_transaction_read_only"] = "on"
	// The filter checks assume standard conforming strings.
	rp["standard_conforming_strings"] = "on"
	rp["DateStyle"] = "ISO"
	cfg.MaxConns = int32(max(opts.Parallel, 1) + 1)
	if opts.Pushdown {
		// Partitions are aggregated several at once.
		cfg.MaxConns = int32(max(opts.Parallel, DefaultPushParallel) + 1)
	}
	cfg.MinConns = 0
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, s.wrap(err, "cannot connect")
	}
	s.pool = pool
	conn, err := pool.Acquire(ctx)
	if err != nil {
		pool.Close()
		return nil, s.wrap(err, "cannot connect")
	}
	defer conn.Release()
	v := conn.Conn().PgConn().ParameterStatus("server_version")
	s.version = parseVersion(v)
	return s, nil
}

// parseVersion turns "15.18 (Debian …)" into 150018 (server_version_num's
// form).
func parseVersion(v string) int {
	f := strings.FieldsFunc(v, func(r rune) bool { return r != '.' && (r < '0' || r > '9') })
	if len(f) == 0 {
		return 0
	}
	parts := strings.Split(f[0], ".")
	major, _ := strconv.Atoi(parts[0])
	minor := 0
	if len(parts) > 1 {
		minor, _ = strconv.Atoi(parts[1])
	}
	if major >= 10 {
		return major*10000 + minor
	}
	patch := 0
	if len(parts) > 2 {
		patch, _ = strconv.Atoi(parts[2])
	}
	return major*10000 + minor*100 + patch
}

// Close closes the connections.
func (s *Source) Close() error {
	if s.pool != nil {
		s.pool.Close()
	}
	return nil
}

// scrubbed is an error whose text has the password masked; errors.Is and
// errors.As still see the cause.
type scrubbed struct {
	msg   string
	cause error
}

func (e *scrubbed) Error() string { return e.msg }
func (e *scrubbed) Unwrap() error { return e.cause }

func scrubText(msg, password string) string {
	if password != "" {
		msg = strings.ReplaceAll(msg, password, "xxxxx")
	}
	return connectors.Redact(msg)
}

// wrap names the database, explains the common failures in a sentence and
// masks the password.
func (s *Source) wrap(err error, what string) error {
	if err == nil {
		return nil
	}
	hint := ""
	var pe *pgconn.PgError
	var ne net.Error
	switch {
	case errors.As(err, &pe):
		switch pe.Code {
		case "28P01", "28000":
			hint = "wrong user or password (from the URL, PGPASSWORD or the pass file)"
		case "3D000":
			hint = "no such database"
		case "42501":
			hint = "permission denied; grant SELECT on the table to this user"
		case "57014":
			hint = fmt.Sprintf("the statement was cancelled; statement_timeout is %s", s.timeout)
		case "25006":
			hint = "refused: plumb reads in a READ ONLY transaction and never writes"
		case "57P01", "57P02", "57P03":
			hint = "the server shut down during the scan; no result was kept"
		case "42P01":
			hint = "no such table"
		case "42703":
			hint = "no such column"
		}
	case what == "cannot connect":
		hint = "the server cannot be reached (is it running, and are host and port right?)"
	case errors.Is(err, context.DeadlineExceeded), errors.Is(err, context.Canceled):
		hint = "cancelled before the scan finished; no result was kept"
	case errors.Is(err, io.ErrUnexpectedEOF), errors.Is(err, io.EOF), errors.As(err, &ne), strings.Contains(err.Error(), "conn closed"):
		hint = "lost the connection to the server; no result was kept"
	}
	msg := "postgres " + s.name + ": " + what
	if hint != "" {
		msg += ": " + hint
	}
	msg += ": " + err.Error()
	return &scrubbed{msg: scrubText(msg, s.password), cause: err}
}
