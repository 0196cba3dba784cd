package connectors

import (
	"fmt"
	"slices"
	"time"

	"plumb/stream"
)

// Grouper turns rows into stream blocks, one accumulator per key (bucket and
// segment), for every connector. A connector asks for a row's slots with
// Row, fills them, and at the end takes Groups.
//
// Without keys there is one block of stream.DefaultBlockRows rows that is
// folded straight into the accumulators. With keys each group has a small
// block that grows as its rows come; the rows buffered over all groups are
// bounded, and when the bound is reached every open block is folded and
// released, so memory does not grow with the number of buckets.
//
// Factors (GroupOptions.Factors) are dictionary-coded: the connector puts
// the code Level returns for the row's value in the factor's slot (or marks
// it NULL), and the Grouper writes the row into its block with one
// indicator column per level seen. A new level folds what is buffered,
// widens every group's accumulators by the new all-zero indicator column
// (stream's Widen) and goes on with wider blocks, so every group holds all
// levels the scan has seen. A row whose factor is NULL is dropped and
// counted against the factor (Factors) and in the group's dropped rows.
// Steady state (no new level) allocates nothing per row.
type Grouper struct {
	names       []string // accumulated columns (factors expanded)
	p           int
	qr          bool
	extended    bool
	weighted    bool
	keyed       bool
	bucketed    bool
	segmented   bool
	maxSegments int
	loc         *time.Location

	single *groupAcc
	groups map[int64]map[string]*groupAcc
	segs   map[string]struct{}
	last   *groupAcc
	open   []*groupAcc // groups with a non-empty block
	inBuf  int         // rows buffered in open blocks
	free   []*stream.Block
	worker *stream.Moments

	// factors
	in        []string      // the input columns, as the connector fills them
	facs      []*factorDict // in input order
	facAt     []int         // per input column: its index in facs, or -1
	pos       []int         // per input column: its (first indicator's) index in names
	maxLevels int
	stage     []float64 // the pending row, input columns
	stageNull []bool
	stageW    float64
	pending   *groupAcc // the group of the pending row; nil when none
}

// factorDict codes the levels of one factor in order of appearance.
type factorDict struct {
	name   string
	col    int
	codes  map[string]int32
	levels []string // by code
	rank   []int    // by code: position among the sorted levels
	null   int64
}

type groupAcc struct {
	key     Key
	bucket  int64
	seg     string
	block   *stream.Block
	m       *stream.Moments // nil while there are no columns yet
	q       *stream.QR
	dropped int64 // rows dropped for a NULL factor, not yet counted in m and q
}

// GroupOptions configure a Grouper.
type GroupOptions struct {
	Columns     []string
	QR          bool
	Extended    bool // QR factors in double-double
	Weighted    bool
	Bucketed    bool           // rows carry a bucket start
	Segmented   bool           // rows carry a segment value
	MaxSegments int            // 0 means DefaultMaxSegments
	Location    *time.Location // zone of the bucket keys; nil means UTC
	// Factors lists the indices in Columns of the factors: their slots
	// take the codes Level returns.
	Factors   []int
	MaxLevels int // 0 means DefaultMaxLevels
}

const (
	keyedBlockRows   = 1024
	keyedQRBlockRows = 256
	keyedStartRows   = 16
	keyedBufferRows  = 1 << 16
)

// NewGrouper returns a Grouper for the options.
func NewGrouper(o GroupOptions) *Grouper {
	g := &Grouper{
		in:          append([]string(nil), o.Columns...),
		qr:          o.QR || o.Extended,
		extended:    o.Extended,
		weighted:    o.Weighted,
		bucketed:    o.Bucketed,
		segmented:   o.Segmented,
		keyed:       o.Bucketed || o.Segmented,
		maxSegments: o.MaxSegments,
		maxLevels:   o.MaxLevels,
		loc:         o.Location,
	}
	if g.maxSegments <= 0 {
		g.maxSegments = DefaultMaxSegments
	}
	if g.maxLevels <= 0 {
		g.maxLevels = DefaultMaxLevels
	}
	if g.loc == nil {
		g.loc = time.UTC
	}
	if len(o.Factors) > 0 {
		g.facAt = make([]int, len(g.in))
		for j := range g.facAt {
			g.facAt[j] = -1
		}
		for _, j := range o.Factors {
			g.facAt[j] = len(g.facs)
			g.facs = append(g.facs, &factorDict{name: g.in[j], col: j, codes: map[string]int32{}})
		}
		g.stage = make([]float64, len(g.in))
		g.stageNull = make([]bool, len(g.in))
		g.pos = make([]int, len(g.in))
	}
	g.expand()
	if g.keyed {
		g.groups = map[int64]map[string]*groupAcc{}
		g.segs = map[string]struct{}{}
		if g.p > 0 {
			g.worker = stream.NewMoments(g.names)
		}
	} else {
		g.single = g.newAcc(0, "")
		if g.p > 0 {
			g.single.block = stream.NewBlock(g.p, stream.DefaultBlockRows, g.weighted)
		}
	}
	return g
}

// expand sets the accumulated columns from the input columns and the
// levels seen.
func (g *Grouper) expand() {
	if g.facs == nil {
		g.names, g.p = g.in, len(g.in)
		return
	}
	g.names = g.names[:0:0]
	for j, n := range g.in {
		g.pos[j] = len(g.names)
		fi := g.facAt[j]
		if fi < 0 {
			g.names = append(g.names, n)
			continue
		}
		f := g.facs[fi]
		sorted := slices.Clone(f.levels)
		slices.Sort(sorted)
		for _, l := range sorted {
			g.names = append(g.names, stream.IndicatorName(n, l))
		}
		for c, l := range f.levels {
			f.rank[c], _ = slices.BinarySearch(sorted, l)
		}
	}
	g.p = len(g.names)
}

// NewGrouperFor returns a Grouper for a resolved plan.
func NewGrouperFor(p *Plan, qr bool) *Grouper {
	return NewGrouper(GroupOptions{
		Columns:     p.Names(),
		QR:          qr || p.Extended,
		Extended:    p.Extended,
		Weighted:    p.Weight != nil,
		Bucketed:    p.Time != nil,
		Segmented:   p.Segment != nil,
		MaxSegments: p.MaxSegments,
		Location:    p.Location,
		Factors:     p.Factors(),
		MaxLevels:   p.MaxLevels,
	})
}

func (g *Grouper) newAcc(bucket int64, seg string) *groupAcc {
	a := &groupAcc{bucket: bucket, seg: seg}
	if g.bucketed {
		a.key.Bucket = time.UnixMicro(bucket).In(g.loc)
	}
	a.key.Segment = seg
	if g.p > 0 {
		a.m = stream.NewMoments(g.names)
		if g.extended {
			a.q = stream.NewQRExtended(g.names)
		} else if g.qr {
			a.q = stream.NewQR(g.names)
		}
	}
	return a
}

// Row starts a row in the group of bucket (the bucket start in Unix
// microseconds; ignored without bucketing) and seg (the segment key,
// ignored without segmenting: AppendSegmentKey of the value, NullSegment
// for NULL) and returns its value and NULL slots, one per column of
// GroupOptions.Columns, zeroed, to be filled by the caller (a factor's slot
// with the code from Level). A new segment beyond the bound is an error
// wrapping ErrTooManySegments.
func (g *Grouper) Row(bucket int64, seg []byte) (vals []float64, nulls []bool, err error) {
	if g.facs != nil {
		g.commit()
	}
	a := g.single
	if g.keyed {
		if !g.bucketed {
			bucket = 0
		}
		if !g.segmented {
			seg = nil
		}
		a = g.last
		if a == nil || a.bucket != bucket || a.seg != string(seg) {
			if a, err = g.lookup(bucket, seg); err != nil {
				return nil, nil, err
			}
			g.last = a
		}
	} else {
		g.last = a
	}
	if g.facs != nil {
		g.pending = a
		clear(g.stage)
		clear(g.stageNull)
		g.stageW = 1
		return g.stage, g.stageNull, nil
	}
	vals, nulls = g.slot(a)
	return vals, nulls, nil
}

// slot appends a row to a's block, folding or flushing blocks as needed.
func (g *Grouper) slot(a *groupAcc) (vals []float64, nulls []bool) {
	if g.keyed {
		if a.block == nil {
			a.block = g.getBlock()
		}
		if a.block.Rows == 0 {
			g.open = append(g.open, a)
		}
		limit := keyedBlockRows
		if g.qr {
			limit = keyedQRBlockRows
		}
		if a.block.Rows >= limit {
			g.foldKeyed(a)
			g.open = append(g.open, a)
		}
		if g.inBuf >= keyedBufferRows {
			g.flushOpen()
			a.block = g.getBlock()
			g.open = append(g.open, a)
		}
		g.inBuf++
	} else if a.block.Full() {
		g.foldSingle()
	}
	return a.block.AppendRow()
}

// commit writes the pending row of a Grouper with factors into its group's
// block: plain values in place, each factor as a 1 in its level's
// indicator column.
func (g *Grouper) commit() {
	a := g.pending
	if a == nil {
		return
	}
	g.pending = nil
	for _, f := range g.facs {
		if g.stageNull[f.col] {
			f.null++
			a.dropped++
			return
		}
	}
	vals, nulls := g.slot(a)
	for j, v := range g.stage {
		if fi := g.facAt[j]; fi >= 0 {
			vals[g.pos[j]+g.facs[fi].rank[int(v)]] = 1
			continue
		}
		vals[g.pos[j]], nulls[g.pos[j]] = v, g.stageNull[j]
	}
	if g.weighted {
		a.block.SetWeight(g.stageW)
	}
}

// Level returns the code of a factor's value for the slot of input column
// j (a factor) in the row started last. The first time a value is seen it
// becomes a new level; beyond GroupOptions.MaxLevels levels that is an
// error wrapping ErrTooManyLevels, and the level is not kept.
func (g *Grouper) Level(j int, v []byte) (float64, error) {
	f := g.facs[g.facAt[j]]
	if c, ok := f.codes[string(v)]; ok {
		return float64(c), nil
	}
	return g.newLevel(f, string(v))
}

// LevelString is Level for a value held as a string.
func (g *Grouper) LevelString(j int, v string) (float64, error) {
	f := g.facs[g.facAt[j]]
	if c, ok := f.codes[v]; ok {
		return float64(c), nil
	}
	return g.newLevel(f, v)
}

func (g *Grouper) newLevel(f *factorDict, v string) (float64, error) {
	if len(f.levels) >= g.maxLevels {
		return 0, fmt.Errorf("column %q has more than %d distinct values: %d levels had been seen when the limit was passed, and counting stopped there; raise the limit on levels or leave the column out: %w",
			f.name, g.maxLevels, len(f.levels)+1, ErrTooManyLevels)
	}
	// Fold what is buffered at the old width; the pending row is staged
	// and not yet in a block.
	if g.p > 0 {
		if g.keyed {
			g.flushOpen()
		} else {
			g.foldSingle()
		}
	}
	c := int32(len(f.levels))
	f.codes[v] = c
	f.levels = append(f.levels, v)
	f.rank = append(f.rank, 0)
	g.expand()
	g.free = nil
	if g.keyed {
		g.worker = stream.NewMoments(g.names)
		for _, bm := range g.groups {
			for _, a := range bm {
				g.widen(a)
			}
		}
	} else {
		g.widen(g.single)
		g.single.block = stream.NewBlock(g.p, stream.DefaultBlockRows, g.weighted)
	}
	return float64(c), nil
}

// widen brings a group's accumulators to the current columns.
func (g *Grouper) widen(a *groupAcc) {
	if a.m == nil {
		fresh := g.newAcc(a.bucket, a.seg)
		a.m, a.q = fresh.m, fresh.q
		return
	}
	a.m = a.m.Widen(g.names)
	if a.q != nil {
		a.q = a.q.Widen(g.names)
	}
}

// SetWeight sets the weight of the row last started with Row.
func (g *Grouper) SetWeight(w float64) {
	if g.facs != nil {
		g.stageW = w
		return
	}
	g.last.block.SetWeight(w)
}

// Columns returns the accumulated columns so far: the input columns with
// each factor expanded into its indicator columns, levels sorted. It is
// empty when every column is a factor and none has a level yet.
func (g *Grouper) Columns() []string { return slices.Clone(g.names) }

// Spread takes per-input-column counts (one per GroupOptions.Columns) to
// the accumulated columns: a plain column's count in its place, zeros for
// a factor's indicator columns.
func (g *Grouper) Spread(in []int64) []int64 {
	if g.facs == nil {
		return in
	}
	out := make([]int64, g.p)
	for j, v := range in {
		if g.facAt[j] < 0 {
			out[g.pos[j]] = v
		}
	}
	return out
}

// Factors returns the factors with the levels seen (sorted) and the rows
// dropped because each was NULL.
func (g *Grouper) Factors() []Factor {
	g.commit()
	out := make([]Factor, len(g.facs))
	for i, f := range g.facs {
		lv := slices.Clone(f.levels)
		slices.Sort(lv)
		out[i] = Factor{Name: f.name, Levels: lv, Null: f.null}
	}
	return out
}

func (g *Grouper) lookup(bucket int64, seg []byte) (*groupAcc, error) {
	bm := g.groups[bucket]
	if bm == nil {
		bm = map[string]*groupAcc{}
		g.groups[bucket] = bm
	}
	if a := bm[string(seg)]; a != nil {
		return a, nil
	}
	s := string(seg)
	if g.segmented {
		if _, ok := g.segs[s]; !ok {
			if len(g.segs) >= g.maxSegments {
				return nil, fmt.Errorf("more than %d distinct segments (raise the limit or pick a coarser segment column): %w",
					g.maxSegments, ErrTooManySegments)
			}
			g.segs[s] = struct{}{}
		}
	}
	a := g.newAcc(bucket, s)
	bm[s] = a
	return a, nil
}

func (g *Grouper) getBlock() *stream.Block {
	if n := len(g.free); n > 0 {
		b := g.free[n-1]
		g.free = g.free[:n-1]
		return b
	}
	return stream.NewBlock(g.p, keyedStartRows, g.weighted)
}

func (g *Grouper) foldSingle() {
	a := g.single
	if a.block == nil || a.block.Rows == 0 {
		return
	}
	a.m.Add(a.block)
	if a.q != nil {
		a.q.Add(a.block)
	}
	a.block.Reset()
}

// foldKeyed folds a group's block into its accumulators through the shared
// worker, so that scratch space is not held per group.
func (g *Grouper) foldKeyed(a *groupAcc) {
	b := a.block
	if b == nil || b.Rows == 0 {
		return
	}
	g.worker.Reset()
	g.worker.Add(b)
	a.m.Merge(g.worker)
	if a.q != nil {
		a.q.Add(b)
	}
	g.inBuf -= b.Rows
	b.Reset()
	// Remove a from the open list lazily: flushOpen and Groups skip empty
	// blocks.
}

func (g *Grouper) flushOpen() {
	for _, a := range g.open {
		if a.block == nil || a.block.Rows == 0 {
			continue
		}
		g.foldKeyed(a)
		if len(g.free) < 64 && a.block.Cap() <= keyedBlockRows {
			g.free = append(g.free, a.block)
		}
		a.block = nil
	}
	g.open = g.open[:0]
	g.inBuf = 0
}

// Groups folds what is buffered and returns the groups, sorted; with
// factors, every group holds every level seen. It is GroupsOver(nil).
func (g *Grouper) Groups() []Group { return g.GroupsOver(nil) }

// GroupsOver folds what is buffered and returns the groups, sorted, with
// their accumulators over names: a canonical superset of Columns (all
// partitions' columns, say; nil means Columns). It returns nil when there
// are no columns (every column a factor that was NULL in every row).
func (g *Grouper) GroupsOver(names []string) []Group {
	if g.facs != nil {
		g.commit()
	}
	if names == nil {
		names = g.names
	}
	if len(names) == 0 {
		return nil
	}
	if g.p > 0 {
		if g.keyed {
			g.flushOpen()
		} else {
			g.foldSingle()
		}
	}
	var accs []*groupAcc
	if g.keyed {
		for _, bm := range g.groups {
			for _, a := range bm {
				accs = append(accs, a)
			}
		}
	} else {
		accs = []*groupAcc{g.single}
	}
	out := make([]Group, 0, len(accs))
	for _, a := range accs {
		m, q := a.m, a.q
		switch {
		case m == nil:
			m = stream.NewMoments(names)
			if g.extended {
				q = stream.NewQRExtended(names)
			} else if g.qr {
				q = stream.NewQR(names)
			}
		case !slices.Equal(m.Names(), names):
			m = m.Widen(names)
			if q != nil {
				q = q.Widen(names)
			}
		}
		if a.dropped > 0 {
			if m == a.m {
				m = m.Clone()
				if q != nil {
					q = q.Clone()
				}
			}
			m.Drop(a.dropped)
			if q != nil {
				q.Drop(a.dropped)
			}
		}
		out = append(out, Group{Key: a.key, Moments: m, QR: q})
	}
	SortGroups(out)
	return out
}

// MergeGroups merges the groups of several partial scans of the same
// columns (partitions) by key. A segment bound applies to the union.
// Groups over different level sets are aligned first (GroupsOver or
// Align); MergeGroups panics on groups over different columns.
func MergeGroups(parts [][]Group, maxSegments int) ([]Group, error) {
	if maxSegments <= 0 {
		maxSegments = DefaultMaxSegments
	}
	type k struct {
		b   int64
		seg string
	}
	idx := map[k]int{}
	segs := map[string]bool{}
	var out []Group
	for _, gs := range parts {
		for _, x := range gs {
			key := k{x.Key.Bucket.UnixMicro(), x.Key.Segment}
			if x.Key.Bucket.IsZero() {
				key.b = 0
			}
			if i, ok := idx[key]; ok {
				out[i].Moments.Merge(x.Moments)
				if x.QR != nil {
					out[i].QR.Merge(x.QR)
				}
				continue
			}
			if !segs[x.Key.Segment] {
				segs[x.Key.Segment] = true
				if len(segs) > maxSegments {
					return nil, fmt.Errorf("more than %d distinct segments (raise the limit or pick a coarser segment column): %w",
						maxSegments, ErrTooManySegments)
				}
			}
			idx[key] = len(out)
			out = append(out, Group{Key: x.Key, Moments: x.Moments.Clone(), QR: cloneQR(x.QR)})
		}
	}
	SortGroups(out)
	return out, nil
}

func cloneQR(q *stream.QR) *stream.QR {
	if q == nil {
		return nil
	}
	return q.Clone()
}
