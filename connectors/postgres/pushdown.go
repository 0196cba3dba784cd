package postgres

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"math"
	"math/big"
	"slices"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgtype"

	"plumb/connectors"
	"plumb/stream"
)

// pushStrategy is how the pushdown aggregate stays numerically safe.
type pushStrategy int

const (
	// pushAuto: on PostgreSQL 12+, pushPaired for a whole table and
	// pushRegr for buckets, segments and factor cells; pushShifted for
	// weights and for engines without the updating aggregates.
	pushAuto pushStrategy = iota
	// pushRegr: regr_sxy and avg of the shifted values, which PostgreSQL
	// 12 and later compute by the Youngs–Cramer updating algorithm per
	// group and combine across parallel workers pairwise
	// (float8_regr_accum, float8_regr_combine). Each group is centred on
	// its own mean, which a shift taken from the whole table is not, so
	// buckets and segments use it.
	pushRegr
	// pushShifted: plain float8 sums of values and of products all
	// shifted by provisional centres, Σ(x−c) and Σ(x−c)(y−c′): little
	// more than the bare sums of products; the updating aggregates cost
	// half as much again.
	pushShifted
	// pushPaired: pushShifted for a whole unweighted table on PostgreSQL
	// 12+, with the columns taken two by two, (x0, x1), (x2, x3), …:
	// regr_avgx, regr_avgy, regr_sxx, regr_syy and regr_sxy of a pair
	// share one transition state (PostgreSQL runs an aggregate's
	// transition once for every aggregate with the same function and
	// arguments), so one updating step per pair yields both columns'
	// means and centred sums of squares and their co-moment, in place of
	// two sums, two squares and a product; the other pairs are the
	// shifted products. Measured on 20 columns, a tenth of the bare sums
	// of products less than pushShifted.
	pushPaired
)

// String names the strategy, for messages and test names.
func (s pushStrategy) String() string {
	return [...]string{"auto", "regr", "shifted", "paired"}[s]
}

// DefaultPushParallel is how many partitions a pushdown aggregates at once
// when Options.Parallel does not say.
const DefaultPushParallel = 4

// probeRows is how many complete rows a partition without statistics is
// read for its provisional centres (see centres).
const probeRows = 64

// pushdown computes the accumulators inside PostgreSQL. A partitioned
// table is aggregated partition by partition (every leaf of
// pg_partition_tree), several at once on their own connections, and the
// partial moments are merged pairwise; anything else is one leaf.
//
// Each leaf costs one statement: per bucket, segment, factor levels and
// completeness (all values finite, a usable weight) the rows, the inexact
// values, the dropped rows' missing counts, and the count, shifted sums,
// co-moments, min and max of the values. Its select list holds nothing
// volatile and, for a foreign partition, nothing postgres_fdw cannot send,
// so the shard computes its own part and returns O(p²) numbers per group.
// The provisional centres and scales come from the planner's statistics
// (pg_stats) at no scan's cost, or Request.Centres. A second statement
// runs only when a leaf has neither (a probe of a few rows), when a
// product overflows float8 under scales the statistics understated (the
// leaf is aggregated again with its own extremes as scales), or when a
// local leaf whose statistics show no NULLs, first aggregated without the
// completeness test (push.hopeful), has incomplete rows after all.
func (s *Source) pushdown(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if req.QR || req.Extended {
		return nil, fmt.Errorf("--pushdown returns cross-products, not the QR factor; scan without --pushdown for QR accuracy: %w", connectors.ErrUnsupported)
	}
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return nil, s.wrap(err, "cannot connect")
	}
	defer func() {
		if conn != nil {
			conn.Release()
		}
	}()
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
	t, plan, pds, err := s.preparePush(ctx, tx, req)
	if err != nil {
		return nil, err
	}
	res := &connectors.Result{
		Sampled:    req.SamplePct > 0 && req.SamplePct < 100,
		Skipped:    plan.Skipped,
		Partitions: len(pds),
		Pushdown:   true,
	}
	outs, err := s.runLeaves(ctx, tx, pds)
	if errors.Is(err, errTooManyCells) {
		// The cells would be more numbers than the rows are worth: stream.
		tx.Rollback(context.Background())
		conn.Release()
		conn = nil
		plain := *s
		plain.opts.Pushdown = false
		res, err := plain.Scan(ctx, req)
		if err != nil {
			return nil, err
		}
		res.Fallback = fmt.Sprintf("the factors' cells (bucket × segment × level combinations) exceed %d in a partition, so the rows were streamed instead of pushed down; raise the cell limit or name fewer or coarser factors", maxCells(req))
		return res, nil
	}
	if err != nil {
		return nil, err
	}
	var numIdx []int // plan.Values index of each numeric column
	var facs []string
	for j, c := range plan.Values {
		if c.IsFactor() {
			facs = append(facs, c.Name)
		} else {
			numIdx = append(numIdx, j)
		}
	}
	inexact := make([]int64, len(plan.Values))
	facLists := make([][]connectors.Factor, len(outs))
	parts := make([][]connectors.Group, len(outs))
	for i, o := range outs {
		res.Read += o.read
		res.NoTime += o.noTime
		for j, n := range o.inexact {
			inexact[numIdx[j]] += n
		}
		facLists[i] = o.factors(facs)
		parts[i] = o.groups
	}
	res.Factors = connectors.UnionFactors(facLists...)
	for _, f := range res.Factors {
		if len(f.Levels) > plan.MaxLevels {
			return nil, fmt.Errorf("%s: column %q has more than %d distinct values: %d levels had been seen when the limit was passed (%d in all); raise the limit on levels or leave the column out: %w",
				t.source, f.Name, plan.MaxLevels, plan.MaxLevels+1, len(f.Levels), connectors.ErrTooManyLevels)
		}
	}
	res.Columns = connectors.ExpandNames(plan.Names(), res.Factors)
	res.Inexact = connectors.SpreadCounts(plan, res.Factors, inexact)
	if err := connectors.CheckLevels(t.source, res); err != nil {
		return nil, err
	}
	for i := range parts {
		parts[i] = connectors.Align(parts[i], res.Columns)
	}
	if res.Groups, err = connectors.MergeGroups(parts, plan.MaxSegments); err != nil {
		return nil, fmt.Errorf("%s: segment column %q: %w", t.source, plan.Segment.Name, err)
	}
	if err := s.countLevels(ctx, tx, t, plan); err != nil {
		return nil, err
	}
	res.Skipped = plan.Skipped
	return res, nil
}

// errTooManyCells: a partition's aggregate with factors returned more
// cells than Request.MaxCells.
var errTooManyCells = errors.New("too many cells")

// errIncomplete: a statement that assumed complete rows (push.hopeful)
// met a NULL, NaN or infinite value.
var errIncomplete = errors.New("incomplete rows")

func maxCells(req connectors.Request) int {
	if req.MaxCells > 0 {
		return req.MaxCells
	}
	return connectors.DefaultMaxCells
}

// preparePush describes the target, resolves the request and builds one
// statement builder per leaf with its centres.
func (s *Source) preparePush(ctx context.Context, tx pgx.Tx, req connectors.Request) (*target, *connectors.Plan, []*push, error) {
	t, err := s.describe(ctx, tx, req)
	if err != nil {
		return nil, nil, nil, err
	}
	plan, err := connectors.Resolve(t.source, t.cols, req, connectors.KindTime)
	if err != nil {
		return nil, nil, nil, err
	}
	where, err := connectors.CheckWhere(req.Where, connectors.Postgres)
	if err != nil {
		return nil, nil, nil, err
	}
	// The numeric columns are aggregated; the factors are grouped by,
	// each cell (bucket, segment, one level per factor) its own group.
	num := *plan
	num.Values = nil
	var facs []connectors.Column
	for _, c := range plan.Values {
		if c.IsFactor() {
			facs = append(facs, c)
		} else {
			num.Values = append(num.Values, c)
		}
	}
	strategy := s.push
	if strategy == pushAuto {
		strategy = pushShifted
		if s.version >= 120000 && plan.Weight == nil {
			strategy = pushPaired
			if plan.Time != nil || plan.Segment != nil || len(facs) > 0 {
				strategy = pushRegr
			}
		}
	}
	if strategy == pushPaired && plan.Weight != nil {
		strategy = pushShifted
	}
	if strategy == pushRegr && plan.Weight != nil {
		return nil, nil, nil, fmt.Errorf("%s: weighted pushdown needs the shifted sums: %w", t.source, connectors.ErrUnsupported)
	}
	leaves, err := s.leaves(ctx, tx, t)
	if err != nil {
		return nil, nil, nil, err
	}
	cs, err := s.centres(ctx, tx, t, leaves, &num)
	if err != nil {
		return nil, nil, nil, err
	}
	pds := make([]*push, len(leaves))
	for i, l := range leaves {
		if pds[i], err = s.newPush(t, l, &num, facs, where, req, strategy); err != nil {
			return nil, nil, nil, err
		}
		pds[i].allValues = plan.Values
		pds[i].setCentres(cs.forLeaf(i, &num, req.Centres))
	}
	return t, plan, pds, nil
}

// leaf is one relation a pushdown aggregates: a leaf partition, or the
// target itself.
type leaf struct {
	name    connectors.Name
	relkind string // "f" for a foreign table
	self    bool   // the target itself, not one of its partitions
}

// leaves lists the leaf partitions of a partitioned table, at any depth,
// in pg_partition_tree's order; any other target is its own leaf.
func (s *Source) leaves(ctx context.Context, tx pgx.Tx, t *target) ([]leaf, error) {
	if t.table == nil || t.relkind != "p" {
		l := leaf{self: true, relkind: t.relkind}
		if t.table != nil {
			l.name = *t.table
		}
		return []leaf{l}, nil
	}
	rows, err := tx.Query(ctx, `SELECT n.nspname, c.relname, c.relkind::text
		FROM pg_partition_tree($1::regclass) p
			JOIN pg_class c ON c.oid = p.relid JOIN pg_namespace n ON n.oid = c.relnamespace
		WHERE p.isleaf ORDER BY p.level, c.oid`, t.oid)
	if err != nil {
		return nil, s.wrap(err, t.source+": listing partitions")
	}
	var out []leaf
	err = forRows(rows, func(v []any) error {
		out = append(out, leaf{name: connectors.Name{Schema: v[0].(string), Table: v[1].(string)}, relkind: v[2].(string)})
		return nil
	})
	if err != nil {
		return nil, s.wrap(err, t.source+": listing partitions")
	}
	return out, nil
}

// leafOut is what the aggregate of one leaf returned.
type leafOut struct {
	groups  []connectors.Group
	read    int64
	noTime  int64
	inexact []int64
	levels  []map[string]bool // per factor, the levels seen
	facNull []int64           // per factor, rows dropped because it was NULL (the first NULL factor of a row)
}

// factors returns the leaf's factors (levels sorted).
func (o leafOut) factors(names []string) []connectors.Factor {
	out := make([]connectors.Factor, len(names))
	for i, n := range names {
		out[i] = connectors.Factor{Name: n}
		if i < len(o.levels) {
			for l := range o.levels[i] {
				out[i].Levels = append(out[i].Levels, l)
			}
			slices.Sort(out[i].Levels)
			out[i].Null = o.facNull[i]
		}
	}
	return out
}

// runLeaves aggregates the leaves, at most Options.Parallel (or
// DefaultPushParallel) at once: the first on tx, the others on their own
// connections in transactions that import tx's snapshot, so that every
// local partition is read as of one moment. (A foreign partition is read
// in its own server's snapshot, which postgres_fdw opens per connection.)
// Nothing is returned unless every leaf succeeded.
func (s *Source) runLeaves(ctx context.Context, tx pgx.Tx, pds []*push) ([]leafOut, error) {
	outs := make([]leafOut, len(pds))
	if len(pds) == 1 {
		o, err := pds[0].run(ctx, tx, s)
		if err != nil {
			return nil, err
		}
		outs[0] = o
		return outs, nil
	}
	var snap string
	if err := tx.QueryRow(ctx, "SELECT pg_export_snapshot()").Scan(&snap); err != nil {
		return nil, s.wrap(err, "exporting the snapshot for the partitions")
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	k := s.opts.Parallel
	if k <= 1 {
		k = DefaultPushParallel
	}
	errs := make([]error, len(pds))
	next := make(chan int, len(pds))
	for i := 1; i < len(pds); i++ {
		next <- i
	}
	close(next)
	var wg sync.WaitGroup
	work := func(i int, tx pgx.Tx) {
		defer func() {
			if p := recover(); p != nil {
				errs[i] = fmt.Errorf("%s: aggregating panicked: %v (a bug in plumb; please report it)", pds[i].source, p)
				cancel()
			}
		}()
		o, err := pds[i].run(ctx, tx, s)
		if err != nil {
			errs[i] = err
			cancel()
			return
		}
		outs[i] = o
	}
	// The first leaf on tx, then whatever is left.
	wg.Add(1)
	go func() {
		defer wg.Done()
		work(0, tx)
		for i := range next {
			work(i, tx)
		}
	}()
	for w := 1; w < min(k, len(pds)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			wtx, done, err := s.snapshotTx(ctx, snap, "the partitions")
			if err == nil {
				defer done()
				if _, err = wtx.Exec(ctx, "SET LOCAL jit = off"); err != nil {
					err = s.wrap(err, "SET jit")
				}
			}
			if err != nil {
				for i := range next {
					errs[i] = err
					cancel()
				}
				return
			}
			for i := range next {
				work(i, wtx)
			}
		}()
	}
	wg.Wait()
	if err := firstError(errs); err != nil {
		return nil, err
	}
	return outs, nil
}

// run aggregates one leaf on tx: one group per complete fine group the
// statement returned, and one without rows per key that dropped rows,
// carrying their counts; MergeGroups folds them by key.
func (pd *push) run(ctx context.Context, tx pgx.Tx, s *Source) (leafOut, error) {
	if pd.needProbe {
		if err := pd.probe(ctx, tx); err != nil {
			return leafOut{}, s.wrap(err, pd.source)
		}
	}
	out, drop, miss, err := pd.aggregateOnce(ctx, tx)
	for rescaled := false; err != nil; {
		if errors.Is(err, errIncomplete) {
			// The leaf has incomplete rows after all: aggregate it
			// again with the completeness test.
			pd.hopeful = false
		} else if outOfRange(err) && !rescaled {
			// The statistics underestimated a column's magnitude and a
			// product overflowed: take the scales from the leaf's
			// extremes.
			rescaled = true
			if err = pd.tableScales(ctx, tx); err != nil {
				break
			}
		} else {
			break
		}
		out, drop, miss, err = pd.aggregateOnce(ctx, tx)
	}
	if errors.Is(err, connectors.ErrTooManySegments) || errors.Is(err, errTooManyCells) {
		return out, err
	}
	if err != nil {
		return out, s.wrap(err, pd.source)
	}
	for _, k := range sortedKeys(drop) {
		st := pd.newStats()
		st.Dropped = drop[k]
		if m := miss[k]; m != nil {
			pd.fillMissing(st, m)
		}
		m, err := st.Moments()
		if err != nil {
			return out, err
		}
		out.groups = append(out.groups, connectors.Group{Key: pd.groupKey(k), Moments: m})
	}
	return out, nil
}

func sortedKeys(m map[gkey]int64) []gkey {
	out := make([]gkey, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	slices.SortFunc(out, func(a, b gkey) int {
		if a.bucket != b.bucket {
			return cmp.Compare(a.bucket, b.bucket)
		}
		return strings.Compare(a.seg, b.seg)
	})
	return out
}

func (pd *push) groupKey(k gkey) connectors.Key {
	var key connectors.Key
	if pd.plan.Time != nil {
		key.Bucket = time.UnixMicro(k.bucket).In(pd.plan.Location)
	}
	key.Segment = k.seg
	return key
}

// aggregateOnce runs the aggregate inside a savepoint, so that an error
// (a value out of range) leaves the transaction usable for a retry.
func (pd *push) aggregateOnce(ctx context.Context, tx pgx.Tx) (leafOut, map[gkey]int64, map[gkey][]int64, error) {
	sp, err := tx.Begin(ctx)
	if err != nil {
		return leafOut{}, nil, nil, err
	}
	out, drop, miss, err := pd.aggregate(ctx, sp)
	if err != nil {
		sp.Rollback(context.Background())
		return leafOut{}, nil, nil, err
	}
	return out, drop, miss, sp.Commit(ctx)
}

// planFor sets the planner up for the leaf's statement. postgres_fdw
// weighs sending an aggregate to the shard against fetching the rows and
// aggregating here, and in PostgreSQL 15 it counts the cost of the
// aggregate's argument expressions twice for the shard (in the scan's
// target and in the aggregates), so with many columns — p(p+1)/2 products
// — fetching every row looks cheaper. Expression costs near zero, for
// this statement only, leave the comparison to what differs: rows sent
// across against groups sent. A local leaf keeps the server's settings.
func (pd *push) planFor(ctx context.Context, tx pgx.Tx) error {
	v := "DEFAULT"
	if pd.ship {
		v = "0.000001"
	}
	_, err := tx.Exec(ctx, "SET LOCAL cpu_operator_cost = "+v)
	return err
}

// aggregate runs the leaf's one statement: a group per complete fine
// group (a bucket's rows may come in several, see binExpr), and the rows
// dropped per key.
func (pd *push) aggregate(ctx context.Context, tx pgx.Tx) (leafOut, map[gkey]int64, map[gkey][]int64, error) {
	out := leafOut{inexact: make([]int64, pd.p), facNull: make([]int64, len(pd.facs)), levels: make([]map[string]bool, len(pd.facs))}
	for i := range out.levels {
		out.levels[i] = map[string]bool{}
	}
	drop := map[gkey]int64{}
	miss := map[gkey][]int64{}
	segs := map[string]bool{}
	if err := pd.planFor(ctx, tx); err != nil {
		return out, nil, nil, err
	}
	rows, err := tx.Query(ctx, pd.aggSQL(), pgx.QueryResultFormats{pgx.BinaryFormatCode})
	if err != nil {
		return out, nil, nil, err
	}
	cells := 0
	limit := pd.maxCells
	levels := make([]string, len(pd.facs))
	err = forRows(rows, func(v []any) error {
		if cells++; len(pd.facs) > 0 && cells > limit {
			return errTooManyCells
		}
		k, valid := pd.key(v)
		i := pd.nkeys
		nullFac := -1
		for f := range pd.facs {
			l, ok := levelOf(v[i+f])
			levels[f] = l
			if !ok && nullFac < 0 {
				nullFac = f
			}
		}
		i += len(pd.facs)
		complete := true
		if !pd.hopeful {
			complete, _ = v[i].(bool)
			i++
		}
		n := v[i].(int64)
		if n == 0 {
			// A hopeful statement without keys over no rows.
			return nil
		}
		out.read += n
		for f, j := range pd.lay.flags {
			out.inexact[j] += v[i+1+f].(int64)
		}
		i += 1 + len(pd.lay.flags)
		var state any
		if !pd.hopeful {
			state = v[i]
			i++
		}
		agg := v[i:] // the strategy's sums and cross-products, min and max
		if !valid {
			out.noTime += n
			return nil
		}
		if pd.plan.Segment != nil && !segs[k.seg] {
			segs[k.seg] = true
			if len(segs) > pd.plan.MaxSegments {
				return fmt.Errorf("%s: segment column %q: more than %d distinct segments (raise the limit or pick a coarser segment column): %w",
					pd.source, pd.plan.Segment.Name, pd.plan.MaxSegments, connectors.ErrTooManySegments)
			}
		}
		for f, l := range levels {
			if _, ok := levelOf(v[pd.nkeys+f]); ok {
				out.levels[f][l] = true
			}
		}
		if nullFac >= 0 {
			// Dropped, and counted against the first NULL factor only,
			// not among the columns' missing values.
			out.facNull[nullFac] += n
			drop[k] += n
			return nil
		}
		if !complete {
			drop[k] += n
			return pd.countMissing(miss, k, state)
		}
		if pd.hopeful && !pd.finite(agg) {
			return errIncomplete
		}
		st := pd.newStats()
		pd.fill(st, n, agg)
		if len(pd.facs) > 0 {
			st = pd.expand(st, levels)
		}
		m, err := st.Moments()
		if err != nil {
			return err
		}
		out.groups = append(out.groups, connectors.Group{Key: pd.groupKey(k), Moments: m})
		return nil
	})
	return out, drop, miss, err
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

// push builds the statements of one leaf over its inner SELECT, whose
// columns are the keys (bk bucket, sk segment; only those the plan has),
// w (weight), x0… (values) and f0… (inexact flags).
type push struct {
	source   string // the leaf, for messages
	plan     *connectors.Plan
	strategy pushStrategy
	lay      layout
	inner    string
	p        int
	nkeys    int
	// ship: the leaf is a foreign table. Its statement keeps every
	// expression inline over the foreign columns, and only immutable
	// built-in functions and operators free of collations, which
	// postgres_fdw sends to the shard with the aggregate; the keys are
	// the raw segment value and a fine time bin (binExpr), turned into
	// bucket and segment keys here.
	ship     bool
	timeBase uint32 // base type of the time column
	segRaw   bool   // sk is the raw segment value (ship), not its key

	facs      []connectors.Column // factors: grouped by, read as their levels
	allValues []connectors.Column // the request's values, factors in place
	maxCells  int                 // with factors, the most rows the aggregate may return

	shiftBy   []float64 // c, per column (0: not shifted)
	scaleBy   []float64 // s, per column: powers of two (stream.ScaleFor)
	needProbe bool      // no statistics: take the centres from a few rows

	// hopeful: the statement assumes every row complete and leaves out
	// the completeness test, its grouping and the missing counts, about
	// a tenth of the statement's cost. A NULL is turned into NaN, so
	// that an incomplete row makes its group's sums NaN or infinite
	// (PostgreSQL raises an error when finite float8 operands overflow,
	// so nothing else does), and the leaf is aggregated again with the
	// test. Only for a local leaf, the shifted sums, no weight, and
	// statistics that show no NULLs.
	hopeful bool
}

func (s *Source) newPush(t *target, l leaf, plan *connectors.Plan, facs []connectors.Column, where string, req connectors.Request, strategy pushStrategy) (*push, error) {
	pd := &push{source: t.source, plan: plan, strategy: strategy, p: len(plan.Values), ship: l.relkind == "f", facs: facs, maxCells: maxCells(req)}
	pd.hopeful = !pd.ship && (strategy == pushShifted || strategy == pushPaired) && plan.Weight == nil && pd.p > 0
	lt := *t
	if !l.self {
		lt.table = &l.name
		lt.relkind = l.relkind
		pd.source = t.source + " partition " + l.name.Quoted()
	}
	var hashSample float64
	if pd.ship && req.SamplePct > 0 && req.SamplePct < 100 {
		// TABLESAMPLE cannot be applied to a foreign table: a shippable
		// filter on a hash of the row's values takes its place.
		hashSample = req.SamplePct
		req.SamplePct = 0
	}
	st, err := s.baseStmt(&lt, where, req)
	if err != nil {
		return nil, err
	}
	var list []string
	if plan.Time != nil {
		pd.timeBase = t.base[plan.Time.Name]
		if pd.ship {
			list = append(list, binExpr(plan.Time.Name, pd.timeBase, plan.Bucket, plan.Location)+" AS bk")
		} else {
			zone, err := zoneLiteral(plan.Location)
			if err != nil {
				return nil, err
			}
			list = append(list, bucketExpr(plan.Time.Name, pd.timeBase, plan.Bucket, zone)+" AS bk")
		}
	}
	if plan.Segment != nil {
		q := connectors.QuoteIdent(plan.Segment.Name)
		switch b := t.base[plan.Segment.Name]; {
		case pd.ship && rawSegment(b):
			list = append(list, q+" AS sk")
			pd.segRaw = true
		case pd.ship:
			// Not shippable (a cast to text), but correct.
			list = append(list, q+"::text AS sk")
			pd.segRaw = true
		default:
			// The segment key (connectors.SegmentKey), NULL as NullSegment.
			list = append(list, "coalesce("+quoteLiteral(connectors.SegmentPrefix)+" || "+q+"::text, "+
				quoteLiteral(connectors.NullSegment)+") AS sk")
		}
	}
	pd.nkeys = len(list)
	for i, c := range facs {
		// Levels as text, as streaming reads them; a foreign partition's
		// text and booleans raw, which postgres_fdw sends.
		e := connectors.QuoteIdent(c.Name)
		if !pd.ship || !rawLevel(t.base[c.Name]) {
			e += "::text"
		}
		list = append(list, fmt.Sprintf("%s AS g%d", e, i))
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
	var extra []string
	if hashSample > 0 {
		extra = append(extra, hashSampleCond(t, plan, hashSample, req.Seed))
	}
	pd.inner = st.sql(list, extra...)
	if t.query != "" {
		// The query's WITH must stay at the top: wrap the whole statement.
		pd.inner = "\n" + pd.inner + "\n"
	}
	return pd, nil
}

// rawSegment reports whether a segment column of this base type is read
// raw and keyed here: text and varchar as they are, integers and booleans
// as PostgreSQL writes them.
func rawSegment(base uint32) bool {
	const pgText, pgVarchar = 25, 1043 // pg_type.dat
	switch base {
	case pgText, pgVarchar, oidInt2, oidInt4, oidInt8, oidBool:
		return true
	}
	return false
}

// rawLevel reports whether a factor of this base type is read raw on a
// foreign partition: text and varchar as they are, booleans as true and
// false (the others, char(n) and enums, through ::text, which is not
// sent to the shard).
func rawLevel(base uint32) bool {
	const pgText, pgVarchar = 25, 1043 // pg_type.dat
	return base == pgText || base == pgVarchar || base == oidBool
}

// levelOf turns a factor value into its level; false for NULL.
func levelOf(v any) (string, bool) {
	switch x := v.(type) {
	case nil:
		return "", false
	case string:
		return x, true
	case bool:
		return strconv.FormatBool(x), true
	case []byte:
		return string(x), true
	}
	return fmt.Sprint(v), true
}

// expand widens a cell's statistics to its factors' indicator columns, in
// request order: in a cell every indicator is constant, 1 for the cell's
// level (min = max = 1, co-moments 0); the other levels' indicators are
// the all-zero columns that aligning adds.
func (pd *push) expand(st *connectors.Stats, levels []string) *connectors.Stats {
	var names []string
	var src []int // numeric index of each column, -1 for an indicator
	fi, ni := 0, 0
	for _, c := range pd.allValues {
		if c.IsFactor() {
			names = append(names, stream.IndicatorName(c.Name, levels[fi]))
			src = append(src, -1)
			fi++
			continue
		}
		names = append(names, c.Name)
		src = append(src, ni)
		ni++
	}
	q := len(names)
	out := &connectors.Stats{
		Names: names, Used: st.Used, SumWeights: st.SumWeights, Dropped: st.Dropped, BadWeights: st.BadWeights, Centered: st.Centered,
		Null: make([]int64, q), NaN: make([]int64, q), Inf: make([]int64, q),
		Origin: make([]float64, q), Scale: make([]float64, q), Sum: make([]float64, q), Cross: make([]float64, q*(q+1)/2),
		Min: make([]float64, q), Max: make([]float64, q),
	}
	k := 0
	for a := 0; a < q; a++ {
		i := src[a]
		if i < 0 {
			out.Origin[a], out.Scale[a], out.Min[a], out.Max[a] = 1, 1, 1, 1
		} else {
			out.Null[a], out.NaN[a], out.Inf[a] = st.Null[i], st.NaN[i], st.Inf[i]
			out.Origin[a], out.Scale[a], out.Sum[a], out.Min[a], out.Max[a] = st.Origin[i], st.Scale[i], st.Sum[i], st.Min[i], st.Max[i]
		}
		for b := a; b < q; b++ {
			if j := src[b]; i >= 0 && j >= 0 {
				out.Cross[k] = st.Cross[triIndex(pd.p, i, j)]
			}
			k++
		}
	}
	return out
}

// binExpr is a shippable fine time bin of a foreign partition's time
// column: date_trunc and AT TIME ZONE take a text argument, which
// postgres_fdw does not send, so the bin is the date itself, or
// date_bin of a fixed stride that nests in the bucket (an hour or a day,
// a week from a Monday; a quarter of an hour for timestamptz in a zone
// other than UTC, as every zone's offset is a multiple of it). The
// buckets are floored from the bins here (keyTime); infinite times stay
// infinite.
func binExpr(col string, base uint32, unit string, loc *time.Location) string {
	q := connectors.QuoteIdent(col)
	stride := "'1 day'::interval"
	switch unit {
	case "hour":
		stride = "'1 hour'::interval"
	case "week":
		stride = "'7 days'::interval"
	}
	switch base {
	case oidTimestamp:
		return "date_bin(" + stride + ", " + q + ", '2000-01-03 00:00:00'::timestamp)"
	case oidTimestamptz:
		if loc.String() != "UTC" {
			stride = "'15 minutes'::interval"
		}
		return "date_bin(" + stride + ", " + q + ", '2000-01-03 00:00:00+00'::timestamptz)"
	}
	return q // a date
}

// hashSampleCond keeps about pct percent of a foreign partition's rows,
// chosen by a hash of their values and the seed (rows with the same values
// are kept or left out together): immutable functions and operators that
// postgres_fdw sends, where TABLESAMPLE cannot go.
func hashSampleCond(t *target, plan *connectors.Plan, pct float64, seed int64) string {
	var h []string
	cols := append([]connectors.Column(nil), plan.Values...)
	if plan.Weight != nil {
		cols = append(cols, *plan.Weight)
	}
	for _, c := range cols {
		v := valueExpr(c.Name, t.base[c.Name])
		h = append(h, fmt.Sprintf("CASE WHEN %s IS NULL THEN 0::int8 ELSE hashfloat8extended(%s, %d::int8) END", v, v, seed))
	}
	limit := int64(math.Round(pct / 100 * (1 << 20)))
	return fmt.Sprintf("((%s) & 1048575::int8) < %d::int8", strings.Join(h, " # "), limit)
}

func (pd *push) from() string { return "(" + pd.inner + ") AS r" }

// okExpr is true for a complete row: every value finite and a usable
// weight; false or NULL otherwise (NULL fails both comparisons, and
// PostgreSQL sorts NaN above +Infinity).
func (pd *push) okExpr() string {
	var c []string
	for j := 0; j < pd.p; j++ {
		c = append(c, fmt.Sprintf("x%d > '-Infinity'::float8 AND x%d < 'Infinity'::float8", j, j))
	}
	if pd.plan.Weight != nil {
		c = append(c, pd.wok())
	}
	if len(c) == 0 {
		return "true"
	}
	return "(" + strings.Join(c, " AND ") + ")"
}

// facList names the factor columns of the inner SELECT.
func (pd *push) facList() []string {
	g := make([]string, len(pd.facs))
	for i := range g {
		g[i] = fmt.Sprintf("g%d", i)
	}
	return g
}

// wok mirrors the stream package: a weight is usable when 0 ≤ w < +Inf
// (NaN compares above +Inf in PostgreSQL, so it fails too).
func (pd *push) wok() string { return "(w >= 0::float8 AND w < 'Infinity'::float8)" }

func (pd *push) keyList() []string {
	var k []string
	if pd.plan.Time != nil {
		k = append(k, "bk")
	}
	if pd.plan.Segment != nil {
		k = append(k, "sk")
	}
	return k
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

// aggSQL is the leaf's one statement: per key and completeness, the rows,
// the inexact values, the missing counts, and the aggregates (the sums
// Σ(x−c)/s, or avg for pushRegr; the cross-products Σ(x−c)(y−c′)/(s·s′),
// or regr_sxy; for pushPaired, pairedExprs; each column's min and max). A hopeful statement groups by
// the keys alone and has no missing counts: NULL becomes NaN in the
// subquery, so that an incomplete row shows in its group's sums.
//
// On a local leaf the shifted values are computed once per row, in a
// subquery that PostgreSQL does not flatten into the aggregate because it
// has a WITH clause (an empty one, never run; nothing volatile, and the
// parallel partial aggregation stays): flattened, every x − c would be
// evaluated again in each of the p(p+1)/2 products, which costs as much
// as the products themselves. A foreign leaf keeps them inline, so that
// the planner sees an aggregate over the foreign table alone and
// postgres_fdw sends all of it to the shard (a subquery it cannot send);
// the shard then pays for the repeated shifts.
func (pd *push) aggSQL() string {
	keys := pd.keyList()
	d := make([]string, pd.p)  // column j as aggregated
	wd := make([]string, pd.p) // w·d_j under a weight
	ok, miss := "ok", ""
	var src string
	if pd.ship {
		for j := range d {
			d[j] = pd.valueExpr(j)
			wd[j] = d[j]
			if pd.plan.Weight != nil {
				wd[j] = "w * " + d[j]
			}
		}
		ok = pd.okExpr()
		miss = "CASE WHEN " + ok + " THEN NULL ELSE " + pd.missExpr() + " END"
		src = pd.from()
	} else {
		sub := append(slices.Clone(keys), pd.facList()...)
		if pd.plan.Weight != nil {
			sub = append(sub, "w")
		}
		for j := 0; j < pd.p; j++ {
			sub = append(sub, fmt.Sprintf("x%d", j))
			d[j] = fmt.Sprintf("x%d", j)
			e := pd.valueExpr(j) // d_j in the subquery's own terms
			if pd.hopeful {
				e = "coalesce(" + e + ", 'NaN'::float8)"
			}
			if e != d[j] {
				sub = append(sub, e+fmt.Sprintf(" AS d%d", j))
				d[j] = fmt.Sprintf("d%d", j)
			}
			wd[j] = d[j]
			if pd.plan.Weight != nil {
				sub = append(sub, fmt.Sprintf("w * %s AS wd%d", e, j))
				wd[j] = fmt.Sprintf("wd%d", j)
			}
		}
		for f := range pd.lay.flags {
			sub = append(sub, fmt.Sprintf("f%d", f))
		}
		src = "(WITH plumb_fence AS (SELECT) SELECT " + strings.Join(sub, ", ") + " FROM " + pd.from() + ") AS s"
		// A row is complete when (Σ d_j)·0 = 0: a NaN or an infinity
		// makes the sum NaN or infinite and the product NaN, a NULL
		// makes it NULL. The d_j are within a few units of their
		// scales, so the sum cannot overflow; p additions instead of
		// 2p comparisons. The aggregate's input computes it once and
		// the missing counts' CASE reuses it (PostgreSQL matches the
		// grouping expression).
		var c []string
		if pd.p > 0 {
			c = append(c, "("+strings.Join(d, " + ")+") * 0::float8 = 0::float8")
		}
		if pd.plan.Weight != nil {
			c = append(c, pd.wok())
		}
		ok = "true"
		if len(c) > 0 {
			ok = "(" + strings.Join(c, " AND ") + ")"
		}
		miss = "CASE WHEN " + ok + " THEN NULL ELSE " + pd.missExpr() + " END"
	}
	list := append(slices.Clone(keys), pd.facList()...)
	nGroup := len(list)
	if !pd.hopeful {
		list = append(list, ok)
		nGroup++
	}
	list = append(list, "count(*)")
	for f := range pd.lay.flags {
		list = append(list, fmt.Sprintf("count(*) FILTER (WHERE f%d)", f))
	}
	if !pd.hopeful {
		list = append(list, "sum("+miss+")")
	}
	switch pd.strategy {
	case pushRegr:
		for j := 0; j < pd.p; j++ {
			list = append(list, "avg("+d[j]+")")
		}
		for i := 0; i < pd.p; i++ {
			for j := i; j < pd.p; j++ {
				list = append(list, "regr_sxy("+d[i]+", "+d[j]+")")
			}
		}
	case pushPaired:
		list = append(list, pd.pairedExprs(d)...)
	default:
		if pd.plan.Weight != nil {
			list = append(list, "sum(w)")
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
	q := "SELECT " + strings.Join(list, ", ") + " FROM " + src
	if nGroup > 0 {
		q += " GROUP BY " + groupBy(nGroup)
	}
	if len(pd.facs) > 0 {
		// One row more than the cells allowed tells that there are too
		// many (postgres_fdw sends the LIMIT too).
		q += fmt.Sprintf(" LIMIT %d", pd.maxCells+1)
	}
	return q
}

// pairs are pushPaired's pairs of columns (a, b), whose means, centred
// sums of squares and co-moment one regr state computes: (0, 1), (2, 3),
// …, and for an odd number of columns (p−1, 0), of which only column
// p−1's mean and square and the co-moment are read; one column is the
// pair (0, 0).
func (pd *push) pairs() [][2]int {
	var out [][2]int
	for a := 0; a+1 < pd.p; a += 2 {
		out = append(out, [2]int{a, a + 1})
	}
	if pd.p%2 == 1 {
		out = append(out, [2]int{pd.p - 1, 0})
	}
	return out
}

// paired reports whether the co-moment of columns i < j comes from a
// pair's regr state.
func (pd *push) paired(i, j int) bool {
	return (i%2 == 0 && j == i+1) || (pd.p%2 == 1 && pd.p > 1 && i == 0 && j == pd.p-1)
}

// pairedExprs are pushPaired's moment aggregates over the aggregated
// columns d: per pair (a, b) regr_avgx, regr_sxx (of a), then, unless b
// was read in an earlier pair, regr_avgy, regr_syy (of b), and, for two
// columns, regr_sxy; then Σ d_i·d_j for every other i < j.
func (pd *push) pairedExprs(d []string) []string {
	var list []string
	for _, pr := range pd.pairs() {
		a, b := pr[0], pr[1]
		args := "(" + d[b] + ", " + d[a] + ")"
		list = append(list, "regr_avgx"+args, "regr_sxx"+args)
		if b > a {
			list = append(list, "regr_avgy"+args, "regr_syy"+args)
		}
		if a != b {
			list = append(list, "regr_sxy"+args)
		}
	}
	for i := 0; i < pd.p; i++ {
		for j := i + 1; j < pd.p; j++ {
			if !pd.paired(i, j) {
				list = append(list, "sum("+d[i]+" * "+d[j]+")")
			}
		}
	}
	return list
}

// nMoments is how many moment aggregates (sums, cross-products, or their
// paired form; weights' sum) a group's row carries before the extremes.
func (pd *push) nMoments() int {
	if pd.strategy == pushPaired {
		return len(pd.pairedExprs(make([]string, pd.p)))
	}
	n := pd.p + pd.p*(pd.p+1)/2
	if pd.strategy != pushRegr && pd.plan.Weight != nil {
		n++
	}
	return n
}

// triIndex is the position of (i, j), i ≤ j, in the row-major upper
// triangle of a p×p matrix (connectors.Stats.Cross).
func triIndex(p, i, j int) int { return i*p - i*(i-1)/2 + (j - i) }

// groupBy is "GROUP BY 1, …, n" by output position, which postgres_fdw
// sends as it is.
func groupBy(n int) string {
	g := make([]string, n)
	for i := range g {
		g[i] = strconv.Itoa(i + 1)
	}
	return strings.Join(g, ", ")
}

// missField is the width, in decimal digits, of one count in missExpr's
// sum: a partition's group may drop up to 10^12 − 1 rows.
const missField = 12

// missExpr encodes why an incomplete row is dropped as a numeric whose
// decimal fields (missField digits each) count, per column, a NULL, a NaN
// and an infinite value, and last an unusable weight (then nothing else,
// as the stream package counts). Its sum over a group's incomplete rows
// holds all their missing counts, exactly: the one statement needs no
// second pass to count them. It is evaluated only for incomplete rows.
func (pd *push) missExpr() string {
	field := func(k int) string { return fmt.Sprintf("1e%d::numeric", missField*k) }
	var terms []string
	for j := 0; j < pd.p; j++ {
		x := fmt.Sprintf("x%d", j)
		terms = append(terms, fmt.Sprintf("CASE WHEN %s IS NULL THEN %s WHEN %s = 'NaN'::float8 THEN %s WHEN %s > '-Infinity'::float8 AND %s < 'Infinity'::float8 THEN 0::numeric ELSE %s END",
			x, field(3*j), x, field(3*j+1), x, x, field(3*j+2)))
	}
	e := "0::numeric"
	if len(terms) > 0 {
		e = "(" + strings.Join(terms, " + ") + ")"
	}
	if pd.plan.Weight != nil {
		e = "CASE WHEN " + pd.wok() + " THEN " + e + " ELSE " + field(3*pd.p) + " END"
	}
	return e
}

// countMissing adds the missing counts that missExpr's sum v encodes to
// miss[k] (as fillMissing reads them: bad weights, then NULL, NaN and
// infinite counts per column).
func (pd *push) countMissing(miss map[gkey][]int64, k gkey, v any) error {
	m := miss[k]
	if m == nil {
		m = make([]int64, 1+3*pd.p)
		miss[k] = m
	}
	x, ok := v.(pgtype.Numeric)
	if !ok || !x.Valid || x.NaN || x.InfinityModifier != pgtype.Finite || x.Int == nil {
		return fmt.Errorf("%s: missing counts: unexpected %T %v", pd.source, v, v)
	}
	n := new(big.Int).Set(x.Int)
	if x.Exp > 0 {
		n.Mul(n, new(big.Int).Exp(big.NewInt(10), big.NewInt(int64(x.Exp)), nil))
	} else if x.Exp < 0 {
		n.Quo(n, new(big.Int).Exp(big.NewInt(10), big.NewInt(int64(-x.Exp)), nil))
	}
	base := new(big.Int).Exp(big.NewInt(10), big.NewInt(missField), nil)
	var r big.Int
	for f := 0; f < 3*pd.p+1 && n.Sign() > 0; f++ {
		n.QuoRem(n, base, &r)
		c := r.Int64()
		if f == 3*pd.p {
			m[0] += c
		} else {
			m[1+f] += c
		}
	}
	return nil
}

// tableScales takes the scales from the leaf's complete rows (a full pass
// of min and max, nothing summed): for when the statistics understated
// the magnitudes.
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
	if err := tx.QueryRow(ctx, "SELECT "+strings.Join(list, ", ")+" FROM "+pd.from()+" WHERE "+pd.okExpr()).Scan(dst...); err != nil {
		return err
	}
	for j := range lo {
		pd.scaleBy[j] = stream.ScaleFor(lo[j], hi[j])
		// Keep the shift within the new scale's reach.
		if !(math.Abs(pd.shiftBy[j]) <= math.Max(math.Abs(lo[j]), math.Abs(hi[j]))) {
			pd.shiftBy[j] = lo[j]/2 + hi[j]/2
		}
	}
	return nil
}

// probe takes the centres and scales of a leaf without statistics from
// its first complete rows (a cheap query: it stops after probeRows rows).
func (pd *push) probe(ctx context.Context, tx pgx.Tx) error {
	xs := make([]string, pd.p)
	for j := range xs {
		xs[j] = fmt.Sprintf("x%d", j)
	}
	rows, err := tx.Query(ctx, fmt.Sprintf("SELECT %s FROM %s WHERE %s LIMIT %d", strings.Join(xs, ", "), pd.from(), pd.okExpr(), probeRows))
	if err != nil {
		return err
	}
	lo := make([]float64, pd.p)
	hi := make([]float64, pd.p)
	n := 0
	err = forRows(rows, func(v []any) error {
		for j, x := range v {
			f := num(x)
			if n == 0 || f < lo[j] {
				lo[j] = f
			}
			if n == 0 || f > hi[j] {
				hi[j] = f
			}
		}
		n++
		return nil
	})
	if err != nil {
		return err
	}
	for j := range pd.shiftBy {
		pd.scaleBy[j] = sqlScale(lo[j], hi[j])
		if n > 0 {
			// The midrange: finite whatever the magnitudes, and among
			// the values.
			pd.shiftBy[j] = lo[j]/2 + hi[j]/2
		}
	}
	pd.needProbe = false
	return nil
}

// key reads a row's bucket and segment keys; false when its time is NULL
// or infinite.
func (pd *push) key(v []any) (gkey, bool) {
	var k gkey
	i := 0
	if pd.plan.Time != nil {
		t, ok := v[0].(time.Time)
		if !ok {
			return k, false
		}
		if pd.ship {
			t = pd.keyTime(t)
		}
		k.bucket = t.UnixMicro()
		i++
	}
	if pd.plan.Segment != nil {
		k.seg = segKey(v[i], pd.segRaw)
	}
	return k, true
}

// keyTime floors a foreign partition's time bin (binExpr) to its bucket:
// a date or timestamp is a wall-clock time in the bucket zone, a
// timestamptz an instant.
func (pd *push) keyTime(t time.Time) time.Time {
	if pd.timeBase != oidTimestamptz {
		t = time.Date(t.Year(), t.Month(), t.Day(), t.Hour(), t.Minute(), t.Second(), t.Nanosecond(), pd.plan.Location)
	}
	return connectors.Calendar{Unit: pd.plan.Bucket, Loc: pd.plan.Location}.Floor(t)
}

// segKey turns a segment value into its key: raw, a value as PostgreSQL's
// cast to text writes it; otherwise the key itself.
func segKey(v any, raw bool) string {
	if !raw {
		s, _ := v.(string)
		return s
	}
	s, ok := levelOf(v) // text as it is, integers and booleans as PostgreSQL writes them
	if !ok {
		return connectors.NullSegment
	}
	return connectors.SegmentKey(s)
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

// fill sets a complete group's statistics from n rows and the aggregates
// v (the strategy's sums, cross-products, then min and max per column).
func (pd *push) fill(st *connectors.Stats, n int64, v []any) {
	p := pd.p
	st.Used = n
	copy(st.Origin, pd.shiftBy)
	copy(st.Scale, pd.scaleBy)
	i := 0
	if pd.strategy == pushPaired {
		pd.fillPaired(st, n, v)
		i = pd.nMoments()
	} else if pd.strategy == pushRegr {
		st.SumWeights = float64(n)
		st.Centered = true
		for j := 0; j < p; j++ {
			st.Sum[j] = num(v[i]) * st.SumWeights
			i++
		}
	} else {
		st.SumWeights = float64(n)
		if pd.plan.Weight != nil {
			st.SumWeights = num(v[i])
			i++
		}
		for j := 0; j < p; j++ {
			st.Sum[j] = num(v[i])
			i++
		}
	}
	if pd.strategy != pushPaired {
		for k := range st.Cross {
			st.Cross[k] = num(v[i])
			i++
		}
	}
	for j := 0; j < p; j++ {
		st.Min[j], st.Max[j] = num(v[i]), num(v[i+1])
		i += 2
	}
}

// fillPaired sets the means and co-moments from pushPaired's aggregates
// (pairedExprs) over n rows: centred as the regr states are, and the
// shifted products Σd_i·d_j made co-moments Σd_i·d_j − n·m_i·m_j with
// the pairs' means m, as Stats.Moments would.
func (pd *push) fillPaired(st *connectors.Stats, n int64, v []any) {
	p := pd.p
	st.SumWeights = float64(n)
	st.Centered = true
	at := func(i, j int) int { return triIndex(p, i, j) }
	mean := make([]float64, p)
	i := 0
	for _, pr := range pd.pairs() {
		a, b := pr[0], pr[1]
		mean[a], st.Cross[at(a, a)] = num(v[i]), num(v[i+1])
		i += 2
		if b > a {
			mean[b], st.Cross[at(b, b)] = num(v[i]), num(v[i+1])
			i += 2
		}
		if a != b {
			st.Cross[at(min(a, b), max(a, b))] = num(v[i])
			i++
		}
	}
	w := st.SumWeights
	for j := range mean {
		st.Sum[j] = mean[j] * w
	}
	for a := 0; a < p; a++ {
		for b := a + 1; b < p; b++ {
			if !pd.paired(a, b) {
				st.Cross[at(a, b)] = num(v[i]) - w*mean[a]*mean[b]
				i++
			}
		}
	}
}

// finite reports whether a group's sums and cross-products (the
// aggregates fill reads) are all finite.
func (pd *push) finite(v []any) bool {
	for _, x := range v[:pd.nMoments()] {
		if f := num(x); math.IsNaN(f) || math.IsInf(f, 0) {
			return false
		}
	}
	return true
}

func (pd *push) fillMissing(st *connectors.Stats, v []int64) {
	st.BadWeights = v[0]
	for j := 0; j < pd.p; j++ {
		st.Null[j] = v[1+3*j]
		st.NaN[j] = v[2+3*j]
		st.Inf[j] = v[3+3*j]
	}
}
