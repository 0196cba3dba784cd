package postgres

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"plumb/connectors"
	"plumb/stream"
)

// pushStrategy is how the pushdown aggregate stays numerically safe.
type pushStrategy int

const (
	// pushAuto: pushShifted for a whole table (and for weights and engines
	// without the updating aggregates), pushRegr for buckets and segments
	// on PostgreSQL 12+.
	pushAuto pushStrategy = iota
	// pushRegr: regr_sxy and avg, which PostgreSQL 12 and later compute by
	// the Youngs–Cramer updating algorithm per group and combine across
	// parallel workers pairwise (float8_regr_accum, float8_regr_combine).
	// Its error grows with a column's |mean|/spread, so columns whose
	// provisional mean is large against their spread are shifted by it
	// first. Each group is centred on its own mean, which a shift taken
	// from the whole table is not, so buckets and segments use it.
	pushRegr
	// pushShifted: plain float8 sums of values and of products all
	// shifted by provisional means, Σ(x−c) and Σ(x−c)(y−c′). The shifted
	// values are computed once per row (see fence), so the aggregate costs
	// little more than the bare sums of products; the updating aggregates
	// cost half as much again.
	pushShifted
)

// shiftRatio: under pushRegr, a column is shifted when its provisional
// |mean| exceeds this many standard deviations (the Youngs–Cramer error is
// about ε·√n·|mean|/sd, so at most ~1e-10 relative for 10⁸ rows).
const shiftRatio = 100

// pushdownShiftRows is how many complete rows the shift query averages.
const pushdownShiftRows = 1000

// pushdown computes the accumulators inside PostgreSQL: a small count query
// (rows, rows without a time, inexact values), one aggregate per bucket and
// segment over the complete rows, and the per-column missing counts only
// when rows were dropped. The server returns O(p²) numbers per group
// whatever the number of rows.
//
// The aggregate first keeps the rows without NULLs, a test far cheaper than
// two range comparisons per value. NaN and ±Infinity are rare in a table
// and show in each group's min and max (PostgreSQL orders NaN above
// +Infinity); only when one of them does is the aggregate run again over
// the finite rows.
func (s *Source) pushdown(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if req.QR || req.Extended {
		return nil, fmt.Errorf("--pushdown returns cross-products, not the QR factor; scan without --pushdown for QR accuracy: %w", connectors.ErrUnsupported)
	}
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return nil, s.wrap(err, "cannot connect")
	}
	defer conn.Release()
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly, IsoLevel: pgx.RepeatableRead})
	if err != nil {
		return nil, s.wrap(err, "begin")
	}
	defer tx.Rollback(context.Background())
	// JIT compiling an aggregate of a few hundred expressions costs more
	// than it saves.
	if _, err := tx.Exec(ctx, "SET LOCAL jit = off"); err != nil {
		return nil, s.wrap(err, "SET jit")
	}
	t, plan, st, err := s.prepare(ctx, tx, req)
	if err != nil {
		return nil, err
	}
	strategy := s.push
	if strategy == pushAuto {
		strategy = pushShifted
		if s.version >= 120000 && plan.Weight == nil && (plan.Time != nil || plan.Segment != nil) {
			strategy = pushRegr
		}
	}
	if strategy == pushRegr && plan.Weight != nil {
		return nil, fmt.Errorf("%s: weighted pushdown needs the shifted sums: %w", t.source, connectors.ErrUnsupported)
	}
	pd, err := newPush(t, plan, st)
	if err != nil {
		return nil, err
	}
	res := &connectors.Result{
		Columns:    plan.Names(),
		Sampled:    req.SamplePct > 0 && req.SamplePct < 100,
		Inexact:    make([]int64, len(plan.Values)),
		Skipped:    plan.Skipped,
		Partitions: 1,
		Pushdown:   true,
	}
	rowsIn := map[gkey]int64{}
	var order []gkey

	// 1. Rows per group, rows without a time, inexact values.
	rows, err := tx.Query(ctx, pd.countSQL())
	if err != nil {
		return nil, s.wrap(err, t.source)
	}
	err = forRows(rows, func(v []any) error {
		k, ok := pd.key(v)
		n := v[2].(int64)
		res.Read += n
		for i, j := range pd.lay.flags {
			res.Inexact[j] += v[3+i].(int64)
		}
		if !ok {
			res.NoTime += n
			return nil
		}
		rowsIn[k] = n
		order = append(order, k)
		return nil
	})
	if err != nil {
		return nil, s.wrap(err, t.source)
	}
	if err := pd.checkSegments(order, plan.MaxSegments); err != nil {
		return nil, err
	}

	// 2. The aggregate over complete rows, on values shifted and scaled
	// by figures from the first rows. Should the first rows be far
	// smaller than the rest (a product then overflows, which PostgreSQL
	// reports as an error), the scales are taken from the whole table and
	// the aggregate runs again.
	if err := pd.shift(ctx, tx, s, strategy == pushShifted); err != nil {
		return nil, err
	}
	groups, err := pd.aggregateOnce(ctx, tx, strategy, order, rowsIn)
	if outOfRange(err) {
		if err = pd.tableScales(ctx, tx); err == nil {
			groups, err = pd.aggregateOnce(ctx, tx, strategy, order, rowsIn)
		}
	}
	if err != nil {
		return nil, s.wrap(err, t.source)
	}

	// 3. Missing counts, only when rows were dropped.
	dropped := false
	for _, st := range groups {
		st.Dropped -= st.Used
		dropped = dropped || st.Dropped > 0
	}
	if dropped {
		rows, err = tx.Query(ctx, pd.missingSQL())
		if err != nil {
			return nil, s.wrap(err, t.source)
		}
		err = forRows(rows, func(v []any) error {
			k, ok := pd.key(v)
			if st := groups[k]; ok && st != nil {
				pd.fillMissing(st, v[2:])
			}
			return nil
		})
		if err != nil {
			return nil, s.wrap(err, t.source)
		}
	}
	for _, k := range order {
		m, err := groups[k].Moments()
		if err != nil {
			return nil, err
		}
		var key connectors.Key
		if plan.Time != nil {
			key.Bucket = time.UnixMicro(k.bucket).In(plan.Location)
		}
		key.Segment = k.seg
		res.Groups = append(res.Groups, connectors.Group{Key: key, Moments: m})
	}
	connectors.SortGroups(res.Groups)
	return res, nil
}

// aggregateOnce runs the aggregate inside a savepoint, so that an error
// (a value out of range) leaves the transaction usable for a retry.
func (pd *push) aggregateOnce(ctx context.Context, tx pgx.Tx, strategy pushStrategy, order []gkey, rowsIn map[gkey]int64) (map[gkey]*connectors.Stats, error) {
	sp, err := tx.Begin(ctx)
	if err != nil {
		return nil, err
	}
	groups, err := pd.aggregate(ctx, sp, strategy, order, rowsIn)
	if err != nil {
		sp.Rollback(context.Background())
		return nil, err
	}
	return groups, sp.Commit(ctx)
}

// aggregate runs the aggregate over complete rows: first over the rows
// without NULLs, again over the finite ones if a NaN or an infinity showed.
func (pd *push) aggregate(ctx context.Context, tx pgx.Tx, strategy pushStrategy, order []gkey, rowsIn map[gkey]int64) (map[gkey]*connectors.Stats, error) {
	var groups map[gkey]*connectors.Stats
	for _, cond := range []string{pd.notNull(), pd.ok()} {
		groups = make(map[gkey]*connectors.Stats, len(order))
		for _, k := range order {
			st := pd.newStats()
			st.Dropped = rowsIn[k] // until the aggregate says how many were used
			groups[k] = st
		}
		rows, err := tx.Query(ctx, pd.aggSQL(strategy, cond), pgx.QueryResultFormats{pgx.BinaryFormatCode})
		if err != nil {
			return nil, err
		}
		err = forRows(rows, func(v []any) error {
			k, _ := pd.key(v)
			if v[2].(int64) == 0 {
				return nil // an ungrouped aggregate over no rows
			}
			st := groups[k]
			if st == nil {
				return fmt.Errorf("aggregate returned a group the count did not: %v", k)
			}
			return pd.fill(st, v[2:], strategy)
		})
		if err != nil {
			return nil, err
		}
		if allFinite(groups) {
			break
		}
	}
	return groups, nil
}

// outOfRange reports whether err is PostgreSQL's "value out of range"
// (float8 overflow or underflow, SQLSTATE 22003).
func outOfRange(err error) bool {
	var pe *pgconn.PgError
	return errors.As(err, &pe) && pe.Code == "22003"
}

type gkey struct {
	bucket int64
	seg    string
}

func forRows(rows pgx.Rows, fn func([]any) error) error {
	defer rows.Close()
	for rows.Next() {
		v, err := rows.Values()
		if err != nil {
			return err
		}
		if err := fn(v); err != nil {
			return err
		}
	}
	return rows.Err()
}

// push builds the pushdown statements over one inner SELECT whose columns
// are bk (bucket), sk (segment), w (weight), x1…xp and f1… (inexact flags).
type push struct {
	t       *target
	plan    *connectors.Plan
	lay     layout
	inner   string
	p       int
	shiftBy []float64 // c, per column (0: not shifted)
	scaleBy []float64 // s, per column: powers of two (stream.ScaleFor)
}

func newPush(t *target, plan *connectors.Plan, st stmt) (*push, error) {
	pd := &push{t: t, plan: plan, p: len(plan.Values)}
	list := []string{"NULL::timestamptz AS bk", "NULL::text AS sk"}
	if plan.Time != nil {
		zone, err := zoneLiteral(plan.Location)
		if err != nil {
			return nil, err
		}
		list[0] = bucketExpr(plan.Time.Name, t.base[plan.Time.Name], plan.Bucket, zone) + " AS bk"
	}
	if plan.Segment != nil {
		// The segment key (connectors.SegmentKey), NULL as NullSegment.
		list[1] = "coalesce(" + quoteLiteral(connectors.SegmentPrefix) + " || " + connectors.QuoteIdent(plan.Segment.Name) + "::text, " +
			quoteLiteral(connectors.NullSegment) + ") AS sk"
	}
	if plan.Weight != nil {
		list = append(list, valueExpr(plan.Weight.Name, t.base[plan.Weight.Name])+" AS w")
	}
	for j, c := range plan.Values {
		list = append(list, fmt.Sprintf("%s AS x%d", valueExpr(c.Name, t.base[c.Name]), j))
	}
	for j, c := range plan.Values {
		if e := inexactExpr(c.Name, t.base[c.Name]); e != "" {
			list = append(list, fmt.Sprintf("%s AS f%d", e, len(pd.lay.flags)))
			pd.lay.flags = append(pd.lay.flags, j)
		}
	}
	pd.inner = st.sql(list)
	return pd, nil
}

func (pd *push) from() string {
	if pd.t.query != "" {
		// The query's WITH must stay at the top: wrap the whole statement.
		return "(\n" + pd.inner + "\n) AS r"
	}
	return "(" + pd.inner + ") AS r"
}

// ok is the condition for a complete row: every value finite (NULL fails
// both comparisons, and PostgreSQL sorts NaN above +Inf) and a usable
// weight. Range comparisons, unlike x − x = 0, leave the planner a sound
// row estimate, so it keeps the parallel partial aggregation.
func (pd *push) ok() string {
	var c []string
	for j := 0; j < pd.p; j++ {
		c = append(c, fmt.Sprintf("x%d > '-Infinity'::float8 AND x%d < 'Infinity'::float8", j, j))
	}
	if pd.plan.Weight != nil {
		c = append(c, pd.wok())
	}
	if pd.plan.Time != nil {
		c = append(c, "bk IS NOT NULL")
	}
	return strings.Join(c, " AND ")
}

// notNull is the first, cheaper condition for a complete row: no NULL
// value or weight, and a time. A NaN or an infinity passes it; allFinite
// finds them afterwards. With a weight it is ok, as a weight's sign is not
// in the aggregate's min and max.
func (pd *push) notNull() string {
	if pd.plan.Weight != nil {
		return pd.ok()
	}
	var c []string
	for j := 0; j < pd.p; j++ {
		c = append(c, fmt.Sprintf("x%d IS NOT NULL", j))
	}
	if pd.plan.Time != nil {
		c = append(c, "bk IS NOT NULL")
	}
	return strings.Join(c, " AND ")
}

// allFinite reports whether every value the aggregate folded in was finite:
// a NaN makes a column's max NaN (PostgreSQL sorts it above +Infinity),
// +Infinity its max and -Infinity its min.
func allFinite(groups map[gkey]*connectors.Stats) bool {
	for _, st := range groups {
		if st.Used == 0 {
			continue
		}
		for j := range st.Min {
			if !(st.Min[j] > math.Inf(-1) && st.Max[j] < math.Inf(1)) {
				return false
			}
		}
	}
	return true
}

// wok mirrors the stream package: a weight is usable when 0 ≤ w < +Inf
// (NaN compares above +Inf in PostgreSQL, so it fails too).
func (pd *push) wok() string { return "(w >= 0 AND w < 'Infinity'::float8)" }

func (pd *push) countSQL() string {
	list := []string{"bk", "sk", "count(*)"}
	for i := range pd.lay.flags {
		list = append(list, fmt.Sprintf("count(*) FILTER (WHERE f%d)", i))
	}
	return "SELECT " + strings.Join(list, ", ") + " FROM " + pd.from() + " GROUP BY bk, sk"
}

// shift takes provisional scales, means and spreads from the first
// complete rows (cheap queries: they stop after pushdownShiftRows rows).
// The scales come first, from the largest magnitudes, with nothing summed
// (PostgreSQL's avg and stddev of values near 1e200 overflow); the means
// and spreads are then taken of the scaled values. With all set, every
// column is shifted; otherwise only those whose mean is large against
// their spread.
func (pd *push) shift(ctx context.Context, tx pgx.Tx, s *Source, all bool) error {
	sample := " FROM (SELECT * FROM " + pd.from() + " WHERE " + pd.ok() + fmt.Sprintf(" LIMIT %d) AS s", pushdownShiftRows)
	list := make([]string, 0, 2*pd.p)
	for j := 0; j < pd.p; j++ {
		list = append(list, fmt.Sprintf("coalesce(max(abs(x%d)), 0)", j))
	}
	mag := make([]float64, pd.p)
	dst := make([]any, pd.p)
	for j := range mag {
		dst[j] = &mag[j]
	}
	if err := tx.QueryRow(ctx, "SELECT "+strings.Join(list, ", ")+sample).Scan(dst...); err != nil {
		return s.wrap(err, pd.t.source)
	}
	pd.scaleBy = make([]float64, pd.p)
	pd.shiftBy = make([]float64, pd.p)
	for j, v := range mag {
		pd.scaleBy[j] = stream.ScaleFor(0, v)
	}
	list = list[:0]
	for j := 0; j < pd.p; j++ {
		e := pd.valueExpr(j)
		list = append(list, fmt.Sprintf("coalesce(avg(%s), 0)", e), fmt.Sprintf("coalesce(stddev_pop(%s), 0)", e))
	}
	mean := make([]float64, pd.p) // of the scaled values
	sd := make([]float64, pd.p)
	dst = dst[:0]
	for j := 0; j < pd.p; j++ {
		dst = append(dst, &mean[j], &sd[j])
	}
	if err := tx.QueryRow(ctx, "SELECT "+strings.Join(list, ", ")+sample).Scan(dst...); err != nil {
		return s.wrap(err, pd.t.source)
	}
	for j := range mean {
		if all || math.Abs(mean[j]) > shiftRatio*sd[j] {
			pd.shiftBy[j] = mean[j] * pd.scaleBy[j]
		}
	}
	return nil
}

// tableScales takes the scales from the whole table's complete rows (a
// full pass of min and max, nothing summed): for when the first rows were
// not representative of the magnitudes.
func (pd *push) tableScales(ctx context.Context, tx pgx.Tx) error {
	list := make([]string, 0, 2*pd.p)
	for j := 0; j < pd.p; j++ {
		list = append(list, fmt.Sprintf("coalesce(min(x%d), 0)", j), fmt.Sprintf("coalesce(max(x%d), 0)", j))
	}
	lo := make([]float64, pd.p)
	hi := make([]float64, pd.p)
	dst := make([]any, 0, 2*pd.p)
	for j := range lo {
		dst = append(dst, &lo[j], &hi[j])
	}
	if err := tx.QueryRow(ctx, "SELECT "+strings.Join(list, ", ")+" FROM "+pd.from()+" WHERE "+pd.ok()).Scan(dst...); err != nil {
		return err
	}
	for j := range lo {
		pd.scaleBy[j] = stream.ScaleFor(lo[j], hi[j])
	}
	return nil
}

// valueExpr is column j as aggregated, in the inner SELECT's terms: the
// value shifted by c and divided by s, computed as x·(1/s) − c/s (two
// exact products, one rounding, as the stream package's accumulators do,
// and nothing that can overflow); x itself when c = 0 and s = 1.
func (pd *push) valueExpr(j int) string {
	inv := 1 / pd.scaleBy[j]
	cs := pd.shiftBy[j] * inv
	switch {
	case inv == 1 && cs == 0:
		return fmt.Sprintf("x%d", j)
	case cs == 0:
		return fmt.Sprintf("(x%d * %s)", j, float8Literal(inv))
	case inv == 1:
		return fmt.Sprintf("(x%d - %s)", j, float8Literal(cs))
	}
	return fmt.Sprintf("(x%d * %s - %s)", j, float8Literal(inv), float8Literal(cs))
}

// grouped reports whether the aggregate has groups: without a time or a
// segment it has none, and no GROUP BY.
func (pd *push) grouped() bool { return pd.plan.Time != nil || pd.plan.Segment != nil }

// aggSQL is the aggregate over the rows meeting cond: per group the rows
// used, the sums (Σ(x−c)/s, or avg for pushRegr), the cross-products
// (Σ(x−c)(y−c′)/(s·s′), or regr_sxy) and each column's min and max.
//
// The shifted values are computed once per row, in a subquery that
// PostgreSQL cannot flatten into the aggregate because its select list
// calls a volatile function (clock_timestamp(), which is parallel safe, so
// the parallel partial aggregation stays): flattened, every x − c would be
// evaluated again in each of the p(p+1)/2 products, which costs more than
// the products themselves. An engine that flattens it anyway computes the
// same sums, only slower.
func (pd *push) aggSQL(strategy pushStrategy, cond string) string {
	sub := []string{"bk", "sk"}
	if pd.plan.Weight != nil {
		sub = append(sub, "w")
	}
	fence := false
	d := make([]string, pd.p)  // column j as aggregated
	wd := make([]string, pd.p) // w·d_j under a weight
	for j := 0; j < pd.p; j++ {
		sub = append(sub, fmt.Sprintf("x%d", j))
		d[j] = fmt.Sprintf("x%d", j)
		e := pd.valueExpr(j) // d_j in the subquery's own terms
		if e != d[j] {
			sub = append(sub, e+fmt.Sprintf(" AS d%d", j))
			d[j] = fmt.Sprintf("d%d", j)
			fence = true
		}
		wd[j] = d[j]
		if pd.plan.Weight != nil {
			sub = append(sub, fmt.Sprintf("w * %s AS wd%d", e, j))
			wd[j] = fmt.Sprintf("wd%d", j)
			fence = true
		}
	}
	if fence {
		sub = append(sub, "clock_timestamp() AS plumb_fence")
	}
	list := []string{"NULL::timestamptz", "NULL::text", "count(*)"}
	if pd.grouped() {
		list[0], list[1] = "bk", "sk"
	}
	switch {
	case strategy == pushRegr:
		for j := 0; j < pd.p; j++ {
			list = append(list, "avg("+d[j]+")")
		}
		for i := 0; i < pd.p; i++ {
			for j := i; j < pd.p; j++ {
				list = append(list, "regr_sxy("+d[i]+", "+d[j]+")")
			}
		}
	default:
		if pd.plan.Weight != nil {
			list = append(list, "sum(w)")
		} else {
			list = append(list, "count(*)::float8")
		}
		for j := 0; j < pd.p; j++ {
			list = append(list, "sum("+wd[j]+")")
		}
		for i := 0; i < pd.p; i++ {
			for j := i; j < pd.p; j++ {
				list = append(list, "sum("+wd[i]+" * "+d[j]+")")
			}
		}
	}
	for j := 0; j < pd.p; j++ {
		list = append(list, fmt.Sprintf("min(x%d)", j), fmt.Sprintf("max(x%d)", j))
	}
	q := "SELECT " + strings.Join(list, ", ") + " FROM (SELECT " + strings.Join(sub, ", ") + " FROM " + pd.from() + " WHERE " + cond + ") AS s"
	if pd.grouped() {
		q += " GROUP BY bk, sk"
	}
	return q
}

func (pd *push) missingSQL() string {
	list := []string{"bk", "sk"}
	scope := "bk IS NOT NULL"
	if pd.plan.Time == nil {
		scope = "true"
	}
	if pd.plan.Weight != nil {
		list = append(list, "count(*) FILTER (WHERE NOT coalesce("+pd.wok()+", false))")
		scope += " AND " + pd.wok()
	} else {
		list = append(list, "0::int8")
	}
	for j := 0; j < pd.p; j++ {
		list = append(list,
			fmt.Sprintf("count(*) FILTER (WHERE %s AND x%d IS NULL)", scope, j),
			fmt.Sprintf("count(*) FILTER (WHERE %s AND x%d = 'NaN'::float8)", scope, j),
			fmt.Sprintf("count(*) FILTER (WHERE %s AND x%d IN ('Infinity'::float8, '-Infinity'::float8))", scope, j))
	}
	return "SELECT " + strings.Join(list, ", ") + " FROM " + pd.from() + " GROUP BY bk, sk"
}

func (pd *push) key(v []any) (gkey, bool) {
	var k gkey
	if pd.plan.Time != nil {
		t, ok := v[0].(time.Time)
		if !ok {
			return k, false
		}
		k.bucket = t.UnixMicro()
	}
	if s, ok := v[1].(string); ok {
		k.seg = s
	}
	return k, true
}

func (pd *push) checkSegments(keys []gkey, max int) error {
	if pd.plan.Segment == nil {
		return nil
	}
	segs := map[string]bool{}
	for _, k := range keys {
		segs[k.seg] = true
	}
	if len(segs) > max {
		return fmt.Errorf("%s: segment column %q: more than %d distinct segments (raise the limit or pick a coarser segment column): %w",
			pd.t.source, pd.plan.Segment.Name, max, connectors.ErrTooManySegments)
	}
	return nil
}

func (pd *push) newStats() *connectors.Stats {
	p := pd.p
	return &connectors.Stats{
		Names: pd.plan.Names(),
		Null:  make([]int64, p), NaN: make([]int64, p), Inf: make([]int64, p),
		Origin: make([]float64, p), Scale: make([]float64, p), Sum: make([]float64, p), Cross: make([]float64, p*(p+1)/2),
		Min: make([]float64, p), Max: make([]float64, p),
	}
}

func num(v any) float64 {
	switch x := v.(type) {
	case float64:
		return x
	case int64:
		return float64(x)
	}
	return 0
}

func (pd *push) fill(st *connectors.Stats, v []any, strategy pushStrategy) error {
	p := pd.p
	st.Used = v[0].(int64)
	i := 1
	if strategy == pushRegr {
		st.SumWeights = float64(st.Used)
		st.Centered = true
		copy(st.Origin, pd.shiftBy)
		copy(st.Scale, pd.scaleBy)
		for j := 0; j < p; j++ {
			st.Sum[j] = num(v[i]) * st.SumWeights
			i++
		}
	} else {
		st.SumWeights = num(v[i])
		i++
		copy(st.Origin, pd.shiftBy)
		copy(st.Scale, pd.scaleBy)
		for j := 0; j < p; j++ {
			st.Sum[j] = num(v[i])
			i++
		}
	}
	for k := range st.Cross {
		st.Cross[k] = num(v[i])
		i++
	}
	for j := 0; j < p; j++ {
		st.Min[j], st.Max[j] = num(v[i]), num(v[i+1])
		i += 2
	}
	return nil
}

func (pd *push) fillMissing(st *connectors.Stats, v []any) {
	st.BadWeights = v[0].(int64)
	for j := 0; j < pd.p; j++ {
		st.Null[j] = v[1+3*j].(int64)
		st.NaN[j] = v[2+3*j].(int64)
		st.Inf[j] = v[3+3*j].(int64)
	}
}
