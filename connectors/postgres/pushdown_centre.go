package postgres

import (
	"context"
	"math"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/stream"
)

// colStats is what the planner's statistics say of a column: a rough
// mean and the extremes of its sample.
type colStats struct {
	mean, lo, hi float64
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
	rows, err := tx.Query(ctx, `SELECT s.schemaname::text, s.tablename::text, s.attname::text, s.inherited, s.null_frac,
			s.most_common_vals::text, s.most_common_freqs, s.histogram_bounds::text
		FROM pg_stats s JOIN unnest($1::text[], $2::text[]) AS r(sch, tab) ON s.schemaname = r.sch AND s.tablename = r.tab
		WHERE s.attname = ANY($3::text[])`, schemas, tables, names)
	if err != nil {
		return nil, s.wrap(err, t.source+": reading pg_stats")
	}
	defer rows.Close()
	for rows.Next() {
		var sch, tab, att string
		var inh bool
		var nullFrac float32
		var mcv, hist *string
		var freqs []float32
		if err := rows.Scan(&sch, &tab, &att, &inh, &nullFrac, &mcv, &freqs, &hist); err != nil {
			return nil, s.wrap(err, t.source+": reading pg_stats")
		}
		j, ok := col[att]
		if !ok {
			continue
		}
		st := statsOf(float64(nullFrac), parseStatArray(mcv), freqs, parseStatArray(hist))
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

// parseStatArray reads a pg_stats anyarray in text form ("{1.5,2,NaN}",
// "{f,t}") as float64, leaving out what is not a finite number.
func parseStatArray(s *string) []float64 {
	if s == nil {
		return nil
	}
	body := strings.TrimSuffix(strings.TrimPrefix(*s, "{"), "}")
	var out []float64
	for _, e := range strings.Split(body, ",") {
		e = strings.Trim(e, `"`)
		switch e {
		case "t", "true":
			out = append(out, 1)
			continue
		case "f", "false":
			out = append(out, 0)
			continue
		}
		v, err := strconv.ParseFloat(e, 64)
		if err == nil && !math.IsInf(v, 0) && !math.IsNaN(v) {
			out = append(out, v)
		}
	}
	return out
}

// statsOf estimates a column's mean from its most common values and
// their frequencies and its equi-depth histogram (each bucket's midpoint
// for its share of the rest), on values divided by the power of two their
// extremes call for, so nothing overflows.
func statsOf(nullFrac float64, mcv []float64, freqs []float32, hist []float64) colStats {
	var st colStats
	first := true
	for _, v := range append(append([]float64(nil), mcv...), hist...) {
		if first || v < st.lo {
			st.lo = v
		}
		if first || v > st.hi {
			st.hi = v
		}
		first = false
	}
	if first {
		return st
	}
	sc := stream.ScaleFor(st.lo, st.hi)
	var sum, w float64
	for i, v := range mcv {
		if i < len(freqs) {
			sum += v / sc * float64(freqs[i])
			w += float64(freqs[i])
		}
	}
	if len(hist) >= 2 {
		rest := 1 - nullFrac - w
		if rest <= 0 {
			rest = 1e-9
		}
		per := rest / float64(len(hist)-1)
		for i := 0; i+1 < len(hist); i++ {
			sum += (hist[i]/sc/2 + hist[i+1]/sc/2) * per
		}
		w += rest
	}
	st.mean = st.lo/2 + st.hi/2
	if w > 0 {
		if m := sum / w * sc; m >= st.lo && m <= st.hi {
			st.mean = m
		}
	}
	st.ok = true
	return st
}

// forLeaf sets leaf i's centres and scales: the leaf's own statistics, the
// parent's, a sibling's; a centre the caller knows (hint, by column name)
// is preferred to a statistic's estimate. A column with neither leaves the
// leaf to be probed.
func (cs *centreSet) forLeaf(i int, plan *connectors.Plan, hint map[string]float64) (shift, scale []float64, probe bool) {
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
		if st.ok {
			scale[j] = stream.ScaleFor(st.lo, st.hi)
			shift[j] = st.mean
		}
		h, known := hint[c.Name]
		if known && !math.IsNaN(h) && !math.IsInf(h, 0) {
			shift[j] = h
			if !st.ok {
				scale[j] = stream.ScaleFor(h, h)
			}
		} else if !st.ok {
			probe = true
		}
	}
	return shift, scale, probe
}

func (pd *push) setCentres(shift, scale []float64, probe bool) {
	pd.shiftBy, pd.scaleBy, pd.needProbe = shift, scale, probe
}
