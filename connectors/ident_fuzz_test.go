package connectors

import (
	"strings"
	"testing"
	"unicode/utf8"
)

// FuzzQuoteIdent: for any schema and table name a user or a catalogue can
// hand plumb, ValidIdent accepts exactly the names QuoteIdent can quote
// (non-empty, no NUL, valid UTF-8) and QuoteIdent never panics on them;
// the quoted name parses back to the same name, with no case folding; and
// placed in a statement of either dialect it is one quoted token that ends
// where it should, with no way out of its quotes (no semicolon, comment,
// parenthesis or unterminated quote after it). The seed corpus is in
// testdata/fuzz/FuzzQuoteIdent: quotes, doubled quotes, statement and
// comment breakers, control characters, NUL, invalid UTF-8, dots and
// non-ASCII names.
func FuzzQuoteIdent(f *testing.F) {
	f.Fuzz(func(t *testing.T, schema, table string) {
		for _, s := range []string{schema, table} {
			err := ValidIdent("table", s)
			quotable := s != "" && strings.IndexByte(s, 0) < 0 && utf8.ValidString(s)
			if (err == nil) != quotable {
				t.Fatalf("ValidIdent(%q) = %v", s, err)
			}
		}
		if ValidIdent("table", table) != nil {
			return
		}
		n := Name{Table: table}
		if ValidIdent("schema", schema) == nil {
			n.Schema = schema
		}
		q := n.Quoted()
		for _, fold := range []bool{true, false} {
			back, err := ParseName(q, fold)
			if err != nil {
				t.Fatalf("quoted form %s of %+v does not parse: %v", q, n, err)
			}
			if back != n {
				t.Fatalf("quoted form %s of %+v parses to %+v (fold %v)", q, n, back, fold)
			}
		}
		for _, d := range []Dialect{Postgres, SQLite} {
			stmt := "SELECT count(*) FROM " + q + " WHERE true"
			l := lexer{src: stmt, d: d}
			start := strings.Index(stmt, q)
			for {
				tok, pos := l.next()
				if tok == tokEOF {
					break
				}
				switch {
				case tok == tokSemicolon || tok == tokComment || tok == tokUnterminated:
					t.Fatalf("dialect %v: %s: token %d at byte %d", d, stmt, tok, pos)
				case pos >= start && pos < start+len(q) && tok != tokQuoted && stmt[pos] != '.':
					t.Fatalf("dialect %v: %s: token %d inside the quoted name at byte %d", d, stmt, tok, pos)
				case tok == tokQuoted && pos >= start && l.i > start+len(q):
					t.Fatalf("dialect %v: %s: the quoted name's token runs past it to byte %d", d, stmt, l.i)
				}
			}
		}
	})
}
