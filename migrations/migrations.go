// Package migrations holds the state store's schema as SQL migrations, one
// variant for SQLite and one for PostgreSQL, embedded in the binary and
// applied with goose's Provider API (no package globals).
//
// Migrations are numbered 00001_name.sql, 00002_name.sql, …; both variants
// always have the same versions. A store whose schema is newer than the
// newest migration this binary knows is refused (ErrStoreNewer): an older
// binary must not write to a schema it does not understand.
package migrations

import (
	"context"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"path"
	"strconv"
	"strings"

	"github.com/pressly/goose/v3"
	"github.com/pressly/goose/v3/lock"
)

//go:embed sqlite/*.sql postgres/*.sql
var files embed.FS

// Dialect names a store's SQL variant.
type Dialect string

const (
	SQLite   Dialect = "sqlite"
	Postgres Dialect = "postgres"
)

// VersionTable is the table goose records applied versions in.
const VersionTable = "plumb_schema_version"

// FS returns the migrations of dialect d.
func FS(d Dialect) fs.FS {
	switch d {
	case SQLite, Postgres:
	default:
		panic("migrations: unknown dialect " + string(d))
	}
	sub, err := fs.Sub(files, string(d))
	if err != nil {
		panic(err)
	}
	return sub
}

// Latest returns the newest schema version this binary carries.
func Latest(d Dialect) int64 {
	entries, err := fs.ReadDir(FS(d), ".")
	if err != nil {
		panic(err)
	}
	var latest int64
	for _, e := range entries {
		v, ok := versionOf(e.Name())
		if ok && v > latest {
			latest = v
		}
	}
	return latest
}

func versionOf(name string) (int64, bool) {
	if path.Ext(name) != ".sql" {
		return 0, false
	}
	num, _, ok := strings.Cut(name, "_")
	if !ok {
		return 0, false
	}
	v, err := strconv.ParseInt(num, 10, 64)
	return v, err == nil && v > 0
}

// ErrStoreNewer is returned when the store's schema is newer than this
// binary's migrations.
type ErrStoreNewer struct {
	Store, Binary int64
}

func (e *ErrStoreNewer) Error() string {
	return fmt.Sprintf("the state store has schema version %d but this plumb knows versions up to %d: "+
		"it was migrated by a newer plumb; run that version (or newer) against it, or point store: at another database", e.Store, e.Binary)
}

// NewProvider returns a goose provider for the store db. On PostgreSQL,
// concurrent migrations are serialized with a table lock (which works
// behind a transaction-pooling PgBouncer, unlike a session advisory lock);
// SQLite has no migration lock, so migrate from one process at a time.
func NewProvider(d Dialect, db *sql.DB, logger *slog.Logger) (*goose.Provider, error) {
	var (
		gd   goose.Dialect
		opts = []goose.ProviderOption{goose.WithTableName(VersionTable), goose.WithDisableGlobalRegistry(true)}
	)
	switch d {
	case SQLite:
		gd = goose.DialectSQLite3
	case Postgres:
		gd = goose.DialectPostgres
		locker, err := lock.NewPostgresTableLocker(lock.WithTableName("plumb_schema_lock"))
		if err != nil {
			return nil, fmt.Errorf("migrations: %w", err)
		}
		opts = append(opts, goose.WithLocker(locker))
	default:
		panic("migrations: unknown dialect " + string(d))
	}
	if logger != nil {
		opts = append(opts, goose.WithSlog(logger), goose.WithVerbose(true))
	}
	p, err := goose.NewProvider(gd, db, FS(d), opts...)
	if err != nil {
		return nil, fmt.Errorf("migrations: %w", err)
	}
	return p, nil
}

// Version returns the store's current schema version (0 for an empty
// store) and the newest this binary knows.
func Version(ctx context.Context, d Dialect, db *sql.DB) (current, latest int64, err error) {
	p, err := NewProvider(d, db, nil)
	if err != nil {
		return 0, 0, err
	}
	current, err = p.GetDBVersion(ctx)
	if err != nil {
		return 0, 0, fmt.Errorf("migrations: reading the store's schema version: %w", err)
	}
	return current, Latest(d), nil
}

// Up brings the store's schema up to date and returns the versions it
// applied (none when it was current). A store newer than the binary is
// refused with *ErrStoreNewer and left untouched.
func Up(ctx context.Context, d Dialect, db *sql.DB, logger *slog.Logger) ([]int64, error) {
	p, err := NewProvider(d, db, logger)
	if err != nil {
		return nil, err
	}
	current, err := p.GetDBVersion(ctx)
	if err != nil {
		return nil, fmt.Errorf("migrations: reading the store's schema version: %w", err)
	}
	if latest := Latest(d); current > latest {
		return nil, &ErrStoreNewer{Store: current, Binary: latest}
	}
	res, err := p.Up(ctx)
	var applied []int64
	for _, r := range res {
		if r.Error == nil {
			applied = append(applied, r.Source.Version)
		}
	}
	if err != nil {
		var pe *goose.PartialError
		if errors.As(err, &pe) {
			for _, r := range pe.Applied {
				applied = append(applied, r.Source.Version)
			}
			return applied, fmt.Errorf("migrations: version %d failed: %w", pe.Failed.Source.Version, pe.Err)
		}
		return applied, fmt.Errorf("migrations: %w", err)
	}
	return applied, nil
}

// Check returns nil when the store's schema is exactly the binary's
// latest, *ErrStoreNewer when it is newer, and an error telling to run
// `plumb migrate` when it is older.
func Check(ctx context.Context, d Dialect, db *sql.DB) error {
	current, latest, err := Version(ctx, d, db)
	if err != nil {
		return err
	}
	switch {
	case current > latest:
		return &ErrStoreNewer{Store: current, Binary: latest}
	case current < latest:
		return fmt.Errorf("the state store has schema version %d, this plumb needs %d: run plumb migrate", current, latest)
	}
	return nil
}

// filesOf lists the migration file names of d, sorted.
func filesOf(d Dialect) ([]string, error) {
	entries, err := fs.ReadDir(FS(d), ".")
	if err != nil {
		return nil, err
	}
	var names []string
	for _, e := range entries {
		if _, ok := versionOf(e.Name()); ok {
			names = append(names, e.Name())
		}
	}
	return names, nil
}
