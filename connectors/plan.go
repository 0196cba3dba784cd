package connectors

import (
	"fmt"
	"slices"
	"sort"
	"strings"
	"time"
)

// Plan is a request resolved against the described columns: which columns
// are accumulated, which were skipped, and the roles of the others.
type Plan struct {
	Source  string   // how messages name what is read, e.g. `table "public"."demand"` or "query"
	Values  []Column // accumulated, in order
	Skipped []Column // found by discovery but not numeric
	Time    *Column  // nil without bucketing
	Segment *Column  // nil without segmenting
	Weight  *Column  // nil without weights

	Bucket      string
	Location    *time.Location // never nil
	MaxSegments int            // never 0
	MaxLevels   int            // never 0
	Extended    bool           // QR factors in double-double (Request.Extended)
}

// Factors returns the indices in Values of the factors (text and boolean
// columns).
func (p *Plan) Factors() []int {
	var idx []int
	for i, c := range p.Values {
		if c.IsFactor() {
			idx = append(idx, i)
		}
	}
	return idx
}

// Names returns the names of the accumulated columns.
func (p *Plan) Names() []string {
	s := make([]string, len(p.Values))
	for i, c := range p.Values {
		s[i] = c.Name
	}
	return s
}

// Buckets lists the bucket sizes plumb understands.
var Buckets = []string{"hour", "day", "week", "month"}

// Resolve matches a request against the columns a source described.
// Without req.Columns every numeric or boolean column is used except the
// time, segment and weight columns, and the others are listed in Skipped;
// a text column is used, as a factor, when req.Columns names it, and so is
// a boolean column wherever it is used.
// timeKinds are the kinds this source can read as a time column.
//
// Errors name the source and the column, list what is available, and wrap
// ErrNotFound, ErrColumnType or ErrUnsupported.
func Resolve(source string, cols []Column, req Request, timeKinds ...Kind) (*Plan, error) {
	p := &Plan{Source: source, Bucket: req.Bucket, Location: req.Location, MaxSegments: req.MaxSegments,
		MaxLevels: req.MaxLevels, Extended: req.Extended}
	if p.MaxLevels <= 0 {
		p.MaxLevels = DefaultMaxLevels
	}
	if p.Location == nil {
		p.Location = time.UTC
	}
	if p.MaxSegments <= 0 {
		p.MaxSegments = DefaultMaxSegments
	}
	seen := map[string]bool{}
	for _, c := range cols {
		if seen[c.Name] {
			return nil, fmt.Errorf("%s: column name %q appears twice; give the columns distinct names: %w", source, c.Name, ErrUnsupported)
		}
		seen[c.Name] = true
	}
	role := func(flag, name string, ok func(Column) bool, want string) (*Column, error) {
		if name == "" {
			return nil, nil
		}
		c, err := findColumn(source, cols, name)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", flag, err)
		}
		if ok != nil && !ok(*c) {
			return nil, fmt.Errorf("%s: column %q of %s has type %s; %s: %w", flag, c.Name, source, c.Type, want, ErrColumnType)
		}
		return c, nil
	}
	var err error
	if req.Bucket != "" && req.TimeColumn == "" {
		return nil, fmt.Errorf("%s: bucket %q needs a time column: %w", source, req.Bucket, ErrUnsupported)
	}
	if req.TimeColumn != "" {
		if !validBucket(req.Bucket) {
			return nil, fmt.Errorf("%s: time column %q needs a bucket, one of %s (got %q): %w",
				source, req.TimeColumn, strings.Join(Buckets, ", "), req.Bucket, ErrUnsupported)
		}
		isTime := func(c Column) bool {
			for _, k := range timeKinds {
				if c.Kind == k {
					return true
				}
			}
			return false
		}
		if p.Time, err = role("time column", req.TimeColumn, isTime, "want a date or timestamp column"); err != nil {
			return nil, err
		}
	}
	if p.Segment, err = role("segment column", req.Segment, nil, ""); err != nil {
		return nil, err
	}
	numeric := func(c Column) bool { return c.Kind == KindNumeric || c.Kind == KindBool }
	if p.Weight, err = role("weight column", req.Weight, numeric, "want a numeric column"); err != nil {
		return nil, err
	}

	if len(req.Columns) == 0 {
		for _, c := range cols {
			switch {
			case p.Time != nil && c.Name == p.Time.Name,
				p.Segment != nil && c.Name == p.Segment.Name,
				p.Weight != nil && c.Name == p.Weight.Name:
			case numeric(c):
				p.Values = append(p.Values, c)
			default:
				p.Skipped = append(p.Skipped, c)
			}
		}
		if len(p.Values) == 0 {
			return nil, fmt.Errorf("%s has no numeric columns (found %s); name some with --columns: %w",
				source, describeColumns(cols), ErrColumnType)
		}
		return p, nil
	}
	used := map[string]bool{}
	for _, name := range req.Columns {
		c, err := findColumn(source, cols, name)
		if err != nil {
			return nil, err
		}
		if used[c.Name] {
			return nil, fmt.Errorf("%s: column %q is named twice in --columns: %w", source, c.Name, ErrUnsupported)
		}
		used[c.Name] = true
		switch {
		case p.Weight != nil && c.Name == p.Weight.Name:
			return nil, fmt.Errorf("%s: column %q is the weight column; it cannot also be accumulated: %w", source, c.Name, ErrUnsupported)
		case c.Kind == KindTime:
			return nil, fmt.Errorf("%s: column %q is a time column (type %s); use it with --time-column, or pick numeric columns: %w",
				source, c.Name, c.Type, ErrColumnType)
		case !numeric(*c) && c.Kind != KindText:
			return nil, fmt.Errorf("%s: column %q has type %s, which plumb cannot use; pick numeric, text or boolean columns (numeric here: %s): %w",
				source, c.Name, c.Type, numericNames(cols), ErrColumnType)
		}
		p.Values = append(p.Values, *c)
	}
	return p, nil
}

// Choose resolves the columns to accumulate before a scan, for a request
// whose response column, when there is one, is target: the request's
// columns, or every numeric and boolean column but the time, segment,
// weight and target columns; the target comes last in Values. It is
// Resolve with the target's rules added; the time column's type is left to
// the source's own Resolve at scan time. The caller keeps the target out
// of req.Columns.
func Choose(source string, cols []Column, req Request, target string) (*Plan, error) {
	p, err := Resolve(source, cols, req, KindTime, KindNumeric, KindBool, KindOther, KindText)
	if err != nil || target == "" {
		return p, err
	}
	c, err := findColumn(source, cols, target)
	if err != nil {
		return nil, fmt.Errorf("target: %w", err)
	}
	if c.IsFactor() {
		return nil, fmt.Errorf("target: column %q of %s is categorical (type %s): plumb fits an ordinary least-squares regression, so the target must be numeric (for a 0/1 target, cast it to an integer in --query): %w",
			c.Name, source, c.Type, ErrColumnType)
	}
	if c.Kind != KindNumeric {
		return nil, fmt.Errorf("target: column %q of %s has type %s; want a numeric column: %w", c.Name, source, c.Type, ErrColumnType)
	}
	p.Values = slices.DeleteFunc(p.Values, func(v Column) bool { return v.Name == c.Name })
	if len(p.Values) == 0 {
		return nil, fmt.Errorf("%s has no numeric columns besides the target %q (found %s): %w",
			source, c.Name, describeColumns(cols), ErrColumnType)
	}
	p.Values = append(p.Values, *c)
	return p, nil
}

func validBucket(b string) bool {
	for _, x := range Buckets {
		if b == x {
			return true
		}
	}
	return false
}

// findColumn finds a column by exact name, else by a unique
// case-insensitive match.
func findColumn(source string, cols []Column, name string) (*Column, error) {
	for i := range cols {
		if cols[i].Name == name {
			return &cols[i], nil
		}
	}
	var hit *Column
	n := 0
	for i := range cols {
		if strings.EqualFold(cols[i].Name, name) {
			hit = &cols[i]
			n++
		}
	}
	if n == 1 {
		return hit, nil
	}
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = c.Name
	}
	return nil, fmt.Errorf("%s has no column %q (columns: %s): %w", source, name, List(names, 40), ErrNotFound)
}

func numericNames(cols []Column) string {
	var s []string
	for _, c := range cols {
		if c.Kind == KindNumeric || c.Kind == KindBool {
			s = append(s, c.Name)
		}
	}
	if len(s) == 0 {
		return "none"
	}
	return List(s, 40)
}

func describeColumns(cols []Column) string {
	s := make([]string, len(cols))
	for i, c := range cols {
		s[i] = c.Name + " " + c.Type
	}
	if len(s) == 0 {
		return "no columns"
	}
	return List(s, 40)
}

// List joins names for a message, sorted, at most max of them.
func List(names []string, max int) string {
	s := append([]string(nil), names...)
	sort.Strings(s)
	more := 0
	if len(s) > max {
		more = len(s) - max
		s = s[:max]
	}
	out := strings.Join(s, ", ")
	if more > 0 {
		out += fmt.Sprintf(" and %d more", more)
	}
	if out == "" {
		return "none"
	}
	return out
}
