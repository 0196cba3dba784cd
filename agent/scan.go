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
		return nil, nil, nil, fmt.Errorf("watch %q: %d numeric column(s) to watch; multicollinearity needs two or more", w.Name, len(regressors))
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

// merge folds accumulators into one (nil when there are none).
func merge(cols []string, parts []acc) acc {
	if len(parts) == 0 {
		return acc{}
	}
	out := acc{m: stream.NewMoments(cols)}
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
		out.q = stream.NewQRExtended(cols)
	case withQR:
		out.q = stream.NewQR(cols)
	}
	for _, p := range parts {
		out.m.Merge(p.m)
		if withQR {
			out.q.Merge(p.q)
		}
	}
	return out
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
		Target: w.Target, Columns: regressors, Groups: w.Groups,
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
