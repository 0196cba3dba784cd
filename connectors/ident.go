package connectors

import (
	"fmt"
	"strings"
	"unicode"
	"unicode/utf8"
)

// Name is a possibly schema-qualified table name, already unquoted.
type Name struct {
	Schema string // "" when not given
	Table  string
}

// ParseName parses a table name as a user writes it on the command line:
// name, schema.name, or either part in double quotes with "" standing for a
// quote ("Daily Demand"."district ""A"""). Unquoted parts are folded to
// lower case when fold is set (PostgreSQL's rule); quoted parts are taken as
// written. Anything else (a stray quote, a semicolon, spaces outside quotes,
// more than two parts) is an error wrapping ErrIdentifier.
func ParseName(s string, fold bool) (Name, error) {
	parts, err := parseIdentList(s, fold)
	if err != nil {
		return Name{}, fmt.Errorf("table name %q: %w", s, err)
	}
	switch len(parts) {
	case 1:
		return Name{Table: parts[0]}, nil
	case 2:
		return Name{Schema: parts[0], Table: parts[1]}, nil
	}
	return Name{}, fmt.Errorf("table name %q: %d dot-separated parts, want name or schema.name: %w", s, len(parts), ErrIdentifier)
}

// Quoted returns the name as a quoted SQL identifier, "schema"."table".
func (n Name) Quoted() string {
	if n.Schema == "" {
		return QuoteIdent(n.Table)
	}
	return QuoteIdent(n.Schema) + "." + QuoteIdent(n.Table)
}

// String is the name as plumb prints it in messages (quoted).
func (n Name) String() string { return n.Quoted() }

// QuoteIdent quotes one identifier for SQL: it is wrapped in double quotes
// and every double quote inside is doubled. It panics on a NUL byte, which
// no identifier may contain (callers validate names first).
func QuoteIdent(s string) string {
	if strings.IndexByte(s, 0) >= 0 {
		panic("connectors: QuoteIdent: identifier contains a NUL byte")
	}
	return `"` + strings.ReplaceAll(s, `"`, `""`) + `"`
}

// ValidIdent reports an error wrapping ErrIdentifier for a name that cannot
// be quoted: empty, containing NUL, or not valid UTF-8.
func ValidIdent(what, s string) error {
	switch {
	case s == "":
		return fmt.Errorf("%s name is empty: %w", what, ErrIdentifier)
	case strings.IndexByte(s, 0) >= 0:
		return fmt.Errorf("%s name %q contains a NUL byte: %w", what, s, ErrIdentifier)
	case !utf8.ValidString(s):
		return fmt.Errorf("%s name %q is not valid UTF-8: %w", what, s, ErrIdentifier)
	}
	return nil
}

func parseIdentList(s string, fold bool) ([]string, error) {
	if s == "" {
		return nil, fmt.Errorf("empty: %w", ErrIdentifier)
	}
	if !utf8.ValidString(s) {
		return nil, fmt.Errorf("not valid UTF-8: %w", ErrIdentifier)
	}
	var parts []string
	i := 0
	for {
		if i >= len(s) {
			return nil, fmt.Errorf("ends after a dot: %w", ErrIdentifier)
		}
		var part string
		if s[i] == '"' {
			var b strings.Builder
			j := i + 1
			closed := false
			for j < len(s) {
				if s[j] == '"' {
					if j+1 < len(s) && s[j+1] == '"' {
						b.WriteByte('"')
						j += 2
						continue
					}
					closed = true
					j++
					break
				}
				if s[j] == 0 {
					return nil, fmt.Errorf("NUL byte inside quotes: %w", ErrIdentifier)
				}
				b.WriteByte(s[j])
				j++
			}
			if !closed {
				return nil, fmt.Errorf("unterminated quote starting at byte %d: %w", i, ErrIdentifier)
			}
			part = b.String()
			if part == "" {
				return nil, fmt.Errorf("empty quoted identifier at byte %d: %w", i, ErrIdentifier)
			}
			i = j
		} else {
			j := i
			for j < len(s) {
				r, size := utf8.DecodeRuneInString(s[j:])
				ok := r == '_' || unicode.IsLetter(r) || (j > i && (unicode.IsDigit(r) || r == '$'))
				if !ok {
					break
				}
				j += size
			}
			if j == i {
				r, _ := utf8.DecodeRuneInString(s[i:])
				return nil, fmt.Errorf("unexpected %q at byte %d (quote names that are not plain words: \"like this\"): %w", r, i, ErrIdentifier)
			}
			part = s[i:j]
			if fold {
				part = strings.ToLower(part)
			}
			i = j
		}
		parts = append(parts, part)
		if i == len(s) {
			return parts, nil
		}
		if s[i] != '.' {
			r, _ := utf8.DecodeRuneInString(s[i:])
			return nil, fmt.Errorf("unexpected %q at byte %d (quote names that are not plain words: \"like this\"): %w", r, i, ErrIdentifier)
		}
		i++
		if len(parts) > 3 {
			return nil, fmt.Errorf("too many dots: %w", ErrIdentifier)
		}
	}
}
