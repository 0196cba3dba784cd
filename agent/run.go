package agent

import (
	"context"
	"fmt"
	"log/slog"
	"runtime/debug"
	"slices"
	"strings"
	"time"

	"plumb/agent/config"
	"plumb/connectors"
	"plumb/diagnostics"
)

// Clock tells the wall time; tests inject their own.
type Clock interface{ Now() time.Time }

// SystemClock is the real clock.
type SystemClock struct{}

func (SystemClock) Now() time.Time { return time.Now() }

// Runner runs watches: it scans, stores buckets and points, evaluates the
// rules and enqueues the notifications, each run in one transaction.
type Runner struct {
	Store  Store
	Config *config.Config
	Clock  Clock        // nil means SystemClock
	Logger *slog.Logger // nil means slog.Default()
	// OpenSource opens a source by URL; nil means connectors.Open with
	// the agent's options.
	OpenSource func(ctx context.Context, url string) (connectors.Source, error)
}

// RunOptions say what kind of run to do.
type RunOptions struct {
	Kind RunKind
	// From, for a backfill, is the first bucket to rescan; zero means the
	// whole history.
	From time.Time
	// Notify, for a backfill, delivers the events it records as they
	// happened; without it a backfill delivers nothing and leaves the
	// alerts still open to the next live run.
	Notify bool
}

// Outcome is what a run did.
type Outcome struct {
	Run  Run
	Open []Alert // the watch's open alerts after the run
	// Verdict is the worst severity among the open alerts ("" for none).
	Verdict Severity
	Err     error // why the run failed (also in Run.Error)
}

func (r *Runner) now() time.Time {
	if r.Clock == nil {
		return time.Now()
	}
	return r.Clock.Now()
}

func (r *Runner) logger() *slog.Logger {
	if r.Logger == nil {
		return slog.Default()
	}
	return r.Logger
}

// pointObs is a computed point with its observation.
type pointObs struct {
	p Point
	o Observation
}

// collected is what the scanning half of a run produced.
type collected struct {
	points       map[string][]pointObs // by segment, oldest first
	buckets      []Bucket
	replaceFrom  time.Time // buckets and points from here are replaced
	replaceAll   bool
	rebuilt      bool // the whole history was recomputed: replay the rules
	read         int64
	dropped      int64
	scanned      int
	skipped      []string // points that could not be analyzed, with why
	latest       time.Time
	segmentOrder []string
	// known are the accumulated columns of every level of the watch's
	// categorical columns the run knows of (knownColumns); nil without any.
	known []string
}

// Run runs one watch once. A failed run is recorded (and counted towards
// the blind rule) and returned as Outcome.Err, with a nil error; the error
// is for a run that could not even be recorded.
//
// Run is the one place where agent, check and backfill meet a run's
// panics: a panic while scanning, analyzing or judging is a failed run,
// recorded like any other with a *PanicError as its error, and the
// caller goes on with its other watches. A panic elsewhere (reading or
// writing the store) comes back as a *PanicError with nothing recorded.
func (r *Runner) Run(ctx context.Context, w *config.Watch, opt RunOptions) (out *Outcome, err error) {
	defer func() {
		if p := recover(); p != nil {
			out, err = nil, r.panicked(w, p)
		}
	}()
	if opt.Kind == "" {
		opt.Kind = RunLive
	}
	log := r.logger().With("watch", w.Name)
	started := r.now()
	states, err := r.Store.States(ctx, w.Name)
	if err != nil {
		return nil, err
	}
	stored, err := r.Store.Alerts(ctx, AlertQuery{Watch: w.Name})
	if err != nil {
		return nil, err
	}
	res := &RunResult{Run: Run{Watch: w.Name, Kind: opt.Kind, StartedAt: started}}
	var col *collected
	scanErr := r.guard(w, func() (err error) {
		col, err = r.collect(ctx, w, opt)
		return err
	})
	if ctx.Err() != nil {
		// Abandoned (shutdown): record nothing, so the next run redoes it.
		return nil, fmt.Errorf("watch %q: run abandoned: %w", w.Name, context.Cause(ctx))
	}
	ev := newEvaluation(r, w, opt, stored, states)
	now := r.now()
	if scanErr == nil {
		var evalErr error
		scanErr = r.guard(w, func() error {
			evalErr = ev.success(ctx, col, now)
			return nil
		})
		if evalErr != nil {
			return nil, evalErr
		}
		if scanErr == nil {
			scanErr = r.guard(w, func() error { ev.finish(res, now); return nil })
		}
		if scanErr != nil {
			// The rules panicked half way: judge the run afresh, as a
			// failure, from the stored state.
			if ev, err = r.freshEvaluation(ctx, w, opt); err != nil {
				return nil, err
			}
			*res = RunResult{Run: Run{Watch: w.Name, Kind: opt.Kind, StartedAt: started}}
		}
	}
	if scanErr != nil {
		res.Run.Status, res.Run.Error = StatusFailed, scanErr.Error()
		ev.failure(scanErr, now)
		ev.finish(res, now)
		log.Warn("run failed", "err", scanErr, "consecutive_failures", ev.failures)
	} else {
		res.Run.Status = StatusOK
		res.Run.RowsRead, res.Run.RowsDropped, res.Run.BucketsScanned = col.read, col.dropped, col.scanned
		res.Buckets = col.buckets
		res.ReplaceAllBuckets = col.replaceAll
		if !col.replaceFrom.IsZero() {
			res.ReplaceBucketsFrom = col.replaceFrom
			res.ReplacePointsFrom = col.replaceFrom.Add(time.Microsecond)
		}
		if col.replaceAll {
			res.ReplacePointsFrom = time.UnixMicro(-1 << 62)
		}
		for _, seg := range col.segmentOrder {
			for _, po := range col.points[seg] {
				res.Points = append(res.Points, po.p)
			}
		}
		res.Run.Points = len(res.Points)
		res.Run.AsOf = col.latest
		for _, s := range col.skipped {
			log.Debug("point skipped", "why", s)
		}
	}
	res.Run.FinishedAt = r.now()
	if _, err := r.Store.CommitRun(ctx, res); err != nil {
		return nil, err
	}
	out = &Outcome{Run: res.Run, Err: scanErr}
	for _, a := range ev.openAlerts() {
		out.Open = append(out.Open, a)
		if out.Verdict == "" || sevRank(a.Severity) > sevRank(out.Verdict) {
			out.Verdict = a.Severity
		}
	}
	log.Info("run", "kind", opt.Kind, "status", res.Run.Status, "rows_read", res.Run.RowsRead,
		"points", res.Run.Points, "open_alerts", len(out.Open), "took", res.Run.FinishedAt.Sub(started).Round(time.Millisecond))
	return out, nil
}

// freshEvaluation reads the watch's alerts and rule states again, for a
// run whose evaluation was left half done.
func (r *Runner) freshEvaluation(ctx context.Context, w *config.Watch, opt RunOptions) (*evaluation, error) {
	states, err := r.Store.States(ctx, w.Name)
	if err != nil {
		return nil, err
	}
	stored, err := r.Store.Alerts(ctx, AlertQuery{Watch: w.Name})
	if err != nil {
		return nil, err
	}
	return newEvaluation(r, w, opt, stored, states), nil
}

// PanicError is a run that panicked: a bug in plumb (or in a library it
// uses) met by some data. The stack goes to the log at debug level.
type PanicError struct {
	Watch string
	Value any
}

func (e *PanicError) Error() string {
	return fmt.Sprintf("watch %q: run panicked: %v (a bug in plumb; please report it with the log of a run with debug logging)", e.Watch, e.Value)
}

// guard runs f and turns a panic in it into a *PanicError.
func (r *Runner) guard(w *config.Watch, f func() error) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = r.panicked(w, p)
		}
	}()
	return f()
}

func (r *Runner) panicked(w *config.Watch, p any) error {
	r.logger().Error("run panicked", "watch", w.Name, "panic", fmt.Sprint(p))
	r.logger().Debug("run panicked: stack", "watch", w.Name, "stack", string(debug.Stack()))
	return &PanicError{Watch: w.Name, Value: p}
}

func (r *Runner) openSource(ctx context.Context, w *config.Watch) (connectors.Source, string, error) {
	url := r.Config.SourceURL(w.Source)
	open := r.OpenSource
	if open == nil {
		open = func(ctx context.Context, url string) (connectors.Source, error) {
			return connectors.Open(ctx, url, connectors.Options{AppName: "plumb-agent", Pushdown: w.Pushdown})
		}
	}
	src, err := open(ctx, url)
	if err != nil {
		return nil, "", fmt.Errorf("watch %q: source %q: %w", w.Name, w.Source, err)
	}
	return src, url, nil
}

// collect scans what the run needs and computes its points.
func (r *Runner) collect(ctx context.Context, w *config.Watch, opt RunOptions) (*collected, error) {
	src, url, err := r.openSource(ctx, w)
	if err != nil {
		return nil, err
	}
	defer src.Close()
	req := connectors.Request{Table: w.Table, Query: w.Query, Where: w.Where,
		TimeColumn: w.TimeColumn, Bucket: w.Bucket, Location: w.Location,
		Segment: w.SegmentBy, MaxSegments: w.MaxSegments, MaxLevels: w.MaxLevels, QR: w.Precision != "fast" && !w.Pushdown, Extended: w.Precision == "precise"}
	described, err := src.Describe(ctx, req)
	if err != nil {
		return nil, fmt.Errorf("watch %q: %w", w.Name, err)
	}
	regressors, cols, timeCol, err := chooseColumns(w, described, req)
	if err != nil {
		return nil, err
	}
	req.Columns = cols
	col := &collected{points: map[string][]pointObs{}}

	if w.Bucket == "" {
		res, err := src.Scan(ctx, req)
		if err != nil {
			return nil, fmt.Errorf("watch %q: %w", w.Name, err)
		}
		col.read = res.Read
		at := r.now().UTC().Truncate(time.Second)
		bySeg := map[string][]acc{}
		for _, g := range res.Groups {
			col.dropped += g.Moments.Counts().Dropped
			bySeg[g.Key.Segment] = append(bySeg[g.Key.Segment], acc{g.Moments, g.QR})
		}
		col.latest = at
		if col.known, err = r.knownColumns(ctx, w, cols, res.Groups, nil); err != nil {
			return nil, err
		}
		if err := r.points(w, regressors, cols, at, bySeg, col, nil); err != nil {
			return nil, err
		}
		return col, nil
	}

	// Bucketed: rescan the newest buckets (or everything), merge windows
	// from the stored buckets.
	last, have, err := r.Store.LastBucket(ctx, w.Name)
	if err != nil {
		return nil, err
	}
	full := !have || opt.Kind == RunBackfill && opt.From.IsZero()
	var since time.Time
	if have && !full {
		lastB, err := r.Store.Buckets(ctx, w.Name, last, last.Add(time.Microsecond))
		if err != nil {
			return nil, err
		}
		if len(lastB) == 0 || !slices.Equal(lastB[0].Columns, cols) {
			r.logger().Info("columns changed: rebuilding the history", "watch", w.Name, "columns", strings.Join(cols, ","))
			full = true
		} else if w.Pushdown {
			req.Centres = lastMeans(lastB, cols)
		}
	}
	switch {
	case full:
		col.replaceAll, col.rebuilt = true, true
	case opt.Kind == RunBackfill:
		since = calendar(w).Floor(opt.From)
		col.rebuilt = true
	default:
		since = rescanFrom(last, w)
	}
	if !since.IsZero() {
		req.Where = andWhere(req.Where, sinceFilter(url, *timeCol, since))
	}
	res, err := src.Scan(ctx, req)
	if err != nil {
		return nil, fmt.Errorf("watch %q: %w", w.Name, err)
	}
	col.read = res.Read
	col.replaceFrom = since
	scanned := map[time.Time]bool{}
	accs := map[bucketKey]acc{}
	for _, g := range res.Groups {
		start := g.Key.Bucket.UTC()
		if start.Before(since) {
			continue // the filter's margin
		}
		col.dropped += g.Moments.Counts().Dropped
		b, err := encodeGroup(w.Name, g, cols)
		if err != nil {
			return nil, fmt.Errorf("watch %q: encoding bucket: %w", w.Name, err)
		}
		col.buckets = append(col.buckets, b)
		scanned[start] = true
		accs[bucketKey{start, g.Key.Segment}] = acc{g.Moments, g.QR}
	}
	col.scanned = len(scanned)
	if len(scanned) == 0 {
		return col, nil
	}
	starts := make([]time.Time, 0, len(scanned))
	for s := range scanned {
		starts = append(starts, s)
	}
	slices.SortFunc(starts, func(a, b time.Time) int { return a.Compare(b) })
	if !since.IsZero() {
		// Older buckets that windows ending after since still cover.
		from := windowStart(calendar(w).End(starts[0]), w)
		older, err := r.Store.Buckets(ctx, w.Name, from, since)
		if err != nil {
			return nil, err
		}
		for _, b := range older {
			if !slices.Equal(b.Columns, cols) {
				continue
			}
			a, err := decodeBucket(b)
			if err != nil {
				return nil, fmt.Errorf("watch %q: stored %w", w.Name, err)
			}
			accs[bucketKey{b.Start, b.Segment}] = a
		}
	}
	hist, err := r.history(ctx, w, cols, accs, starts[0], !since.IsZero())
	if err != nil {
		return nil, err
	}
	if col.known, err = r.knownColumns(ctx, w, cols, nil, accs); err != nil {
		return nil, err
	}
	// One point per scanned bucket: the window ending at its end.
	for _, s := range starts {
		end := calendar(w).End(s)
		bySeg := orderedBySeg(accs, windowStart(end, w), end)
		if err := r.points(w, regressors, cols, end, bySeg, col, hist); err != nil {
			return nil, err
		}
		col.latest = end
	}
	return col, nil
}

// knownColumns gathers the columns of the levels a run knows of: those of
// the groups it scanned or the buckets it holds, and those of the watch's
// latest stored point (see knownColumns in scan.go).
func (r *Runner) knownColumns(ctx context.Context, w *config.Watch, cols []string, groups []connectors.Group, accs map[bucketKey]acc) ([]string, error) {
	var lists [][]string
	for _, g := range groups {
		lists = append(lists, g.Moments.Names())
	}
	for _, a := range accs {
		lists = append(lists, a.m.Names())
	}
	if len(factorsIn(cols, lists...)) == 0 {
		return nil, nil
	}
	var prev *diagnostics.Report
	ps, err := r.Store.Points(ctx, w.Name, PointQuery{Limit: 1})
	if err != nil {
		return nil, err
	}
	if len(ps) == 1 && len(ps[0].Report) > 0 {
		if rep, _, err := decodeReport(ps[0].Report); err == nil {
			prev = rep
		}
	}
	return knownColumns(cols, lists, prev), nil
}

// history wraps a run's bucket accumulators for onsets and warm-up: the
// oldest bucket of each segment comes from the store (when the run did not
// rescan everything) and from what the run scanned.
func (r *Runner) history(ctx context.Context, w *config.Watch, cols []string, accs map[bucketKey]acc, oldestScanned time.Time, incremental bool) (*bucketHistory, error) {
	h := &bucketHistory{ctx: ctx, store: r.Store, w: w, cal: calendar(w), cols: cols, accs: accs,
		first: map[string]time.Time{}, loadedFrom: oldestScanned}
	if incremental {
		stored, err := r.Store.FirstBuckets(ctx, w.Name)
		if err != nil {
			return nil, err
		}
		h.first = stored
	}
	for k := range accs {
		if f, ok := h.first[k.seg]; !ok || k.start.Before(f) {
			h.first[k.seg] = k.start
		}
		if k.start.Before(h.loadedFrom) {
			h.loadedFrom = k.start
		}
	}
	return h, nil
}

// bucketKey names a bucket accumulator within a run.
type bucketKey struct {
	start time.Time
	seg   string
}

// orderedBySeg gathers, per segment, the accumulators of the buckets
// starting in [from, end), in bucket order, so that merging does not
// depend on map order.
func orderedBySeg(accs map[bucketKey]acc, from, end time.Time) map[string][]acc {
	type kv struct {
		start time.Time
		seg   string
		a     acc
	}
	var list []kv
	for k, a := range accs {
		if !k.start.Before(from) && k.start.Before(end) {
			list = append(list, kv{k.start, k.seg, a})
		}
	}
	slices.SortFunc(list, func(a, b kv) int {
		if c := a.start.Compare(b.start); c != 0 {
			return c
		}
		return strings.Compare(a.seg, b.seg)
	})
	out := map[string][]acc{}
	for _, x := range list {
		out[x.seg] = append(out[x.seg], x.a)
	}
	return out
}

// points analyzes the window ending at at: the whole table (all segments
// merged, in segment order) and, with segment_by, each segment. With a
// bucket history (bucketed watches) each point also gets its window's
// fullness, the onsets of its exact dependencies and constant columns, and
// the judged numbers of its last bucket alone.
func (r *Runner) points(w *config.Watch, regressors, cols []string, at time.Time, bySeg map[string][]acc, col *collected, hist *bucketHistory) error {
	segs := make([]string, 0, len(bySeg))
	for s := range bySeg {
		segs = append(segs, s)
	}
	slices.Sort(segs)
	var all []acc
	for _, s := range segs {
		all = append(all, bySeg[s]...)
	}
	todo := []string{""}
	if w.SegmentBy != "" {
		todo = append(todo, segs...)
	}
	var wholeSDs map[string]float64 // a segment's variation is judged against the whole table's
	for _, seg := range todo {
		parts := all
		if seg != "" {
			parts = bySeg[seg]
		}
		a := mergeKnown(cols, col.known, parts)
		if a.m == nil || a.m.N() == 0 {
			continue
		}
		rep, err := analyze(w, regressors, a, wholeSDs)
		if err == nil && seg == "" && w.Target != "" {
			wholeSDs = rep.ColumnSDs()
		}
		if err != nil {
			col.skipped = append(col.skipped, fmt.Sprintf("%s segment %s: %v", at.Format(time.RFC3339), connectors.ParseSegmentKey(seg), err))
			continue
		}
		x := newExtra()
		if hist != nil {
			if x.Recent, err = r.recentExact(w, regressors, rep, seg, at, hist); err != nil {
				return err
			}
		}
		judgedCols := regressors
		if out := leftOut(rep, x.Recent...); len(out) > 0 {
			x.LeftOut = out
			// A categorical column leaves with any of its indicators.
			gone := map[string]bool{}
			for _, c := range out {
				gone[factorOfColumn(regressors, c)] = true
			}
			judgedCols = slices.DeleteFunc(slices.Clone(regressors), func(c string) bool { return gone[c] })
			if len(judgedCols) >= 2 {
				if x.Judged, err = analyze(w, judgedCols, a); err != nil {
					x.Judged = nil
				}
			}
		}
		if hist != nil {
			if err := r.bucketExtras(w, judgedCols, rep, seg, at, hist, x); err != nil {
				return err
			}
		}
		p, o, err := pointFrom(w.Name, seg, at, rep, x, w.Limits.ConditionBasis)
		if err != nil {
			col.skipped = append(col.skipped, err.Error())
			continue
		}
		if _, ok := col.points[seg]; !ok {
			col.segmentOrder = append(col.segmentOrder, seg)
		}
		col.points[seg] = append(col.points[seg], pointObs{p, o})
	}
	return nil
}

// recentBuckets is the length of the tail of a window in which exact
// dependencies are looked for before the whole window shows them (common
// practice, no source: a week of daily buckets).
const recentBuckets = 7

// recentExact returns the exact dependencies among two or more columns
// that hold in the last recentBuckets buckets of the window ending at at
// but not in the whole window. So that a short stretch of slowly changing
// columns (counts that step once) cannot pass for one, the tail needs
// minBucketRows rows per column and every column of a dependency must vary
// within at least two of its buckets.
func (r *Runner) recentExact(w *config.Watch, regressors []string, rep *diagnostics.Report, seg string, at time.Time, hist *bucketHistory) ([]diagnostics.Dependency, error) {
	if w.Window.Buckets > 0 && w.Window.Buckets <= recentBuckets || w.Window.Buckets == 0 && w.Window.Duration <= hist.cal.Add(at, -recentBuckets).Sub(at).Abs() {
		return nil, nil
	}
	var parts []acc
	for t, i := hist.cal.LastBucket(at), 0; i < recentBuckets; t, i = hist.cal.Add(t, -1), i+1 {
		a, ok, err := hist.bucket(seg, t)
		if err != nil {
			return nil, err
		}
		if ok {
			parts = append(parts, a)
		}
	}
	tail := merge(hist.cols, parts)
	if tail.m == nil || tail.m.N() < int64(minBucketRows*(len(regressors)+1)) {
		return nil, nil
	}
	trep, err := analyze(w, regressors, tail)
	if err != nil {
		return nil, nil
	}
	have := map[string]bool{}
	for _, d := range rep.Dependencies {
		if d.Kind == diagnostics.KindExact {
			have[ExactDependency{Columns: d.Columns}.subjectKey()] = true
		}
	}
	var out []diagnostics.Dependency
	for _, d := range trep.Dependencies {
		if d.Kind != diagnostics.KindExact || len(d.Columns) < 2 || have[ExactDependency{Columns: d.Columns}.subjectKey()] {
			continue
		}
		if slices.ContainsFunc(d.Columns, func(c string) bool { return variesWithin(parts, c) < 2 }) {
			continue
		}
		out = append(out, d)
	}
	return out, nil
}

// variesWithin counts the buckets in which column c takes more than one
// value.
func variesWithin(parts []acc, c string) int {
	n := 0
	for _, a := range parts {
		if j := slices.Index(a.m.Names(), c); j >= 0 && a.m.Max(j) > a.m.Min(j) {
			n++
		}
	}
	return n
}

// minBucketRows is how many rows per judged column (and the intercept) a
// single bucket needs before its own VIFs and condition number are used
// for trends (common practice, no source: with fewer, one bucket's
// estimates scatter more than the drift they should show).
const minBucketRows = 5

// bucketExtras fills a bucketed point's extras: the window's start and
// fullness, the onsets of exact dependencies and constant columns, and the
// judged numbers of the window's last bucket alone.
func (r *Runner) bucketExtras(w *config.Watch, judgedCols []string, rep *diagnostics.Report, seg string, at time.Time, hist *bucketHistory, x *pointExtra) error {
	x.WindowStart = windowStart(at, w)
	x.LastBucket = hist.cal.LastBucket(at)
	x.Full = hist.full(seg, at)
	for _, d := range append(slices.Clone(rep.Dependencies), x.Recent...) {
		if d.Kind != diagnostics.KindExact {
			continue
		}
		var key string
		var holds func(acc) bool
		if len(d.Columns) == 1 {
			key = constantKey(d.Dependent)
			v := *d.Intercept
			holds = func(a acc) bool { return constantHolds(d.Dependent, v, a) }
		} else {
			key = ExactDependency{Columns: d.Columns}.subjectKey()
			holds = func(a acc) bool { return equationHolds(d, a) }
		}
		on, err := hist.onset(seg, at, holds)
		if err != nil {
			return err
		}
		if !on.IsZero() {
			if x.Onsets == nil {
				x.Onsets = map[string]time.Time{}
			}
			x.Onsets[key] = on
		}
	}
	last, ok, err := hist.bucket(seg, hist.cal.LastBucket(at))
	if err != nil || !ok || len(judgedCols) < 2 || last.m.N() < int64(minBucketRows*(len(judgedCols)+1)) {
		return err
	}
	brep, err := analyze(w, judgedCols, last)
	if err != nil {
		return nil // too few usable rows in that bucket: no per-bucket numbers
	}
	if len(leftOut(brep)) > 0 {
		return nil // the bucket alone is singular: its numbers say nothing of a drift
	}
	_, vif, _ := judgedNumbers(brep, config.ConditionCentered)
	x.BucketVIF = jfloat(vif)
	x.BucketCond = jfloat(finiteOrInf(brep.ConditionNumber))
	x.BucketCCond = jfloat(finiteOrInf(brep.CenteredConditionNumber))
	return nil
}

// lastMeans returns the columns' means in the newest stored bucket (all
// its segments merged): the provisional centres a pushdown shifts the
// values by where the database has no statistics (a foreign partition
// never ANALYZEd on the coordinator). Nil when they cannot be read.
func lastMeans(last []Bucket, cols []string) map[string]float64 {
	var parts []acc
	for _, b := range last {
		a, err := decodeBucket(b)
		if err != nil || !slices.Equal(a.m.Names(), cols) {
			return nil
		}
		parts = append(parts, a)
	}
	m := merge(cols, parts).m
	if m == nil || m.N() == 0 {
		return nil
	}
	out := make(map[string]float64, len(cols))
	for j, c := range cols {
		out[c] = m.Mean(j)
	}
	return out
}
