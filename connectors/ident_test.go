package connectors

import (
	"errors"
	"strings"
	"testing"
)

func TestParseName(t *testing.T) {
	cases := []struct {
		in     string
		fold   bool
		schema string
		table  string
		quoted string
		bad    bool
	}{
		{in: "district_daily", table: "district_daily", quoted: `"district_daily"`},
		{in: "Ops.District_Daily", fold: true, schema: "ops", table: "district_daily", quoted: `"ops"."district_daily"`},
		{in: "Ops.District_Daily", schema: "Ops", table: "District_Daily", quoted: `"Ops"."District_Daily"`},
		{in: `"Ops"."Daily Demand"`, fold: true, schema: "Ops", table: "Daily Demand", quoted: `"Ops"."Daily Demand"`},
		{in: `"a""b".c$1`, schema: `a"b`, table: "c$1", quoted: `"a""b"."c$1"`},
		{in: `"x; DROP TABLE t; --"`, table: "x; DROP TABLE t; --", quoted: `"x; DROP TABLE t; --"`},
		{in: `"a.b"`, table: "a.b", quoted: `"a.b"`},
		{in: "wasserstände", table: "wasserstände", quoted: `"wasserstände"`},
		{in: "t; DROP TABLE t", bad: true},
		{in: `t"`, bad: true},
		{in: `"unterminated`, bad: true},
		{in: `""`, bad: true},
		{in: "a..b", bad: true},
		{in: "a.", bad: true},
		{in: ".a", bad: true},
		{in: "a.b.c", bad: true},
		{in: "1abc", bad: true},
		{in: "a b", bad: true},
		{in: "", bad: true},
		{in: "a\x00b", bad: true},
	}
	for _, c := range cases {
		n, err := ParseName(c.in, c.fold)
		if c.bad {
			if err == nil || !errors.Is(err, ErrIdentifier) {
				t.Errorf("ParseName(%q) = %+v, %v; want an ErrIdentifier", c.in, n, err)
			}
			continue
		}
		if err != nil {
			t.Errorf("ParseName(%q): %v", c.in, err)
			continue
		}
		if n.Schema != c.schema || n.Table != c.table || n.Quoted() != c.quoted {
			t.Errorf("ParseName(%q) = %q.%q quoted %s; want %q.%q quoted %s", c.in, n.Schema, n.Table, n.Quoted(), c.schema, c.table, c.quoted)
		}
	}
}

// FuzzParseName: no input panics; whatever parses quotes back to text that
// parses to the same name, and the quoted text has no way out of its quotes.
func FuzzParseName(f *testing.F) {
	for _, s := range []string{"t", "s.t", `"a""b"."c"`, `"x; DROP TABLE t; --"`, `a"`, "a.b.c", "ä.ö"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		n, err := ParseName(s, true)
		if err != nil {
			return
		}
		q := n.Quoted()
		m, err := ParseName(q, true)
		if err != nil {
			t.Fatalf("ParseName(%q) = %+v, but its quoted form %s does not parse: %v", s, n, q, err)
		}
		if m != n {
			t.Fatalf("round trip of %q: %+v then %+v", s, n, m)
		}
		// Outside the doubled quotes, the quoted text is only dots.
		rest := strings.ReplaceAll(q, `""`, "")
		inside := false
		for _, r := range rest {
			switch {
			case r == '"':
				inside = !inside
			case !inside && r != '.':
				t.Fatalf("quoted form %s has %q outside quotes", q, r)
			}
		}
	})
}

func TestCheckWhere(t *testing.T) {
	good := []string{
		"", "  ", "district = 'north'", "note = 'it''s; fine'", `"odd;col" > 1`, "(a > 1) AND (b < 2)",
		"x = $tag$;)$tag$", "x = E'\\';'",
	}
	for _, w := range good {
		if _, err := CheckWhere(w, Postgres); err != nil {
			t.Errorf("CheckWhere(%q): %v", w, err)
		}
	}
	bad := []string{
		"1=1; DROP TABLE t", "a > 1) OR (1=1", "(a > 1", "a = 'open", "a > 1 -- rest", "a /* c */ > 1",
		"x = E'\\'", `"unclosed`,
	}
	for _, w := range bad {
		if _, err := CheckWhere(w, Postgres); err == nil || !errors.Is(err, ErrFragment) {
			t.Errorf("CheckWhere(%q) = %v, want ErrFragment", w, err)
		}
	}
	// SQLite has no dollar quotes: the semicolon is real there.
	if _, err := CheckWhere("x = $a$;$a$", SQLite); err == nil {
		t.Error("SQLite: a semicolon between dollar signs was accepted")
	}
	if _, err := CheckWhere("[odd;col] > 1", SQLite); err != nil {
		t.Errorf("SQLite bracket identifier: %v", err)
	}
}

func TestCleanQuery(t *testing.T) {
	for in, want := range map[string]string{
		"SELECT 1;":                      "SELECT 1",
		"SELECT 1 ; ;\n":                 "SELECT 1",
		"SELECT ';' -- trailing comment": "SELECT ';' -- trailing comment",
	} {
		got, err := CleanQuery(in, Postgres)
		if err != nil || got != want {
			t.Errorf("CleanQuery(%q) = %q, %v; want %q", in, got, err, want)
		}
	}
	for _, in := range []string{"", ";", "SELECT 1; DROP TABLE t", "SELECT 'x"} {
		if _, err := CleanQuery(in, Postgres); err == nil {
			t.Errorf("CleanQuery(%q) accepted", in)
		}
	}
}

// FuzzCheckWhere: no input panics, and an accepted filter, placed in the
// wrapper, leaves the statement with its parentheses balanced and outside
// any quote, and with no semicolon.
func FuzzCheckWhere(f *testing.F) {
	for _, s := range []string{"a = 1", "a = 'x;'", "a) OR (1", "$$;$$", "E'\\''", "/* */", "[a;b]"} {
		f.Add(s, false)
	}
	f.Fuzz(func(t *testing.T, s string, lite bool) {
		d := Postgres
		if lite {
			d = SQLite
		}
		w, err := CheckWhere(s, d)
		if err != nil || w == "" {
			return
		}
		stmt := "SELECT 1 WHERE (" + w + ") AND true"
		l := lexer{src: stmt, d: d}
		depth := 0
		for {
			tok, pos := l.next()
			switch tok {
			case tokSemicolon, tokComment, tokUnterminated:
				t.Fatalf("accepted %q, but the statement has token %d at %d", s, tok, pos)
			case tokOpen:
				depth++
			case tokClose:
				depth--
				if depth < 0 {
					t.Fatalf("accepted %q, but it closes the wrapper", s)
				}
			}
			if tok == tokEOF {
				if depth != 0 {
					t.Fatalf("accepted %q, depth %d at the end", s, depth)
				}
				return
			}
		}
	})
}
