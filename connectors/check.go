package connectors

import (
	"fmt"
	"strconv"
	"strings"
)

// Check reports whether a whole-table result can be diagnosed: it has rows,
// no column was NULL (or NaN, ±Inf) in every row, and the complete rows are
// more than the columns (an intercept takes one). The error names the
// source and the column and wraps ErrInsufficient. Incremental scans of a
// few new buckets are expected to be small and should not call it.
func Check(source string, r *Result) error {
	return CheckMerged(source, r, r.Merged())
}

// CheckMerged is Check for a caller that already holds r.Merged().
func CheckMerged(source string, r *Result, all Group) error {
	c := all.Moments.Counts()
	p := len(r.Columns)
	if r.Read == 0 {
		return fmt.Errorf("%s: no rows to read (check --where and --sample): %w", source, ErrInsufficient)
	}
	if c.Used == 0 {
		var all []string
		for j, name := range r.Columns {
			if miss := c.Null[j] + c.NaN[j] + c.Inf[j]; miss == r.Read-r.NoTime && miss > 0 {
				all = append(all, fmt.Sprintf("%q", name))
			}
		}
		for _, f := range r.Factors {
			if f.Null == r.Read-r.NoTime && f.Null > 0 {
				all = append(all, fmt.Sprintf("%q", f.Name))
			}
		}
		if len(all) > 0 {
			return fmt.Errorf("%s: column %s is NULL, NaN or infinite in every row, so listwise deletion leaves no rows; leave it out with --columns: %w",
				source, strings.Join(all, ", "), ErrInsufficient)
		}
		return fmt.Errorf("%s: every one of %d rows has a NULL, NaN or infinite value in some column (%s): %w",
			source, r.Read, missingSummary(r.Columns, c.Null, c.NaN, c.Inf, r.Factors), ErrInsufficient)
	}
	if c.Used < int64(p)+1 {
		return fmt.Errorf("%s: %d complete rows for %d columns; the diagnostics need at least %d (columns + 1 for the intercept): %w",
			source, c.Used, p, p+1, ErrInsufficient)
	}
	return nil
}

func missingSummary(names []string, null, nan, inf []int64, factors []Factor) string {
	var s []string
	for j, n := range names {
		if m := null[j] + nan[j] + inf[j]; m > 0 {
			s = append(s, fmt.Sprintf("%s: %d", n, m))
		}
	}
	for _, f := range factors {
		if f.Null > 0 {
			s = append(s, fmt.Sprintf("%s: %d", f.Name, f.Null))
		}
	}
	return strings.Join(s, ", ")
}

// CheckLevels reports a result with no columns to accumulate: every
// requested column is a factor that was NULL in every row read. The error
// names the source and the columns and wraps ErrInsufficient.
func CheckLevels(source string, r *Result) error {
	if len(r.Columns) > 0 {
		return nil
	}
	var names []string
	for _, f := range r.Factors {
		names = append(names, strconv.Quote(f.Name))
	}
	return fmt.Errorf("%s: column %s is NULL in every row read (%d rows), so there are no levels to accumulate; name other columns with --columns or check --where: %w",
		source, strings.Join(names, ", "), r.Read, ErrInsufficient)
}
