package postgres

import (
	"context"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
)

// Type OIDs plumb reads (pg_type.dat).
const (
	oidBool        = 16
	oidInt8        = 20
	oidInt2        = 21
	oidInt4        = 23
	oidFloat4      = 700
	oidFloat8      = 701
	oidDate        = 1082
	oidTimestamp   = 1114
	oidTimestamptz = 1184
	oidNumeric     = 1700
)

func kindOf(oid uint32) connectors.Kind {
	switch oid {
	case oidInt2, oidInt4, oidInt8, oidFloat4, oidFloat8, oidNumeric:
		return connectors.KindNumeric
	case oidBool:
		return connectors.KindBool
	case oidDate, oidTimestamp, oidTimestamptz:
		return connectors.KindTime
	}
	return connectors.KindOther
}

// target is what a request reads, described.
type target struct {
	source  string // for messages
	table   *connectors.Name
	oid     uint32
	relkind string
	query   string // cleaned --query, when not a table
	cols    []connectors.Column
	base    map[string]uint32 // column → base type OID (domains resolved)
}

// Describe lists the columns of the request's table or query.
func (s *Source) Describe(ctx context.Context, req connectors.Request) ([]connectors.Column, error) {
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return nil, s.wrap(err, "cannot connect")
	}
	defer conn.Release()
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly})
	if err != nil {
		return nil, s.wrap(err, "begin")
	}
	defer tx.Rollback(context.Background())
	t, err := s.describe(ctx, tx, req)
	if err != nil {
		return nil, err
	}
	return t.cols, nil
}

func (s *Source) describe(ctx context.Context, tx pgx.Tx, req connectors.Request) (*target, error) {
	switch {
	case req.Table != "" && req.Query != "":
		return nil, fmt.Errorf("give a table or a query, not both: %w", connectors.ErrUnsupported)
	case req.Table != "":
		return s.describeTable(ctx, tx, req.Table)
	case req.Query != "":
		return s.describeQuery(ctx, tx, req.Query)
	}
	return nil, fmt.Errorf("no table or query given: %w", connectors.ErrUnsupported)
}

func (s *Source) describeTable(ctx context.Context, tx pgx.Tx, table string) (*target, error) {
	name, err := connectors.ParseName(table, true)
	if err != nil {
		return nil, err
	}
	t := &target{table: &name, base: map[string]uint32{}}
	var oid *uint32
	var schema, rel, kind string
	err = tx.QueryRow(ctx, `SELECT c.oid, n.nspname, c.relname, c.relkind::text
		FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
		WHERE c.oid = to_regclass($1)`, name.Quoted()).Scan(&oid, &schema, &rel, &kind)
	if err == pgx.ErrNoRows || (err == nil && oid == nil) {
		avail, lerr := s.tables(ctx, tx, name.Schema)
		if lerr != nil {
			return nil, lerr
		}
		where := "the search path"
		if name.Schema != "" {
			where = "schema " + connectors.QuoteIdent(name.Schema)
		}
		return nil, fmt.Errorf("postgres %s has no table or view %s in %s (tables: %s): %w",
			s.name, name.Quoted(), where, connectors.List(avail, 40), connectors.ErrNotFound)
	}
	if err != nil {
		return nil, s.wrap(err, "table "+name.Quoted())
	}
	switch kind {
	case "r", "v", "m", "p", "f":
	default:
		return nil, fmt.Errorf("postgres %s: %s is not a table or view (relkind %s): %w", s.name, name.Quoted(), kind, connectors.ErrUnsupported)
	}
	qualified := connectors.Name{Schema: schema, Table: rel}
	t.table = &qualified
	t.oid = *oid
	t.relkind = kind
	t.source = "table " + qualified.Quoted()
	// Text: the base type's category is string (text, varchar, char(n),
	// name, citext) or enum.
	rows, err := tx.Query(ctx, `SELECT a.attname, format_type(a.atttypid, a.atttypmod),
			CASE WHEN t.typtype = 'd' THEN t.typbasetype ELSE a.atttypid END,
			coalesce((SELECT b.typcategory IN ('S', 'E') FROM pg_type b
				WHERE b.oid = CASE WHEN t.typtype = 'd' THEN t.typbasetype ELSE a.atttypid END), false)
		FROM pg_attribute a JOIN pg_type t ON t.oid = a.atttypid
		WHERE a.attrelid = $1 AND a.attnum > 0 AND NOT a.attisdropped
		ORDER BY a.attnum`, t.oid)
	if err != nil {
		return nil, s.wrap(err, t.source)
	}
	for rows.Next() {
		var c connectors.Column
		var base uint32
		var text bool
		if err := rows.Scan(&c.Name, &c.Type, &base, &text); err != nil {
			return nil, s.wrap(err, t.source)
		}
		c.Kind = kindOf(base)
		if text {
			c.Kind = connectors.KindText
		}
		t.base[c.Name] = base
		t.cols = append(t.cols, c)
	}
	if err := rows.Err(); err != nil {
		return nil, s.wrap(err, t.source)
	}
	return t, nil
}

func (s *Source) tables(ctx context.Context, tx pgx.Tx, schema string) ([]string, error) {
	rows, err := tx.Query(ctx, `SELECT CASE WHEN pg_table_is_visible(c.oid) THEN quote_ident(c.relname)
			ELSE quote_ident(n.nspname) || '.' || quote_ident(c.relname) END
		FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
		WHERE c.relkind IN ('r', 'v', 'm', 'p', 'f') AND n.nspname NOT IN ('pg_catalog', 'information_schema')
			AND n.nspname NOT LIKE 'pg\_toast%' AND ($1 = '' OR n.nspname = $1)
		ORDER BY 1 LIMIT 200`, schema)
	if err != nil {
		return nil, s.wrap(err, "listing tables")
	}
	names, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return nil, s.wrap(err, "listing tables")
	}
	return names, nil
}

// describeQuery prepares the query as given, inside the read-only
// transaction, and takes its result columns. A statement with no result
// columns (DROP, DELETE without RETURNING…) is executed as given, so that
// the database itself refuses it in the read-only transaction.
func (s *Source) describeQuery(ctx context.Context, tx pgx.Tx, query string) (*target, error) {
	q, err := connectors.CleanQuery(query, connectors.Postgres)
	if err != nil {
		return nil, err
	}
	t := &target{source: "query", query: q, base: map[string]uint32{}}
	sd, err := tx.Conn().PgConn().Prepare(ctx, "", q, nil)
	if err != nil {
		return nil, s.wrap(err, "query")
	}
	writes := len(sd.Fields) == 0
	if !writes {
		// A statement that modifies tables (INSERT … RETURNING, a
		// data-modifying WITH) plans a ModifyTable node; planning runs
		// nothing.
		var plan string
		if err := tx.QueryRow(ctx, "EXPLAIN (FORMAT JSON, COSTS OFF) "+q).Scan(&plan); err != nil {
			return nil, s.wrap(err, "query")
		}
		writes = strings.Contains(plan, `"Node Type": "ModifyTable"`)
	}
	if writes {
		// Run it as given: the read-only transaction makes PostgreSQL
		// refuse it when the executor starts, before any row is touched.
		if _, err := tx.Exec(ctx, q); err != nil {
			return nil, s.wrap(err, "query")
		}
		return nil, fmt.Errorf("postgres %s: query returns no rows to read; give a SELECT: %w", s.name, connectors.ErrUnsupported)
	}
	oids := make([]uint32, len(sd.Fields))
	for i, f := range sd.Fields {
		oids[i] = f.DataTypeOID
	}
	var names []string
	var text []bool
	if err := tx.QueryRow(ctx, `SELECT array_agg(format_type(o, NULL) ORDER BY i),
			array_agg(coalesce((SELECT b.typcategory IN ('S', 'E') FROM pg_type t JOIN pg_type b
				ON b.oid = CASE WHEN t.typtype = 'd' THEN t.typbasetype ELSE t.oid END WHERE t.oid = o), false) ORDER BY i)
		FROM unnest($1::oid[]) WITH ORDINALITY AS u(o, i)`,
		oids).Scan(&names, &text); err != nil {
		return nil, s.wrap(err, "query")
	}
	for i, f := range sd.Fields {
		c := connectors.Column{Name: f.Name, Type: names[i], Kind: kindOf(f.DataTypeOID)}
		if text[i] {
			c.Kind = connectors.KindText
		}
		t.base[c.Name] = f.DataTypeOID
		t.cols = append(t.cols, c)
	}
	return t, nil
}
