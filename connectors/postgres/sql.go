package postgres

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"plumb/connectors"
)

// layout says where each part of a streamed row is.
type layout struct {
	iTime, iSeg, iWeight int // -1 when absent
	iVal0                int
	p                    int    // value columns
	factor               []bool // per value column: a factor, read as text; nil without factors
	flags                []int  // value index of each inexact flag, after the values
	n                    int    // fields in a row
}

func quoteLiteral(s string) string { return "'" + strings.ReplaceAll(s, "'", "''") + "'" }

func zoneLiteral(loc *time.Location) (string, error) {
	name := loc.String()
	if loc == time.Local || name == "Local" || name == "" {
		return "", fmt.Errorf("time zone %q: name an IANA zone such as Europe/Amsterdam, or UTC: %w", name, connectors.ErrUnsupported)
	}
	return quoteLiteral(name), nil
}

func float8Literal(v float64) string {
	switch {
	case math.IsNaN(v):
		return "'NaN'::float8"
	case math.IsInf(v, 1):
		return "'Infinity'::float8"
	case math.IsInf(v, -1):
		return "'-Infinity'::float8"
	}
	return strconv.FormatFloat(v, 'g', -1, 64) + "::float8"
}

// valueExpr reads a column as float8 (casts in SQL: numeric → float8 is far
// cheaper on the server than on the client).
func valueExpr(col string, base uint32) string {
	q := connectors.QuoteIdent(col)
	switch base {
	case oidFloat8:
		return q
	case oidBool:
		return q + "::int4::float8"
	}
	return q + "::float8"
}

// inexactExpr is true where the value does not survive as float64: int8
// beyond ±2⁵³, numeric with more than 15 significant digits (float8 →
// numeric keeps 15); "" for types that always fit.
func inexactExpr(col string, base uint32) string {
	q := connectors.QuoteIdent(col)
	switch base {
	case oidInt8:
		return "(" + q + " NOT BETWEEN -9007199254740992 AND 9007199254740992)"
	case oidNumeric:
		return "(" + q + "::float8::numeric <> " + q + ")"
	}
	return ""
}

// timeExpr reads a time column as timestamptz: date and timestamp are
// wall-clock times in the bucket zone.
func timeExpr(col string, base uint32, zone string) string {
	q := connectors.QuoteIdent(col)
	switch base {
	case oidTimestamptz:
		return q
	case oidTimestamp:
		return "(" + q + " AT TIME ZONE " + zone + ")"
	}
	return "(" + q + "::timestamp AT TIME ZONE " + zone + ")"
}

// bucketExpr truncates a time column to its bucket in SQL, NULL for NULL
// and ±infinity.
func bucketExpr(col string, base uint32, unit, zone string) string {
	q := connectors.QuoteIdent(col)
	u := quoteLiteral(unit)
	switch base {
	case oidTimestamptz:
		return "CASE WHEN isfinite(" + q + ") THEN date_trunc(" + u + ", " + q + ", " + zone + ") END"
	case oidTimestamp:
		return "CASE WHEN isfinite(" + q + ") THEN date_trunc(" + u + ", " + q + ") AT TIME ZONE " + zone + " END"
	}
	return "CASE WHEN isfinite(" + q + ") THEN date_trunc(" + u + ", " + q + "::timestamp) AT TIME ZONE " + zone + " END"
}

// statement pieces shared by streaming and pushdown.
type stmt struct {
	with  string // "WITH plumb_q AS (…) " for a query
	from  string
	conds []string
}

func (s *Source) baseStmt(t *target, where string, req connectors.Request) (stmt, error) {
	var st stmt
	if t.table != nil {
		st.from = t.table.Quoted()
		if req.SamplePct > 0 && req.SamplePct < 100 {
			if t.relkind == "v" || t.relkind == "f" {
				return st, fmt.Errorf("%s: --sample uses TABLESAMPLE, which needs a table, not a view: %w", t.source, connectors.ErrUnsupported)
			}
			st.from += fmt.Sprintf(" TABLESAMPLE BERNOULLI (%s) REPEATABLE (%d)",
				strconv.FormatFloat(req.SamplePct, 'g', -1, 64), req.Seed)
		}
	} else {
		if req.SamplePct > 0 && req.SamplePct < 100 {
			return st, fmt.Errorf("query: --sample uses TABLESAMPLE, which needs --table: %w", connectors.ErrUnsupported)
		}
		st.with = "WITH plumb_q AS (\n" + t.query + "\n) "
		st.from = "plumb_q"
	}
	if where != "" {
		st.conds = append(st.conds, "("+where+")")
	}
	return st, nil
}

func (st stmt) sql(list []string, extra ...string) string {
	var b strings.Builder
	b.WriteString(st.with)
	b.WriteString("SELECT ")
	b.WriteString(strings.Join(list, ", "))
	b.WriteString(" FROM ")
	b.WriteString(st.from)
	conds := append(append([]string(nil), st.conds...), extra...)
	if len(conds) > 0 {
		b.WriteString(" WHERE ")
		b.WriteString(strings.Join(conds, " AND "))
	}
	return b.String()
}

// streamList returns the select list of a streaming scan and its layout.
func streamList(t *target, plan *connectors.Plan) ([]string, layout, error) {
	lay := layout{iTime: -1, iSeg: -1, iWeight: -1}
	var list []string
	if plan.Time != nil {
		zone, err := zoneLiteral(plan.Location)
		if err != nil {
			return nil, lay, err
		}
		lay.iTime = len(list)
		list = append(list, timeExpr(plan.Time.Name, t.base[plan.Time.Name], zone))
	}
	if plan.Segment != nil {
		lay.iSeg = len(list)
		list = append(list, connectors.QuoteIdent(plan.Segment.Name)+"::text")
	}
	if plan.Weight != nil {
		lay.iWeight = len(list)
		list = append(list, valueExpr(plan.Weight.Name, t.base[plan.Weight.Name]))
	}
	lay.iVal0 = len(list)
	for _, c := range plan.Values {
		if c.IsFactor() {
			// Levels as text: an enum's label, a boolean's true or false,
			// char(n) without its padding.
			list = append(list, connectors.QuoteIdent(c.Name)+"::text")
			continue
		}
		list = append(list, valueExpr(c.Name, t.base[c.Name]))
	}
	lay.p = len(plan.Values)
	for _, j := range plan.Factors() {
		if lay.factor == nil {
			lay.factor = make([]bool, lay.p)
		}
		lay.factor[j] = true
	}
	for j, c := range plan.Values {
		if c.IsFactor() {
			continue
		}
		if e := inexactExpr(c.Name, t.base[c.Name]); e != "" {
			lay.flags = append(lay.flags, j)
			list = append(list, e)
		}
	}
	lay.n = len(list)
	return list, lay, nil
}
