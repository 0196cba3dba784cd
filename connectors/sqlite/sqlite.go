// Package sqlite reads SQLite databases for plumb through modernc.org/sqlite
// (pure Go). Databases are opened read-only (mode=ro with query_only), a
// database locked by a writer is waited on for the busy timeout, and tables
// are named by quoted identifiers, never spliced into SQL.
//
// URL form: sqlite:PATH (sqlite:///abs/path also works).
package sqlite

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"strings"
	"time"

	msqlite "modernc.org/sqlite"

	"plumb/connectors"
)

func init() { connectors.Register("sqlite", Open) }

// DefaultBusyTimeout is how long a scan waits for a writer's lock.
const DefaultBusyTimeout = 5 * time.Second

// Source is an open SQLite database.
type Source struct {
	db   *sql.DB
	path string
	busy time.Duration
	opts connectors.Options
}

var (
	_ connectors.Source    = (*Source)(nil)
	_ connectors.Estimator = (*Source)(nil)
)

// Open opens the database named by url (sqlite:PATH) read-only. The file
// must exist. opts.StatementTimeout, when set, is the busy timeout and
// bounds each statement.
func Open(ctx context.Context, url string, opts connectors.Options) (connectors.Source, error) {
	path, ok := strings.CutPrefix(url, "sqlite:")
	if !ok {
		return nil, fmt.Errorf("database %q: want sqlite:PATH", url)
	}
	if strings.HasPrefix(path, "//") {
		path = path[2:]
	}
	if path == "" {
		return nil, fmt.Errorf("database %q: no path after sqlite:", url)
	}
	st, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("sqlite database %q: %w", path, err)
	}
	if st.IsDir() {
		return nil, fmt.Errorf("sqlite database %q is a directory, not a database file", path)
	}
	busy := DefaultBusyTimeout
	if opts.StatementTimeout > 0 {
		busy = opts.StatementTimeout
	}
	db, err := sql.Open("sqlite", DSN(path, busy))
	if err != nil {
		return nil, fmt.Errorf("sqlite database %q: %w", path, err)
	}
	db.SetMaxOpenConns(4)
	s := &Source{db: db, path: path, busy: busy, opts: opts}
	if err := db.PingContext(ctx); err != nil {
		db.Close()
		return nil, s.wrap(err)
	}
	// A file that is not a database only fails on first read.
	var n int
	if err := db.QueryRowContext(ctx, "SELECT count(*) FROM sqlite_schema").Scan(&n); err != nil {
		db.Close()
		return nil, s.wrap(err)
	}
	return s, nil
}

// DSN returns the read-only data source name for a database file: a file:
// URI with mode=ro, query_only and a busy timeout.
func DSN(path string, busy time.Duration) string {
	r := strings.NewReplacer("%", "%25", "?", "%3f", "#", "%23")
	return fmt.Sprintf("file:%s?mode=ro&_pragma=query_only(1)&_pragma=busy_timeout(%d)",
		r.Replace(path), busy.Milliseconds())
}

// Close closes the database.
func (s *Source) Close() error { return s.db.Close() }

// wrap gives SQLite's errors a sentence for the operator.
func (s *Source) wrap(err error) error {
	var se *msqlite.Error
	if errors.As(err, &se) {
		switch se.Code() & 0xff {
		case 5, 6: // SQLITE_BUSY, SQLITE_LOCKED
			return fmt.Errorf("sqlite database %q is locked by a writer; gave up after the busy timeout of %s: %w", s.path, s.busy, err)
		case 8: // SQLITE_READONLY
			return fmt.Errorf("sqlite database %q is opened read-only and refused a write: %w", s.path, err)
		case 26: // SQLITE_NOTADB
			return fmt.Errorf("sqlite database %q: not a database file: %w", s.path, err)
		case 14: // SQLITE_CANTOPEN
			return fmt.Errorf("sqlite database %q cannot be opened: %w", s.path, err)
		}
	}
	if errors.Is(err, context.DeadlineExceeded) {
		return fmt.Errorf("sqlite database %q: statement timed out: %w", s.path, err)
	}
	return fmt.Errorf("sqlite database %q: %w", s.path, err)
}

func (s *Source) ctx(ctx context.Context) (context.Context, context.CancelFunc) {
	if s.opts.StatementTimeout > 0 {
		return context.WithTimeout(ctx, s.opts.StatementTimeout)
	}
	return context.WithCancel(ctx)
}
