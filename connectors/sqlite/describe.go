package sqlite

import (
	"context"
	"database/sql"
	"fmt"
	"strings"

	"plumb/connectors"
)

// target is what a request reads, described.
type target struct {
	source string // for messages
	from   string // SQL after FROM: a quoted table or a parenthesized query
	cols   []connectors.Column
	rowid  string // a name that reads the rowid, "" when there is none (views, WITHOUT ROWID, queries)
	table  bool
}

// Describe lists the columns of the request's table or query with their
// declared types and plumb's reading of them.
func (s *Source) Describe(ctx context.Context, req connectors.Request) ([]connectors.Column, error) {
	ctx, cancel := s.ctx(ctx)
	defer cancel()
	t, err := s.describe(ctx, req)
	if err != nil {
		return nil, err
	}
	return t.cols, nil
}

func (s *Source) describe(ctx context.Context, req connectors.Request) (*target, error) {
	switch {
	case req.Table != "" && req.Query != "":
		return nil, fmt.Errorf("give a table or a query, not both: %w", connectors.ErrUnsupported)
	case req.Table != "":
		return s.describeTable(ctx, req.Table)
	case req.Query != "":
		return s.describeQuery(ctx, req.Query)
	}
	return nil, fmt.Errorf("no table or query given: %w", connectors.ErrUnsupported)
}

func (s *Source) describeTable(ctx context.Context, table string) (*target, error) {
	name, err := connectors.ParseName(table, false)
	if err != nil {
		return nil, err
	}
	if name.Schema == "" {
		name.Schema = "main"
	}
	if err := s.checkSchema(ctx, name.Schema); err != nil {
		return nil, err
	}
	var kind, real string
	err = s.db.QueryRowContext(ctx,
		"SELECT type, name FROM "+connectors.QuoteIdent(name.Schema)+".sqlite_schema WHERE type IN ('table', 'view') AND name = ? COLLATE NOCASE",
		name.Table).Scan(&kind, &real)
	if err == sql.ErrNoRows {
		tables, lerr := s.tables(ctx, name.Schema)
		if lerr != nil {
			return nil, lerr
		}
		return nil, fmt.Errorf("sqlite database %q has no table or view %s (tables: %s): %w",
			s.path, name.Quoted(), connectors.List(tables, 40), connectors.ErrNotFound)
	}
	if err != nil {
		return nil, s.wrap(err)
	}
	name.Table = real
	t := &target{source: "table " + name.Quoted(), from: name.Quoted(), table: true}
	rows, err := s.db.QueryContext(ctx, "SELECT name, type FROM pragma_table_info(?, ?) ORDER BY cid", name.Table, name.Schema)
	if err != nil {
		return nil, s.wrap(err)
	}
	defer rows.Close()
	for rows.Next() {
		var c connectors.Column
		if err := rows.Scan(&c.Name, &c.Type); err != nil {
			return nil, s.wrap(err)
		}
		t.cols = append(t.cols, c)
	}
	if err := rows.Err(); err != nil {
		return nil, s.wrap(err)
	}
	rows.Close()
	for i := range t.cols {
		c := &t.cols[i]
		k, known := kindOf(c.Type)
		if !known {
			k, err = s.probe(ctx, t.from, c.Name)
			if err != nil {
				return nil, err
			}
		}
		c.Kind = k
		if c.Type == "" {
			c.Type = "(no declared type)"
		}
	}
	if kind == "table" {
		t.rowid = rowidName(t.cols)
		if t.rowid != "" {
			// WITHOUT ROWID tables have none.
			r, err := s.db.QueryContext(ctx, "SELECT "+t.rowid+" FROM "+t.from+" LIMIT 0")
			if err != nil {
				t.rowid = ""
			} else {
				r.Close()
			}
		}
	}
	return t, nil
}

func (s *Source) checkSchema(ctx context.Context, schema string) error {
	rows, err := s.db.QueryContext(ctx, "SELECT name FROM pragma_database_list")
	if err != nil {
		return s.wrap(err)
	}
	defer rows.Close()
	var names []string
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			return s.wrap(err)
		}
		if strings.EqualFold(n, schema) {
			return nil
		}
		names = append(names, n)
	}
	if err := rows.Err(); err != nil {
		return s.wrap(err)
	}
	return fmt.Errorf("sqlite database %q has no schema %q (schemas: %s): %w",
		s.path, schema, connectors.List(names, 20), connectors.ErrNotFound)
}

func (s *Source) tables(ctx context.Context, schema string) ([]string, error) {
	rows, err := s.db.QueryContext(ctx, "SELECT name FROM "+connectors.QuoteIdent(schema)+
		".sqlite_schema WHERE type IN ('table', 'view') AND name NOT LIKE 'sqlite\\_%' ESCAPE '\\' ORDER BY name")
	if err != nil {
		return nil, s.wrap(err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			return nil, s.wrap(err)
		}
		out = append(out, n)
	}
	return out, s.wrapNil(rows.Err())
}

func (s *Source) wrapNil(err error) error {
	if err == nil {
		return nil
	}
	return s.wrap(err)
}

// probe classifies a column without a telling declared type by the storage
// class of its first non-NULL value; an all-NULL column counts as numeric
// (it will be reported as all NULL).
func (s *Source) probe(ctx context.Context, from, col string) (connectors.Kind, error) {
	q := connectors.QuoteIdent(col)
	var class string
	err := s.db.QueryRowContext(ctx, "SELECT typeof("+q+") FROM "+from+" WHERE "+q+" IS NOT NULL LIMIT 1").Scan(&class)
	if err == sql.ErrNoRows {
		return connectors.KindNumeric, nil
	}
	if err != nil {
		return 0, s.wrap(err)
	}
	return classKind(class), nil
}

func classKind(class string) connectors.Kind {
	switch class {
	case "integer", "real":
		return connectors.KindNumeric
	case "text":
		return connectors.KindText
	}
	return connectors.KindOther
}

// kindOf maps a declared type to plumb's kinds by SQLite's affinity rules,
// with booleans and date/time names singled out. known is false where the
// declaration says nothing reliable (no type, ANY, or a NUMERIC-affinity
// name that is not a number word, such as JSON), so the caller looks at the
// stored values.
func kindOf(decl string) (k connectors.Kind, known bool) {
	u := strings.ToUpper(decl)
	switch {
	case u == "" || u == "ANY":
		return connectors.KindOther, false
	case strings.Contains(u, "BOOL"):
		return connectors.KindBool, true
	case strings.Contains(u, "DATE"), strings.Contains(u, "TIME"):
		return connectors.KindTime, true
	case strings.Contains(u, "INT"):
		return connectors.KindNumeric, true
	case strings.Contains(u, "CHAR"), strings.Contains(u, "CLOB"), strings.Contains(u, "TEXT"):
		return connectors.KindText, true
	case strings.Contains(u, "BLOB"):
		return connectors.KindOther, true
	case strings.Contains(u, "REAL"), strings.Contains(u, "FLOA"), strings.Contains(u, "DOUB"),
		strings.Contains(u, "NUM"), strings.Contains(u, "DEC"):
		return connectors.KindNumeric, true
	}
	return connectors.KindOther, false
}

// rowidName returns an alias of the rowid not shadowed by a column.
func rowidName(cols []connectors.Column) string {
	for _, n := range []string{"rowid", "_rowid_", "oid"} {
		taken := false
		for _, c := range cols {
			if strings.EqualFold(c.Name, n) {
				taken = true
			}
		}
		if !taken {
			return n
		}
	}
	return ""
}

// describeQuery checks that the query only reads (one SELECT, WITH or
// VALUES statement that compiles to reads alone; the connection is
// read-only besides), runs it as given, takes its column names and
// declared types, and classifies untyped columns from the first rows.
func (s *Source) describeQuery(ctx context.Context, query string) (*target, error) {
	q, err := connectors.CleanQuery(query, connectors.SQLite)
	if err != nil {
		return nil, err
	}
	if err := s.checkReadOnly(ctx, q); err != nil {
		return nil, err
	}
	rows, err := s.db.QueryContext(ctx, q)
	if err != nil {
		return nil, fmt.Errorf("query: %w", s.wrap(err))
	}
	defer rows.Close()
	types, err := rows.ColumnTypes()
	if err != nil {
		return nil, fmt.Errorf("query: %w", s.wrap(err))
	}
	if len(types) == 0 {
		return nil, fmt.Errorf("query returns no columns; give a SELECT: %w", connectors.ErrUnsupported)
	}
	t := &target{source: "query", from: "(\n" + q + "\n)"}
	pending := 0
	for _, ct := range types {
		c := connectors.Column{Name: ct.Name(), Type: ct.DatabaseTypeName()}
		k, known := kindOf(c.Type)
		c.Kind = k
		if !known {
			c.Kind = -1
			pending++
		}
		t.cols = append(t.cols, c)
	}
	vals := make([]any, len(types))
	ptrs := make([]any, len(types))
	for i := range vals {
		ptrs[i] = &vals[i]
	}
	for n := 0; pending > 0 && n < 100 && rows.Next(); n++ {
		if err := rows.Scan(ptrs...); err != nil {
			return nil, fmt.Errorf("query: %w", s.wrap(err))
		}
		for i, v := range vals {
			if t.cols[i].Kind != -1 || v == nil {
				continue
			}
			switch v.(type) {
			case int64, float64:
				t.cols[i].Kind = connectors.KindNumeric
			case string:
				t.cols[i].Kind = connectors.KindText
			default:
				t.cols[i].Kind = connectors.KindOther
			}
			pending--
		}
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("query: %w", s.wrap(err))
	}
	for i := range t.cols {
		if t.cols[i].Kind == -1 {
			t.cols[i].Kind = connectors.KindNumeric
		}
		if t.cols[i].Type == "" {
			t.cols[i].Type = "(no declared type)"
		}
	}
	return t, nil
}
