package connectors

import (
	"strings"
	"testing"
)

// FuzzCleanQuery: no input panics, and an accepted query is one statement
// (no semicolon outside quotes and comments) that starts, after blanks,
// comments and parentheses, with SELECT, WITH or VALUES. Seeds live in
// testdata/fuzz/FuzzCleanQuery.
func FuzzCleanQuery(f *testing.F) {
	f.Add("SELECT 1", false)
	f.Add("attach database '/tmp/x' as x", true)
	f.Fuzz(func(t *testing.T, s string, lite bool) {
		d := Postgres
		if lite {
			d = SQLite
		}
		q, err := CleanQuery(s, d)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error message")
			}
			return
		}
		if kw := strings.ToUpper(leadingWord(q, d)); !readKeywords[kw] {
			t.Fatalf("accepted %q, which starts with %q", q, kw)
		}
		l := lexer{src: q, d: d}
		for {
			tok, pos := l.next()
			switch tok {
			case tokEOF:
				return
			case tokSemicolon:
				t.Fatalf("accepted %q with a semicolon at byte %d", q, pos)
			case tokUnterminated:
				t.Fatalf("accepted %q with an unterminated quote at byte %d", q, pos)
			}
		}
	})
}

func TestCleanQueryKeywords(t *testing.T) {
	for _, d := range []Dialect{Postgres, SQLite} {
		for _, ok := range []string{"SELECT 1", "select 1", "  -- c\n/* d */ WITH a AS (SELECT 1) SELECT * FROM a", "VALUES (1)", "(SELECT 1)", "\tselect\n1"} {
			if _, err := CleanQuery(ok, d); err != nil {
				t.Errorf("dialect %d: %q refused: %v", d, ok, err)
			}
		}
		for _, bad := range []string{
			"attach database '/p' as x", "vacuum into '/p'", "ATTACH '/p' AS x", "/* x */ vacuum", "-- c\nattach 'p' as x",
			"COPY (SELECT 1) TO '/tmp/p'", "pragma query_only = 0", "SELECTX 1", "select1", "explain select 1",
			"delete from t", "'select' 1", `"select" 1`, "/* unterminated", "$$select$$",
		} {
			if _, err := CleanQuery(bad, d); err == nil {
				t.Errorf("dialect %d: %q accepted", d, bad)
			}
		}
	}
}
