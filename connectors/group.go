package connectors

import (
	"fmt"
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
type Grouper struct {
	names       []string
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
}

type groupAcc struct {
	key    Key
	bucket int64
	seg    string
	block  *stream.Block
	m      *stream.Moments
	q      *stream.QR
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
		names:       append([]string(nil), o.Columns...),
		p:           len(o.Columns),
		qr:          o.QR || o.Extended,
		extended:    o.Extended,
		weighted:    o.Weighted,
		bucketed:    o.Bucketed,
		segmented:   o.Segmented,
		keyed:       o.Bucketed || o.Segmented,
		maxSegments: o.MaxSegments,
		loc:         o.Location,
	}
	if g.maxSegments <= 0 {
		g.maxSegments = DefaultMaxSegments
	}
	if g.loc == nil {
		g.loc = time.UTC
	}
	if g.keyed {
		g.groups = map[int64]map[string]*groupAcc{}
		g.segs = map[string]struct{}{}
		g.worker = stream.NewMoments(g.names)
	} else {
		g.single = g.newAcc(0, "")
		g.single.block = stream.NewBlock(g.p, stream.DefaultBlockRows, g.weighted)
	}
	return g
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
	})
}

func (g *Grouper) newAcc(bucket int64, seg string) *groupAcc {
	a := &groupAcc{bucket: bucket, seg: seg, m: stream.NewMoments(g.names)}
	if g.bucketed {
		a.key.Bucket = time.UnixMicro(bucket).In(g.loc)
	}
	a.key.Segment = seg
	if g.extended {
		a.q = stream.NewQRExtended(g.names)
	} else if g.qr {
		a.q = stream.NewQR(g.names)
	}
	return a
}

// Row starts a row in the group of bucket (the bucket start in Unix
// microseconds; ignored without bucketing) and seg (the segment key,
// ignored without segmenting: AppendSegmentKey of the value, NullSegment
// for NULL) and returns its value and NULL slots,
// zeroed, to be filled by the caller. A new segment beyond the bound is an
// error wrapping ErrTooManySegments.
func (g *Grouper) Row(bucket int64, seg []byte) (vals []float64, nulls []bool, err error) {
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
	} else {
		g.last = a
		if a.block.Full() {
			g.foldSingle()
		}
	}
	vals, nulls = a.block.AppendRow()
	return vals, nulls, nil
}

// SetWeight sets the weight of the row last started with Row.
func (g *Grouper) SetWeight(w float64) { g.last.block.SetWeight(w) }

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
	if a.block.Rows == 0 {
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

// Groups folds what is buffered and returns the groups, sorted.
func (g *Grouper) Groups() []Group {
	if !g.keyed {
		g.foldSingle()
		return []Group{{Key: g.single.key, Moments: g.single.m, QR: g.single.q}}
	}
	g.flushOpen()
	var out []Group
	for _, bm := range g.groups {
		for _, a := range bm {
			out = append(out, Group{Key: a.key, Moments: a.m, QR: a.q})
		}
	}
	SortGroups(out)
	return out
}

// MergeGroups merges the groups of several partial scans of the same
// columns (partitions) by key. A segment bound applies to the union.
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
