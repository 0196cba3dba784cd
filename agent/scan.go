package agent

import (
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"plumb/agent/config"
	"plumb/connectors"
	"plumb/diagnostics"
	"plumb/stream"
)

// chooseColumns picks the accumulated columns of a watch from what the
// source described (connectors.Choose: the configured columns, or every
// numeric and boolean column but the time, segment and target columns; the
// target last) and returns the regressors, all accumulated columns and the
// time column.
func chooseColumns(w *config.Watch, described []connectors.Column, req connectors.Request) (regressors []string, all []string, timeCol *connectors.Column, err error) {
	req.Columns = w.Columns
	p, err := connectors.Choose("watch "+strconv.Quote(w.Name), described, req, w.Target)
	if err != nil {
		return nil, nil, nil, err
	}
	all = p.Names()
	regressors = all
	if w.Target != "" {
		regressors = slices.Clone(all[:len(all)-1])
	}
	if len(regressors) < 2 {
		return nil, nil, nil, fmt.Errorf("watch %q: %d column(s) to watch besides the target; multicollinearity needs two or more", w.Name, len(regressors))
	}
	return regressors, all, p.Time, nil
}

// sinceFilter returns an SQL condition that keeps (at least) the rows whose
// time column is at or after since. It is deliberately generous — two days
// early, compared on the date prefix of ISO text — so that time zones and
// text layouts can never drop a row that belongs to a rescanned bucket;
// the extra rows fall into earlier buckets, which the run discards.
//
// TODO(connectors): a Request field for a lower time bound would let the
// connector filter with its own time parsing and use an index.
func sinceFilter(sourceURL string, col connectors.Column, since time.Time) string {
	early := since.Add(-48 * time.Hour).UTC()
	q := connectors.QuoteIdent(col.Name)
	secs := strconv.FormatInt(early.Unix(), 10)
	if strings.HasPrefix(sourceURL, "sqlite:") {
		return fmt.Sprintf("(CASE WHEN typeof(%s) IN ('integer', 'real') THEN %s >= %s ELSE %s >= '%s' END)",
			q, q, secs, q, early.Format("2006-01-02"))
	}
	if col.Kind == connectors.KindNumeric {
		return fmt.Sprintf("%s >= %s", q, secs)
	}
	// Compared in the column's own type: date against timestamptz would be
	// a stable comparison (it depends on TimeZone), which postgres_fdw
	// does not send to a shard, so a pushdown would fetch every row.
	switch {
	case col.Type == "date":
		return fmt.Sprintf("%s >= '%s'::date", q, early.Format("2006-01-02"))
	case strings.HasPrefix(col.Type, "timestamp without time zone"):
		return fmt.Sprintf("%s >= '%s'::timestamp", q, early.Format("2006-01-02 15:04:05"))
	}
	return fmt.Sprintf("%s >= '%s'::timestamptz", q, early.Format(time.RFC3339))
}

func andWhere(a, b string) string {
	switch {
	case a == "":
		return b
	case b == "":
		return a
	}
	return "(" + a + ") AND " + b
}

// calendar is the watch's bucket calendar.
func calendar(w *config.Watch) connectors.Calendar {
	return connectors.Calendar{Unit: w.Bucket, Loc: w.Location}
}

func span(s config.Span) connectors.Span {
	return connectors.Span{Buckets: s.Buckets, Duration: s.Duration}
}

// windowStart returns the earliest bucket start inside the window ending
// at end.
func windowStart(end time.Time, w *config.Watch) time.Time {
	return calendar(w).WindowStart(end, span(w.Window))
}

// rescanFrom returns the first bucket a run rescans, given the newest
// stored bucket.
func rescanFrom(last time.Time, w *config.Watch) time.Time {
	return calendar(w).RescanFrom(last, span(w.Rescan))
}

// acc is a decoded bucket.
type acc struct {
	m *stream.Moments
	q *stream.QR
}

func decodeBucket(b Bucket) (acc, error) {
	m, err := stream.UnmarshalMoments(b.Moments)
	if err != nil {
		return acc{}, fmt.Errorf("bucket %s segment %s: %w", b.Start.Format(time.RFC3339), connectors.ParseSegmentKey(b.Segment), err)
	}
	a := acc{m: m}
	if len(b.QR) > 0 {
		if a.q, err = stream.UnmarshalQR(b.QR); err != nil {
			return acc{}, fmt.Errorf("bucket %s segment %s: %w", b.Start.Format(time.RFC3339), connectors.ParseSegmentKey(b.Segment), err)
		}
	}
	return a, nil
}

func encodeGroup(watch string, g connectors.Group, cols []string) (Bucket, error) {
	mb, err := g.Moments.MarshalBinary()
	if err != nil {
		return Bucket{}, err
	}
	b := Bucket{Watch: watch, Segment: g.Key.Segment, Start: g.Key.Bucket.UTC(), Columns: cols, Rows: g.Moments.N(), Moments: mb}
	if g.QR != nil {
		if b.QR, err = g.QR.MarshalBinary(); err != nil {
			return Bucket{}, err
		}
	}
	return b, nil
}

// merge folds accumulators into one (nil when there are none). cols are
// the watch's accumulated columns as configured; a categorical column among
// them is held by each accumulator as indicator columns, one per level seen
// (stream.IndicatorName), and accumulators that saw different levels
// are widened to the union of their columns before they merge.
func merge(cols []string, parts []acc) acc { return mergeKnown(cols, nil, parts) }

// mergeKnown is merge whose result also holds the columns of known (the
// levels a run knows of, knownColumns; nil for none): a known level that
// no part saw is an all-zero indicator, which the analysis reports absent.
func mergeKnown(cols, known []string, parts []acc) acc {
	if len(parts) == 0 {
		return acc{}
	}
	lists := make([][]string, len(parts), len(parts)+1)
	for i, p := range parts {
		lists[i] = p.m.Names()
	}
	if known != nil {
		lists = append(lists, known)
	}
	names := connectors.UnionColumns(factorsIn(cols, lists...), lists...)
	out := acc{m: stream.NewMoments(names)}
	withQR, extended := true, false
	for _, p := range parts {
		if p.q == nil {
			withQR = false
		} else if p.q.Extended() {
			extended = true
		}
	}
	switch {
	case withQR && extended:
		// Keep the low parts: float64 buckets merge into it as exact.
		out.q = stream.NewQRExtended(names)
	case withQR:
		out.q = stream.NewQR(names)
	}
	for _, p := range parts {
		out.m.Merge(p.m.Widen(names))
		if withQR {
			out.q.Merge(p.q.Widen(names))
		}
	}
	return out
}

// factorsIn returns the columns of cols that the accumulators with the
// given columns hold as indicator columns: the categorical ones, which no
// accumulator holds under their own name.
func factorsIn(cols []string, lists ...[]string) []string {
	var out []string
	for _, c := range cols {
		plain := false
		for _, l := range lists {
			if slices.Contains(l, c) {
				plain = true
				break
			}
		}
		if !plain {
			out = append(out, c)
		}
	}
	return out
}

// factorsOf describes the categorical columns among regressors for the
// diagnostics: each with the levels whose indicator columns the
// accumulator holds (in its order, which is the levels' byte order) and
// the base the watch names for it, if any.
func factorsOf(w *config.Watch, regressors []string, m *stream.Moments) []diagnostics.Factor {
	names := m.Names()
	var out []diagnostics.Factor
	for _, f := range factorsIn(regressors, names) {
		fac := diagnostics.Factor{Name: f, Base: w.BaseLevels[f]}
		for _, n := range names {
			if level, ok := indicatorLevel(f, n); ok {
				fac.Levels = append(fac.Levels, level)
			}
		}
		out = append(out, fac)
	}
	return out
}

// indicatorLevel returns the level of factor f that indicator column name stands
// for; ok is false when name is not one of f's indicators.
func indicatorLevel(f, name string) (string, bool) {
	if len(name) < len(f)+2 || !strings.HasPrefix(name, f+"[") || !strings.HasSuffix(name, "]") {
		return "", false
	}
	return name[len(f)+1 : len(name)-1], true
}

// factorOfColumn maps an accumulator column to the regressor it belongs
// to: an indicator column to its factor, any other column to itself.
func factorOfColumn(regressors []string, name string) string {
	if slices.Contains(regressors, name) {
		return name
	}
	for _, f := range regressors {
		if _, ok := indicatorLevel(f, name); ok {
			return f
		}
	}
	return name
}

// analyze runs the diagnostics on one accumulator with the watch's
// precision: fast uses the cross-products only, exact the QR factor,
// precise the double-double QR factor, and auto the QR factor when the
// cross-products cannot be trusted.
//
// ref, when given, holds the columns' SDs in a broader sample (the whole
// table, for a segment): the regression's low-variation verdict compares
// with them.
func analyze(w *config.Watch, regressors []string, a acc, ref ...map[string]float64) (*diagnostics.Report, error) {
	opt := diagnostics.Options{
		Target: w.Target, Columns: regressors, Groups: w.Groups, Factors: factorsOf(w, regressors, a.m),
		VIFLimit: w.Limits.VIF.Critical, CondLimit: w.Limits.Condition.Critical,
	}
	if len(ref) > 0 {
		opt.ReferenceSD = ref[0]
	}
	switch {
	case (w.Precision == "exact" || w.Precision == "precise") && a.q != nil:
		return diagnostics.Analyze(a.m, a.q, opt)
	case w.Precision == "fast" || a.q == nil:
		return diagnostics.Analyze(a.m, nil, opt)
	}
	rep, err := diagnostics.Analyze(a.m, nil, opt)
	if err != nil || rep.Trust.Trustworthy {
		return rep, err
	}
	return diagnostics.Analyze(a.m, a.q, opt)
}

// knownColumns returns the accumulated columns of every level a run knows
// of, in canonical order: the columns of the accumulators it holds (lists)
// and the levels, present or absent, of the watch's previous point (prev,
// nil for none). A level once seen stays known, so a window without it
// reports it absent rather than forgetting it. It returns nil when the
// watch has no categorical columns.
func knownColumns(cols []string, lists [][]string, prev *diagnostics.Report) []string {
	if len(lists) == 0 {
		return nil
	}
	factors := factorsIn(cols, lists...)
	if len(factors) == 0 {
		return nil
	}
	if prev != nil {
		var fs []connectors.Factor
		for _, g := range prev.GVIF {
			if g.Kind == diagnostics.GroupFactor && slices.Contains(factors, g.Name) {
				levels := slices.Concat(g.Levels, g.Absent)
				slices.Sort(levels)
				fs = append(fs, connectors.Factor{Name: g.Name, Levels: slices.Compact(levels)})
			}
		}
		lists = append(lists, connectors.ExpandNames(cols, fs))
	}
	return connectors.UnionColumns(factors, lists...)
}
