// Package sqlstore keeps the agent's state in SQLite (the default, one
// file) or PostgreSQL, with the schema of plumb/migrations.
//
// SQLite is opened in WAL mode with synchronous=FULL, foreign keys on and
// write transactions taken IMMEDIATE, so a process killed at any point
// leaves the last committed run and nothing of the one in flight. One agent
// per store: on SQLite a file lock beside the database (PATH.lock), on
// PostgreSQL a session advisory lock; both are released by the operating
// system or the server when the holder dies.
package sqlstore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"strings"
	"sync"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/stdlib"
	_ "modernc.org/sqlite" // the one SQLite driver of the process

	"plumb/agent"
	"plumb/connectors"
	"plumb/migrations"
)

// Store implements agent.Store.
type Store struct {
	db      *sql.DB
	dialect migrations.Dialect
	path    string          // SQLite file
	pgcfg   *pgx.ConnConfig // PostgreSQL: how to connect, for the lock's own connection
	url     string
	display string // the URL without a password, for messages

	lockMu    sync.Mutex
	lease     *lease   // the lock taken by Lock, if any
	dbFile    *os.File // SQLite: the database file, flocked by Lock; closed after db
	lockLog   *slog.Logger
	lockEvery time.Duration
}

var _ agent.Store = (*Store)(nil)

// Options control Open.
type Options struct {
	// Migrate applies pending migrations; without it a store that is
	// not up to date is refused with a hint to run plumb migrate.
	Migrate bool
	Logger  *slog.Logger // migration progress; nil for none

	// LockLogger hears of the lock's losses and recoveries; nil for none.
	LockLogger *slog.Logger
	// LockCheckEvery is how often a held lock is verified and its
	// heartbeat written (on PostgreSQL a dropped connection is noticed at
	// once besides); 0 means 10 s. Negative turns the keeper off: tests
	// call CheckLock themselves.
	LockCheckEvery time.Duration
}

// OpenDB opens the database named by a store URL (sqlite:PATH or
// postgres://…) without touching its schema.
func OpenDB(url string) (*sql.DB, migrations.Dialect, string, error) {
	db, d, path, _, err := openDB(url)
	return db, d, path, err
}

func openDB(url string) (*sql.DB, migrations.Dialect, string, *pgx.ConnConfig, error) {
	switch {
	case strings.HasPrefix(url, "sqlite:"):
		path := strings.TrimPrefix(url, "sqlite:")
		path = strings.TrimPrefix(path, "//")
		if path == "" || strings.ContainsAny(path, "?#") || path == ":memory:" {
			return nil, "", "", nil, fmt.Errorf("state store %q: want sqlite:PATH to a file (no ? or #)", url)
		}
		dsn := "file:" + path + "?mode=rwc&_txlock=immediate" +
			"&_pragma=busy_timeout(10000)&_pragma=journal_mode(WAL)&_pragma=synchronous(FULL)&_pragma=foreign_keys(1)"
		db, err := sql.Open("sqlite", dsn)
		if err != nil {
			return nil, "", "", nil, fmt.Errorf("state store %s: %w", path, err)
		}
		return db, migrations.SQLite, path, nil, nil
	case strings.HasPrefix(url, "postgres://"), strings.HasPrefix(url, "postgresql://"):
		cfg, err := pgx.ParseConfig(url)
		if err != nil {
			return nil, "", "", nil, fmt.Errorf("state store %s: %w", connectors.Redact(url), scrub(err, url))
		}
		if _, ok := cfg.RuntimeParams["application_name"]; !ok {
			cfg.RuntimeParams["application_name"] = "plumb-agent"
		}
		return stdlib.OpenDB(*cfg), migrations.Postgres, "", cfg, nil
	}
	return nil, "", "", nil, fmt.Errorf("state store %q: want sqlite:PATH or postgres://user@host/db", connectors.Redact(url))
}

// Open opens the store and checks (or, with opt.Migrate, brings up to
// date) its schema. A store newer than this binary is refused.
func Open(ctx context.Context, url string, opt Options) (*Store, error) {
	db, d, path, pgcfg, err := openDB(url)
	if err != nil {
		return nil, err
	}
	s := &Store{db: db, dialect: d, path: path, pgcfg: pgcfg, url: url, display: connectors.Redact(url),
		lockLog: opt.LockLogger, lockEvery: opt.LockCheckEvery}
	if s.lockLog == nil {
		s.lockLog = discard
	}
	if err := db.PingContext(ctx); err != nil {
		db.Close()
		return nil, fmt.Errorf("state store %s: %w", s.display, scrub(err, url))
	}
	if opt.Migrate {
		_, err = migrations.Up(ctx, d, db, opt.Logger)
	} else {
		err = migrations.Check(ctx, d, db)
	}
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("state store %s: %w", s.display, err)
	}
	return s, nil
}

// DB returns the underlying database, for tests and tools.
func (s *Store) DB() *sql.DB { return s.db }

// Dialect returns the store's SQL variant.
func (s *Store) Dialect() migrations.Dialect { return s.dialect }

// Close closes the database, releasing the lock if it is still held.
func (s *Store) Close() error {
	s.lockMu.Lock()
	l := s.lease
	s.lockMu.Unlock()
	var err error
	if l != nil {
		err = s.release(l)
	}
	err = errors.Join(err, s.db.Close())
	if s.dbFile != nil {
		// Only now: closing it drops this process's fcntl locks on the
		// file, which SQLite's connections held until just above.
		err = errors.Join(err, s.dbFile.Close())
		s.dbFile = nil
	}
	return err
}

func (s *Store) scrub(err error) error { return scrub(err, s.url) }

// scrub removes a URL's password from an error message, keeping the
// error's identity for errors.Is.
func scrub(err error, url string) error {
	_, rest, ok := strings.Cut(url, "://")
	if !ok {
		return err
	}
	auth, _, ok := strings.Cut(rest, "@")
	if !ok {
		return err
	}
	_, pass, ok := strings.Cut(auth, ":")
	if !ok || pass == "" || !strings.Contains(err.Error(), pass) {
		return err
	}
	return &scrubbed{msg: strings.ReplaceAll(err.Error(), pass, "xxxxx"), err: err}
}

type scrubbed struct {
	msg string
	err error
}

func (e *scrubbed) Error() string { return e.msg }
func (e *scrubbed) Unwrap() error { return errors.Unwrap(e.err) }
