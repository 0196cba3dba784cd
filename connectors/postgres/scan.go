package postgres

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"sync/atomic"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"plumb/connectors"
)

// Scan reads the requested columns and accumulates them: one streaming
// pass, K partitions at once (Options.Parallel), or an aggregate computed
// by the server (Options.Pushdown).
func (s *Source) Scan(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if req.SamplePct < 0 || req.SamplePct > 100 || math.IsNaN(req.SamplePct) {
		return nil, fmt.Errorf("--sample %v: want a percentage in (0, 100]: %w", req.SamplePct, connectors.ErrUnsupported)
	}
	if s.opts.Pushdown {
		return s.pushdown(ctx, req)
	}
	k := s.opts.Parallel
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return nil, s.wrap(err, "cannot connect")
	}
	defer conn.Release()
	opts := pgx.TxOptions{AccessMode: pgx.ReadOnly}
	if k > 1 {
		opts.IsoLevel = pgx.RepeatableRead
	}
	tx, err := conn.BeginTx(ctx, opts)
	if err != nil {
		return nil, s.wrap(err, "begin")
	}
	defer tx.Rollback(context.Background())
	t, plan, st, err := s.prepare(ctx, tx, req)
	if err != nil {
		return nil, err
	}
	list, lay, err := streamList(t, plan)
	if err != nil {
		return nil, err
	}
	if k > 1 && t.table == nil {
		return nil, fmt.Errorf("query: --parallel splits a table by TID ranges; give --table: %w", connectors.ErrUnsupported)
	}
	if k > 1 && (t.relkind == "v" || t.relkind == "f") {
		return nil, fmt.Errorf("%s: --parallel splits a table by TID ranges, and a view has none: %w", t.source, connectors.ErrUnsupported)
	}
	var total int64
	if req.Progress != nil {
		total, _ = s.estimate(ctx, tx, t, req)
	}
	prog := newProgress(req.Progress, total)

	var ranges [][2]int64
	if k > 1 {
		var nblocks int64
		if err := tx.QueryRow(ctx, `SELECT greatest(pg_relation_size($1::regclass),
				coalesce((SELECT max(pg_relation_size(relid)) FROM pg_partition_tree($1::regclass)), 0))
				/ current_setting('block_size')::int8`, t.oid).Scan(&nblocks); err != nil {
			return nil, s.wrap(err, t.source)
		}
		ranges = tidRanges(nblocks, k)
	}
	var decs []*decoder
	if len(ranges) <= 1 {
		d := newDecoder(t.source, plan, lay, req.QR)
		d.tick = prog.add
		if err := s.stream(ctx, tx, st.sql(list), d); err != nil {
			return nil, err
		}
		decs = append(decs, d)
	} else {
		var snap string
		if err := tx.QueryRow(ctx, "SELECT pg_export_snapshot()").Scan(&snap); err != nil {
			return nil, s.wrap(err, "exporting the snapshot for --parallel")
		}
		if decs, err = s.partitions(ctx, tx, snap, t, plan, lay, st, list, ranges, req.QR, prog); err != nil {
			return nil, err
		}
	}
	prog.flush()
	res := &connectors.Result{
		Sampled:    req.SamplePct > 0 && req.SamplePct < 100,
		Skipped:    plan.Skipped,
		Partitions: len(decs),
	}
	// Partitions may have seen different levels: every group is widened to
	// the union.
	facs := make([][]connectors.Factor, len(decs))
	inexact := make([]int64, len(plan.Values))
	for i, d := range decs {
		facs[i] = d.g.Factors()
		res.Read += d.read
		res.NoTime += d.noTime
		for j, n := range d.inexact {
			inexact[j] += n
		}
	}
	res.Factors = connectors.UnionFactors(facs...)
	res.Columns = connectors.ExpandNames(plan.Names(), res.Factors)
	res.Inexact = connectors.SpreadCounts(plan, res.Factors, inexact)
	if err := connectors.CheckLevels(t.source, res); err != nil {
		return nil, err
	}
	parts := make([][]connectors.Group, len(decs))
	for i, d := range decs {
		parts[i] = d.g.GroupsOver(res.Columns)
	}
	if err := s.countLevels(ctx, tx, t, plan); err != nil {
		return nil, err
	}
	if len(parts) == 1 {
		res.Groups = parts[0]
	} else if res.Groups, err = connectors.MergeGroups(parts, plan.MaxSegments); err != nil {
		return nil, fmt.Errorf("%s: segment column %q: %w", t.source, plan.Segment.Name, err)
	}
	return res, nil
}

// prepare describes the target, resolves the request and builds the
// statement's FROM and WHERE.
func (s *Source) prepare(ctx context.Context, tx pgx.Tx, req connectors.Request) (*target, *connectors.Plan, stmt, error) {
	t, err := s.describe(ctx, tx, req)
	if err != nil {
		return nil, nil, stmt{}, err
	}
	plan, err := connectors.Resolve(t.source, t.cols, req, connectors.KindTime)
	if err != nil {
		return nil, nil, stmt{}, err
	}
	where, err := connectors.CheckWhere(req.Where, connectors.Postgres)
	if err != nil {
		return nil, nil, stmt{}, err
	}
	st, err := s.baseStmt(t, where, req)
	if err != nil {
		return nil, nil, stmt{}, err
	}
	return t, plan, st, nil
}

// tidRanges splits nblocks pages into k ranges [lo, hi); the first starts
// at 0 and the last is open (hi = -1), so pages added meanwhile are read.
func tidRanges(nblocks int64, k int) [][2]int64 {
	if nblocks < int64(k) {
		k = int(max(nblocks, 1))
	}
	per := (nblocks + int64(k) - 1) / int64(k)
	out := make([][2]int64, k)
	for i := range out {
		out[i] = [2]int64{int64(i) * per, int64(i+1) * per}
	}
	out[k-1][1] = -1
	return out
}

func tidCond(r [2]int64) []string {
	var c []string
	if r[0] > 0 {
		c = append(c, fmt.Sprintf("ctid >= '(%d,0)'::tid", r[0]))
	}
	if r[1] >= 0 {
		c = append(c, fmt.Sprintf("ctid < '(%d,0)'::tid", r[1]))
	}
	return c
}

// partitions scans the ranges at once, range 0 on tx and the others on
// their own connections in transactions that import tx's snapshot, so all
// see the same rows. Nothing is merged unless every range succeeded.
func (s *Source) partitions(ctx context.Context, tx pgx.Tx, snap string, t *target, plan *connectors.Plan, lay layout,
	st stmt, list []string, ranges [][2]int64, qr bool, prog *progress) ([]*decoder, error) {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	decs := make([]*decoder, len(ranges))
	errs := make([]error, len(ranges))
	var wg sync.WaitGroup
	for i, r := range ranges {
		d := newDecoder(fmt.Sprintf("%s (range %d of %d)", t.source, i+1, len(ranges)), plan, lay, qr)
		d.tick = prog.add
		decs[i] = d
		q := st.sql(list, tidCond(r)...)
		wg.Add(1)
		go func(i int) {
			defer wg.Done()
			var err error
			defer func() {
				// Off the caller's goroutine a panic would end the
				// process: it fails this scan instead.
				if p := recover(); p != nil {
					errs[i] = fmt.Errorf("%s: scanning range %d panicked: %v (a bug in plumb; please report it)", t.source, i+1, p)
					cancel()
				}
			}()
			if i == 0 {
				err = s.stream(ctx, tx, q, d)
			} else {
				err = s.streamSnapshot(ctx, snap, q, d)
			}
			if err != nil {
				errs[i] = err
				cancel()
			}
		}(i)
	}
	wg.Wait()
	if err := firstError(errs); err != nil {
		return nil, err
	}
	return decs, nil
}

// firstError returns the first failure of workers that cancel each other
// on failure, preferring one that is not a consequence of the cancelling;
// nil when none failed.
func firstError(errs []error) error {
	var first error
	for _, err := range errs {
		if err != nil && (first == nil || (isCancel(first) && !isCancel(err))) {
			first = err
		}
	}
	return first
}

func isCancel(err error) bool {
	var pe *pgconn.PgError
	return errors.Is(err, context.Canceled) || (errors.As(err, &pe) && pe.Code == "57014" && strings.Contains(pe.Message, "user request"))
}

func (s *Source) streamSnapshot(ctx context.Context, snap, q string, d *decoder) error {
	tx, done, err := s.snapshotTx(ctx, snap, "--parallel")
	if err != nil {
		return err
	}
	defer done()
	return s.stream(ctx, tx, q, d)
}

// snapshotTx opens a read-only transaction on a connection of its own that
// reads the exported snapshot snap (for purpose, in messages); done rolls
// it back and releases the connection.
func (s *Source) snapshotTx(ctx context.Context, snap, purpose string) (tx pgx.Tx, done func(), err error) {
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return nil, nil, s.wrap(err, "cannot connect")
	}
	tx, err = conn.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly, IsoLevel: pgx.RepeatableRead})
	if err != nil {
		conn.Release()
		return nil, nil, s.wrap(err, "begin")
	}
	done = func() {
		tx.Rollback(context.Background())
		conn.Release()
	}
	if _, err := tx.Exec(ctx, "SET TRANSACTION SNAPSHOT "+quoteLiteral(snap)); err != nil {
		done()
		return nil, nil, s.wrap(err, "importing the snapshot for "+purpose)
	}
	return tx, done, nil
}

// stream runs one SELECT and feeds its rows to d.
func (s *Source) stream(ctx context.Context, tx pgx.Tx, q string, d *decoder) error {
	if s.mode == readCopy {
		p := &copyParser{d: d}
		_, err := tx.Conn().PgConn().CopyTo(ctx, p, "COPY ("+q+") TO STDOUT (FORMAT binary)")
		if d.err != nil {
			return d.err
		}
		if err != nil {
			return s.wrap(err, d.source)
		}
		if !p.done {
			return s.wrap(fmt.Errorf("COPY stream ended without its trailer"), d.source)
		}
		return nil
	}
	rows, err := tx.Query(ctx, q, pgx.QueryResultFormats{pgx.BinaryFormatCode})
	if err != nil {
		return s.wrap(err, d.source)
	}
	defer rows.Close()
	for rows.Next() {
		if err := d.row(rows.RawValues()); err != nil {
			return err
		}
	}
	// A query can deliver rows and fail afterwards.
	if err := rows.Err(); err != nil {
		return s.wrap(err, d.source)
	}
	return nil
}

// progress aggregates row counts from the partitions for Request.Progress.
type progress struct {
	fn    func(read, total int64)
	total int64
	n     atomic.Int64
	mu    sync.Mutex
}

// newProgress reports no rows read yet, so that a rate measured by the
// caller starts with the scan rather than with the first block.
func newProgress(fn func(read, total int64), total int64) *progress {
	if fn != nil {
		fn(0, total)
	}
	return &progress{fn: fn, total: total}
}

func (p *progress) add(n int64) {
	if p.fn == nil {
		return
	}
	v := p.n.Add(n)
	p.mu.Lock()
	p.fn(v, p.total)
	p.mu.Unlock()
}

func (p *progress) flush() {
	if p.fn == nil {
		return
	}
	p.mu.Lock()
	p.fn(p.n.Load(), p.total)
	p.mu.Unlock()
}

// Estimate returns the planner's row estimate for a table (pg_class
// reltuples, with its partitions), scaled by the sample; 0 when unknown.
func (s *Source) Estimate(ctx context.Context, req connectors.Request) (int64, error) {
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return 0, s.wrap(err, "cannot connect")
	}
	defer conn.Release()
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly})
	if err != nil {
		return 0, s.wrap(err, "begin")
	}
	defer tx.Rollback(context.Background())
	t, err := s.describe(ctx, tx, req)
	if err != nil {
		return 0, err
	}
	return s.estimate(ctx, tx, t, req)
}

func (s *Source) estimate(ctx context.Context, tx pgx.Tx, t *target, req connectors.Request) (int64, error) {
	if t.table == nil {
		return 0, nil
	}
	var est float64
	if err := tx.QueryRow(ctx, `SELECT greatest(c.reltuples, 0) + coalesce((SELECT sum(greatest(ch.reltuples, 0))
			FROM pg_inherits i JOIN pg_class ch ON ch.oid = i.inhrelid WHERE i.inhparent = c.oid), 0)
		FROM pg_class c WHERE c.oid = $1`, t.oid).Scan(&est); err != nil {
		return 0, s.wrap(err, t.source)
	}
	if req.SamplePct > 0 && req.SamplePct < 100 {
		est *= req.SamplePct / 100
	}
	return int64(est), nil
}

// countLevels fills in the number of distinct values of the text columns
// left out of the scan from the planner's statistics (pg_stats.n_distinct,
// scaled by the row estimate when it is a fraction), up to one more than
// the limit on levels; columns without statistics, and queries, keep 0.
func (s *Source) countLevels(ctx context.Context, tx pgx.Tx, t *target, plan *connectors.Plan) error {
	if t.table == nil {
		return nil
	}
	var names []string
	for _, c := range plan.Skipped {
		if c.Kind == connectors.KindText {
			names = append(names, c.Name)
		}
	}
	if len(names) == 0 {
		return nil
	}
	rows, err := tx.Query(ctx, `SELECT s.attname::text, CASE WHEN s.n_distinct >= 0 THEN s.n_distinct
			ELSE -s.n_distinct * greatest(c.reltuples, 0) END
		FROM pg_stats s JOIN pg_class c ON c.oid = $1
		WHERE s.schemaname = $2 AND s.tablename = $3 AND s.attname::text = ANY($4) AND NOT s.inherited`,
		t.oid, t.table.Schema, t.table.Table, names)
	if err != nil {
		return s.wrap(err, t.source)
	}
	defer rows.Close()
	for rows.Next() {
		var name string
		var n float64
		if err := rows.Scan(&name, &n); err != nil {
			return s.wrap(err, t.source)
		}
		for i := range plan.Skipped {
			if c := &plan.Skipped[i]; c.Name == name && n > 0 {
				c.Levels = int(min(math.Round(n), float64(plan.MaxLevels+1)))
				c.LevelsMore = n > float64(plan.MaxLevels)
			}
		}
	}
	if err := rows.Err(); err != nil {
		return s.wrap(err, t.source)
	}
	return nil
}
