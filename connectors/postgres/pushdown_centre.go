package postgres

import (
	"context"
	"math"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/stream"
)

// colStats is what the planner's statistics say of a column: a rough
// mean and the extremes of its sample, and whether it holds NULLs.
type colStats struct {
	mean, lo, hi float64
	nulls        bool
	ok           bool
}

// centreSet holds the statistics of the leaves (per leaf, per value
// column) and of the partitioned parent (inherited statistics, from an
// ANALYZE of the parent).
type centreSet struct {
	leaf   [][]colStats
	parent []colStats
}

// centres reads pg_stats for the leaves and the parent: the provisional
// centres and scales cost no scan of the data. A foreign partition has
// statistics only when it was ANALYZEd on the coordinator (ANALYZE of the
// parent does it); without them the parent's, a sibling's, the caller's
// (Request.Centres, e.g. a watch's previous means) or, last, a few rows
// (probe) stand in.
func (s *Source) centres(ctx context.Context, tx pgx.Tx, t *target, leaves []leaf, plan *connectors.Plan) (*centreSet, error) {
	p := len(plan.Values)
	cs := &centreSet{leaf: make([][]colStats, len(leaves)), parent: make([]colStats, p)}
	for i := range cs.leaf {
		cs.leaf[i] = make([]colStats, p)
	}
	if t.table == nil {
		return cs, nil
	}
	col := map[string]int{}
	names := make([]string, p)
	for j, c := range plan.Values {
		col[c.Name] = j
		names[j] = c.Name
	}
	type rel struct{ schema, table string }
	idx := map[rel]int{}
	var schemas, tables []string
	for i, l := range leaves {
		if l.self {
			idx[rel{t.table.Schema, t.table.Table}] = i
			continue
		}
		idx[rel{l.name.Schema, l.name.Table}] = i
		schemas, tables = append(schemas, l.name.Schema), append(tables, l.name.Table)
	}
	schemas, tables = append(schemas, t.table.Schema), append(tables, t.table.Table)
	rows, err := tx.Query(ctx, statsSQL, schemas, tables, names)
	if err != nil {
		return nil, s.wrap(err, t.source+": reading pg_stats")
	}
	defer rows.Close()
	for rows.Next() {
		var sch, tab, att string
		var inh bool
		var nullFrac float64
		var mcv, hist []*float64
		if err := rows.Scan(&sch, &tab, &att, &inh, &nullFrac, &mcv, &hist); err != nil {
			return nil, s.wrap(err, t.source+": reading pg_stats")
		}
		j, ok := col[att]
		if !ok {
			continue
		}
		st := statsOf(nullFrac, mcv, hist)
		if sch == t.table.Schema && tab == t.table.Table && len(leaves) > 0 && !leaves[0].self {
			if inh {
				cs.parent[j] = st
			}
			continue
		}
		if i, ok := idx[rel{sch, tab}]; ok && !inh {
			cs.leaf[i][j] = st
		}
	}
	if err := rows.Err(); err != nil {
		return nil, s.wrap(err, t.source+": reading pg_stats")
	}
	return cs, nil
}

// statsSQL reduces each column's statistics in the server to a few
// numbers, so that what plumb reads does not grow with the statistics
// target: of the most common values Σv·f, Σf, min and max; of the
// histogram bounds their mean, min, max and count. Values are read through
// their text form (pg_stats holds anyarray): booleans as 0 and 1, numbers
// in float8's range as themselves, anything else (NaN, ±Infinity, numeric
// beyond float8) left out. Sums are taken in numeric, which cannot
// overflow.
const statsSQL = `WITH s AS (
		SELECT s.schemaname::text AS sch, s.tablename::text AS tab, s.attname::text AS att, s.inherited, s.null_frac::float8 AS nf,
			s.most_common_vals::text::text[] AS mcv, s.most_common_freqs AS mf, s.histogram_bounds::text::text[] AS hb
		FROM pg_stats s JOIN unnest($1::text[], $2::text[]) AS r(sch, tab) ON s.schemaname = r.sch AND s.tablename = r.tab
		WHERE s.attname = ANY($3::text[])),
	v AS (
		SELECT s.*, m.kind, m.i, m.f,
			CASE WHEN m.v IN ('t', 'true') THEN 1::numeric WHEN m.v IN ('f', 'false') THEN 0::numeric
				WHEN m.v ~ '^[-+]?([0-9]+[.]?[0-9]*|[.][0-9]+)([eE][-+]?[0-9]+)?$' THEN
					CASE WHEN abs(m.v::numeric) < 1e300 THEN m.v::numeric END END AS x
		FROM s, LATERAL (
			SELECT 'm' AS kind, u.i, u.v, u.f::float8 AS f FROM unnest(s.mcv, s.mf) WITH ORDINALITY AS u(v, f, i)
			UNION ALL
			SELECT 'h', u.i, u.v, NULL FROM unnest(s.hb) WITH ORDINALITY AS u(v, i)) AS m)
	SELECT sch, tab, att, inherited, nf,
		ARRAY[sum(x * f::numeric) FILTER (WHERE kind = 'm'), sum(f) FILTER (WHERE kind = 'm' AND x IS NOT NULL),
			min(x) FILTER (WHERE kind = 'm'), max(x) FILTER (WHERE kind = 'm')]::float8[],
		ARRAY[avg(x) FILTER (WHERE kind = 'h'), min(x) FILTER (WHERE kind = 'h'), max(x) FILTER (WHERE kind = 'h'),
			count(x) FILTER (WHERE kind = 'h')]::float8[]
	FROM v GROUP BY sch, tab, att, inherited, nf`

// statsOf estimates a column's mean from its most common values (their
// Σv·f, Σf, min, max) and its equi-depth histogram (the mean of its
// bounds for the share of the rest, their min, max and count).
func statsOf(nullFrac float64, mcv, hist []*float64) colStats {
	var st colStats
	val := func(a []*float64, i int) (float64, bool) {
		if i >= len(a) || a[i] == nil {
			return 0, false
		}
		return *a[i], true
	}
	first := true
	for _, a := range [][]*float64{mcv[min(2, len(mcv)):], hist[min(1, len(hist)):]} {
		for i := 0; i < 2; i++ {
			v, ok := val(a, i)
			if !ok {
				continue
			}
			if first || v < st.lo {
				st.lo = v
			}
			if first || v > st.hi {
				st.hi = v
			}
			first = false
		}
	}
	if first {
		return st
	}
	st.mean = st.lo/2 + st.hi/2
	sc := stream.ScaleFor(st.lo, st.hi)
	var sum, w float64
	if sv, ok := val(mcv, 0); ok {
		if f, ok := val(mcv, 1); ok && f > 0 {
			sum, w = sv/sc, f
		}
	}
	if hm, ok := val(hist, 0); ok {
		if n, _ := val(hist, 3); n >= 2 {
			rest := math.Max(1-nullFrac-w, 1e-9)
			sum += hm / sc * rest
			w += rest
		}
	}
	if w > 0 {
		if m := sum / w * sc; m >= st.lo && m <= st.hi {
			st.mean = m
		}
	}
	st.nulls = nullFrac > 0
	st.ok = true
	return st
}

// forLeaf sets leaf i's centres and scales: the leaf's own statistics, the
// parent's, a sibling's; a centre the caller knows (hint, by column name)
// is preferred to a statistic's estimate. A column with neither leaves the
// leaf to be probed. nulls: the statistics say a column holds NULLs.
func (cs *centreSet) forLeaf(i int, plan *connectors.Plan, hint map[string]float64) (shift, scale []float64, probe, nulls bool) {
	p := len(plan.Values)
	shift, scale = make([]float64, p), make([]float64, p)
	for j, c := range plan.Values {
		st := cs.leaf[i][j]
		if !st.ok {
			st = cs.parent[j]
		}
		for k := 0; !st.ok && k < len(cs.leaf); k++ {
			st = cs.leaf[k][j]
		}
		scale[j] = 1
		nulls = nulls || st.nulls
		if st.ok {
			scale[j] = sqlScale(st.lo, st.hi)
			shift[j] = st.mean
		}
		h, known := hint[c.Name]
		if known && !math.IsNaN(h) && !math.IsInf(h, 0) {
			shift[j] = h
			if !st.ok {
				scale[j] = sqlScale(h, h)
			}
		} else if !st.ok {
			probe = true
		}
	}
	return shift, scale, probe, nulls
}

// sqlScale is the power of two a pushdown divides a column by: 1 for
// magnitudes between 1e-100 and 1e100, whose products and their sums over
// any number of rows stay normal float8 numbers (and the aggregate is
// spared two products per value), else stream.ScaleFor's. Should the data
// go beyond what the statistics said, a product overflows and the
// aggregate runs again with the leaf's own extremes (tableScales).
func sqlScale(lo, hi float64) float64 {
	if m := math.Max(math.Abs(lo), math.Abs(hi)); m == 0 || m >= 1e-100 && m <= 1e100 {
		return 1
	}
	return stream.ScaleFor(lo, hi)
}

// setCentres sets the leaf's centres and scales, and whether its first
// statement may assume complete rows (see push.hopeful): not when the
// statistics say a column holds NULLs, as the statement would then be
// run again.
func (pd *push) setCentres(shift, scale []float64, probe, nulls bool) {
	pd.shiftBy, pd.scaleBy, pd.needProbe = shift, scale, probe
	pd.hopeful = pd.hopeful && !nulls
}
