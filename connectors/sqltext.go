package connectors

import (
	"fmt"
	"strings"
)

// Dialect selects the lexical rules used to check user-supplied SQL text.
type Dialect int

const (
	// Postgres: '…' strings (standard conforming), E'…' with backslash
	// escapes, "…" identifiers, $tag$…$tag$ quotes, nested /* */ comments.
	Postgres Dialect = iota
	// SQLite: '…' strings, "…", `…` and […] identifiers, flat /* */
	// comments.
	SQLite
)

// CheckWhere checks a --where filter before it is placed inside
// "WHERE (" … ")": it must be one expression, so it may hold no semicolon,
// no comment and no unbalanced parenthesis outside quoted text. The text is
// returned trimmed; "" means no filter. Errors wrap ErrFragment.
func CheckWhere(where string, d Dialect) (string, error) {
	where = strings.TrimSpace(where)
	if where == "" {
		return "", nil
	}
	sc := lexer{src: where, d: d}
	depth := 0
	for {
		tok, pos := sc.next()
		switch tok {
		case tokEOF:
			if depth != 0 {
				return "", fmt.Errorf("--where %q: %d unclosed parenthesis: %w", where, depth, ErrFragment)
			}
			return where, nil
		case tokUnterminated:
			return "", fmt.Errorf("--where %q: unterminated quote or comment at byte %d: %w", where, pos, ErrFragment)
		case tokComment:
			return "", fmt.Errorf("--where %q: comments are not allowed in a filter (byte %d): %w", where, pos, ErrFragment)
		case tokSemicolon:
			return "", fmt.Errorf("--where %q: a filter is one expression; a semicolon at byte %d is not allowed: %w", where, pos, ErrFragment)
		case tokOpen:
			depth++
		case tokClose:
			depth--
			if depth < 0 {
				return "", fmt.Errorf("--where %q: unmatched ')' at byte %d: %w", where, pos, ErrFragment)
			}
		}
	}
}

// CleanQuery checks a --query text: one statement, its trailing semicolons
// and blanks removed. Comments are allowed (wrappers put the query on lines
// of its own). Errors wrap ErrFragment.
func CleanQuery(query string, d Dialect) (string, error) {
	q := strings.TrimSpace(query)
	for strings.HasSuffix(q, ";") {
		q = strings.TrimSpace(strings.TrimSuffix(q, ";"))
	}
	if q == "" {
		return "", fmt.Errorf("--query is empty: %w", ErrFragment)
	}
	sc := lexer{src: q, d: d}
	for {
		tok, pos := sc.next()
		switch tok {
		case tokEOF:
			if kw := leadingWord(q, d); !readKeywords[strings.ToUpper(kw)] {
				return "", fmt.Errorf("--query: only a SELECT (or WITH … SELECT, VALUES) runs; this statement starts with %q: %w",
					oneLine(kw, 20), ErrFragment)
			}
			return q, nil
		case tokUnterminated:
			return "", fmt.Errorf("--query: unterminated quote or comment at byte %d: %w", pos, ErrFragment)
		case tokSemicolon:
			return "", fmt.Errorf("--query: one statement only; a semicolon at byte %d separates statements: %w", pos, ErrFragment)
		}
	}
}

// readKeywords are the words a --query may start with. The database still
// has the last word: a WITH can hold a writing statement, which the
// read-only transaction (PostgreSQL) or the statement check (SQLite)
// refuses.
var readKeywords = map[string]bool{"SELECT": true, "WITH": true, "VALUES": true}

// leadingWord returns the first word of q after blanks, comments and
// opening parentheses; "" when q starts with anything else.
func leadingWord(q string, d Dialect) string {
	for {
		q = strings.TrimLeft(q, " \t\r\n\f\v(")
		if !strings.HasPrefix(q, "--") && !strings.HasPrefix(q, "/*") {
			break
		}
		l := lexer{src: q, d: d}
		if tok, _ := l.next(); tok != tokComment {
			return ""
		}
		q = q[l.i:]
	}
	n := 0
	for n < len(q) && isIdentByte(q[n]) && q[n] != '$' {
		n++
	}
	return q[:n]
}

func oneLine(s string, n int) string {
	if len(s) > n {
		s = s[:n] + "…"
	}
	return s
}

type token int

const (
	tokEOF token = iota
	tokOther
	tokOpen
	tokClose
	tokSemicolon
	tokComment
	tokQuoted
	tokUnterminated
)

// lexer splits SQL text just enough to tell quoted text and comments from
// the rest. When in doubt it errs towards reporting a semicolon or an
// unterminated quote, so that text it accepts is never read differently by
// the database in a way that ends the statement early.
type lexer struct {
	src string
	i   int
	d   Dialect
}

func isIdentByte(c byte) bool {
	return c == '_' || c == '$' || c >= 0x80 ||
		('a' <= c && c <= 'z') || ('A' <= c && c <= 'Z') || ('0' <= c && c <= '9')
}

func (l *lexer) next() (token, int) {
	s := l.src
	for l.i < len(s) {
		start := l.i
		c := s[l.i]
		prevIdent := start > 0 && isIdentByte(s[start-1])
		switch {
		case c == ';':
			l.i++
			return tokSemicolon, start
		case c == '(':
			l.i++
			return tokOpen, start
		case c == ')':
			l.i++
			return tokClose, start
		case c == '-' && strings.HasPrefix(s[l.i:], "--"):
			end := strings.IndexByte(s[l.i:], '\n')
			if end < 0 {
				l.i = len(s)
			} else {
				l.i += end + 1
			}
			return tokComment, start
		case c == '/' && strings.HasPrefix(s[l.i:], "/*"):
			if !l.blockComment() {
				return tokUnterminated, start
			}
			return tokComment, start
		case c == '\'':
			escapes := l.d == Postgres && start > 0 && (s[start-1] == 'E' || s[start-1] == 'e') &&
				(start < 2 || !isIdentByte(s[start-2]))
			if !l.quoted('\'', '\'', escapes) {
				return tokUnterminated, start
			}
			return tokQuoted, start
		case c == '"':
			if !l.quoted('"', '"', false) {
				return tokUnterminated, start
			}
			return tokQuoted, start
		case l.d == SQLite && c == '`':
			if !l.quoted('`', '`', false) {
				return tokUnterminated, start
			}
			return tokQuoted, start
		case l.d == SQLite && c == '[':
			end := strings.IndexByte(s[l.i:], ']')
			if end < 0 {
				l.i = len(s)
				return tokUnterminated, start
			}
			l.i += end + 1
			return tokQuoted, start
		case l.d == Postgres && c == '$' && !prevIdent:
			tag, ok := dollarTag(s[l.i:])
			if !ok {
				l.i++
				continue
			}
			l.i += len(tag)
			end := strings.Index(s[l.i:], tag)
			if end < 0 {
				l.i = len(s)
				return tokUnterminated, start
			}
			l.i += end + len(tag)
			return tokQuoted, start
		default:
			l.i++
		}
	}
	return tokEOF, len(s)
}

// quoted consumes a quoted run opened at l.i; a doubled closing quote stands
// for itself; with escapes a backslash escapes the next byte.
func (l *lexer) quoted(open, close byte, escapes bool) bool {
	s := l.src
	j := l.i + 1
	for j < len(s) {
		switch {
		case escapes && s[j] == '\\':
			j += 2
		case s[j] == close:
			if j+1 < len(s) && s[j+1] == close {
				j += 2
				continue
			}
			l.i = j + 1
			return true
		default:
			j++
		}
	}
	l.i = len(s)
	return false
}

func (l *lexer) blockComment() bool {
	s := l.src
	depth := 0
	j := l.i
	for j < len(s) {
		switch {
		case strings.HasPrefix(s[j:], "/*"):
			if depth > 0 && l.d == SQLite {
				j += 2
				continue
			}
			depth++
			j += 2
		case strings.HasPrefix(s[j:], "*/"):
			depth--
			j += 2
			if depth == 0 {
				l.i = j
				return true
			}
		default:
			j++
		}
	}
	l.i = len(s)
	return false
}

// dollarTag returns the opening tag ($$ or $name$) at the start of s.
func dollarTag(s string) (string, bool) {
	if len(s) < 2 {
		return "", false
	}
	for j := 1; j < len(s); j++ {
		c := s[j]
		if c == '$' {
			return s[:j+1], true
		}
		if !(c == '_' || c >= 0x80 || ('a' <= c && c <= 'z') || ('A' <= c && c <= 'Z') || (j > 1 && '0' <= c && c <= '9')) {
			return "", false
		}
	}
	return "", false
}
