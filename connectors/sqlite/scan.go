package sqlite

import (
	"context"
	"database/sql/driver"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"plumb/connectors"
)

// progressEvery is how many rows pass between progress calls.
const progressEvery = 1 << 16

// Scan reads the requested columns and accumulates them, one group per
// bucket and segment.
func (s *Source) Scan(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if s.opts.Pushdown {
		return nil, fmt.Errorf("sqlite database %q: --pushdown computes the sums inside PostgreSQL; SQLite is scanned directly: %w",
			s.path, connectors.ErrUnsupported)
	}
	if s.opts.Parallel > 1 {
		return nil, fmt.Errorf("sqlite database %q: --parallel splits PostgreSQL tables; SQLite is scanned in one pass: %w",
			s.path, connectors.ErrUnsupported)
	}
	ctx, cancel := s.ctx(ctx)
	defer cancel()
	t, err := s.describe(ctx, req)
	if err != nil {
		return nil, err
	}
	plan, err := connectors.Resolve(t.source, t.cols, req, connectors.KindTime, connectors.KindNumeric, connectors.KindOther, connectors.KindText)
	if err != nil {
		return nil, err
	}
	where, err := connectors.CheckWhere(req.Where, connectors.SQLite)
	if err != nil {
		return nil, err
	}
	sampled := req.SamplePct > 0 && req.SamplePct < 100
	if req.SamplePct < 0 || req.SamplePct > 100 || math.IsNaN(req.SamplePct) {
		return nil, fmt.Errorf("%s: --sample %v: want a percentage in (0, 100]: %w", t.source, req.SamplePct, connectors.ErrUnsupported)
	}
	if sampled && t.rowid == "" {
		return nil, fmt.Errorf("%s: --sample picks rows by a hash of the rowid, and this one has none (a view, a WITHOUT ROWID table or a query): %w",
			t.source, connectors.ErrUnsupported)
	}
	sc := newScanner(t, plan, req, sampled)
	var total int64
	if req.Progress != nil {
		total, _ = s.estimate(ctx, t, req)
		// No rows yet: a rate measured by the caller starts here.
		req.Progress(0, total)
	}
	query := sc.sql(where)

	conn, err := s.db.Conn(ctx)
	if err != nil {
		return nil, s.wrap(err)
	}
	defer conn.Close()
	err = conn.Raw(func(dc any) error {
		qc, ok := dc.(driver.QueryerContext)
		if !ok {
			return fmt.Errorf("sqlite driver cannot run queries directly")
		}
		rows, err := qc.QueryContext(ctx, query, nil)
		if err != nil {
			return s.wrap(err)
		}
		defer rows.Close()
		dest := make([]driver.Value, len(sc.exprs))
		for {
			if err := rows.Next(dest); err != nil {
				if err == io.EOF {
					return nil
				}
				return s.wrap(err)
			}
			if err := sc.row(dest); err != nil {
				return err
			}
			if req.Progress != nil && sc.read%progressEvery == 0 {
				req.Progress(sc.read, total)
			}
		}
	})
	if err != nil {
		return nil, err
	}
	if req.Progress != nil {
		req.Progress(sc.read, total)
	}
	res := &connectors.Result{
		Columns:    sc.g.Columns(),
		Factors:    sc.g.Factors(),
		Groups:     sc.g.Groups(),
		Read:       sc.read,
		Sampled:    sampled,
		Inexact:    sc.g.Spread(sc.inexact),
		Skipped:    plan.Skipped,
		NoTime:     sc.noTime,
		Partitions: 1,
	}
	if err := connectors.CheckLevels(t.source, res); err != nil {
		return nil, err
	}
	if err := s.countLevels(ctx, t, plan); err != nil {
		return nil, err
	}
	return res, nil
}

// levelRows bounds the rows countLevels reads per column, so that the hint
// costs little beside the scan whatever the table's size.
const levelRows = 100000

// countLevels counts the distinct values of the text columns left out of
// the scan among the first levelRows rows, up to one more than the limit
// on levels, for the hint that naming them uses them as factors.
func (s *Source) countLevels(ctx context.Context, t *target, plan *connectors.Plan) error {
	for i := range plan.Skipped {
		c := &plan.Skipped[i]
		if c.Kind != connectors.KindText {
			continue
		}
		q := connectors.QuoteIdent(c.Name)
		var n int
		err := s.db.QueryRowContext(ctx, "SELECT count(*) FROM (SELECT DISTINCT "+q+" FROM (SELECT "+q+" FROM "+t.from+
			" LIMIT "+strconv.Itoa(levelRows)+") WHERE "+q+" IS NOT NULL LIMIT "+strconv.Itoa(plan.MaxLevels+1)+")").Scan(&n)
		if err != nil {
			return s.wrap(err)
		}
		c.Levels, c.LevelsMore = n, n > plan.MaxLevels
	}
	return nil
}

// scanner decodes rows of the scan statement into the grouper.
type scanner struct {
	t     *target
	plan  *connectors.Plan
	g     *connectors.Grouper
	exprs []string

	// positions in a row; -1 when absent
	iRowid, iTime, iSeg, iWeight, iVal0 int

	sample    bool
	threshold uint64
	seedMix   uint64

	bucket  *connectors.Bucketer
	tp      connectors.TimeParser
	segBuf  []byte
	factor  []bool // per value column: a factor (text or boolean)
	lvBuf   []byte
	read    int64
	noTime  int64
	inexact []int64
}

func newScanner(t *target, plan *connectors.Plan, req connectors.Request, sampled bool) *scanner {
	sc := &scanner{t: t, plan: plan, g: connectors.NewGrouperFor(plan, req.QR),
		iRowid: -1, iTime: -1, iSeg: -1, iWeight: -1, inexact: make([]int64, len(plan.Values))}
	add := func(e string) int {
		sc.exprs = append(sc.exprs, e)
		return len(sc.exprs) - 1
	}
	if t.rowid != "" {
		sc.iRowid = add(t.rowid)
	}
	if plan.Time != nil {
		// Unary plus drops the declared type, so the driver hands over the
		// stored value instead of its own reading of DATE columns.
		sc.iTime = add("+" + connectors.QuoteIdent(plan.Time.Name))
		sc.bucket = connectors.NewBucketer(plan.Bucket, plan.Location)
		sc.tp.Location = plan.Location
	}
	if plan.Segment != nil {
		sc.iSeg = add(connectors.QuoteIdent(plan.Segment.Name))
	}
	if plan.Weight != nil {
		sc.iWeight = add(connectors.QuoteIdent(plan.Weight.Name))
	}
	sc.iVal0 = len(sc.exprs)
	for _, c := range plan.Values {
		add(connectors.QuoteIdent(c.Name))
	}
	for _, j := range plan.Factors() {
		if sc.factor == nil {
			sc.factor = make([]bool, len(plan.Values))
		}
		sc.factor[j] = true
	}
	if sampled {
		sc.sample = true
		sc.threshold = uint64(req.SamplePct / 100 * (1 << 63) * 2)
		sc.seedMix = mix64(uint64(req.Seed) ^ 0x706c756d62) // "plumb"
	}
	return sc
}

func (sc *scanner) sql(where string) string {
	var b strings.Builder
	b.WriteString("SELECT ")
	b.WriteString(strings.Join(sc.exprs, ", "))
	b.WriteString(" FROM ")
	b.WriteString(sc.t.from)
	if where != "" {
		b.WriteString(" WHERE (")
		b.WriteString(where)
		b.WriteString(")")
	}
	return b.String()
}

// mix64 is the SplitMix64 finalizer (Steele, Lea & Flood 2014), a fixed
// bijection of 64-bit words with good avalanche.
func mix64(z uint64) uint64 {
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// Sampled reports whether the row with this rowid is in a sample of pct
// percent with this seed: a deterministic hash of the rowid, so the same
// seed picks the same rows on every run.
func Sampled(rowid, seed int64, pct float64) bool {
	th := uint64(pct / 100 * (1 << 63) * 2)
	return mix64(uint64(rowid)^mix64(uint64(seed)^0x706c756d62)) < th
}

const maxExact = 1 << 53

func (sc *scanner) where(row []driver.Value, n int64) string {
	if sc.iRowid >= 0 {
		if id, ok := row[sc.iRowid].(int64); ok {
			return "rowid " + strconv.FormatInt(id, 10)
		}
	}
	return "row " + strconv.FormatInt(n, 10) + " of the result"
}

func (sc *scanner) row(row []driver.Value) error {
	if sc.sample {
		id, _ := row[sc.iRowid].(int64)
		if mix64(uint64(id)^sc.seedMix) >= sc.threshold {
			return nil
		}
	}
	sc.read++
	var bucket int64
	if sc.iTime >= 0 {
		us, ok, err := sc.timeOf(row[sc.iTime])
		if err != nil {
			return fmt.Errorf("%s: time column %q at %s: %w", sc.t.source, sc.plan.Time.Name, sc.where(row, sc.read), err)
		}
		if !ok {
			sc.noTime++
			return nil
		}
		bucket = sc.bucket.Start(us)
	}
	var seg []byte
	if sc.iSeg >= 0 {
		buf := append(sc.segBuf[:0], connectors.SegmentPrefix...)
		switch v := row[sc.iSeg].(type) {
		case nil:
			buf = append(buf[:0], connectors.NullSegment...)
		case int64:
			buf = strconv.AppendInt(buf, v, 10)
		case float64:
			buf = strconv.AppendFloat(buf, v, 'g', -1, 64)
		case string:
			buf = append(buf, v...)
		case []byte:
			buf = append(buf, v...)
		default:
			buf = fmt.Appendf(buf, "%v", v)
		}
		sc.segBuf, seg = buf, buf
	}
	vals, nulls, err := sc.g.Row(bucket, seg)
	if err != nil {
		return fmt.Errorf("%s: segment column %q: %w", sc.t.source, sc.plan.Segment.Name, err)
	}
	if sc.iWeight >= 0 {
		w, null, err := sc.number(row[sc.iWeight])
		if err != nil {
			return sc.badValue(row, sc.plan.Weight, err)
		}
		if null {
			w = math.NaN()
		}
		sc.g.SetWeight(w)
	}
	for j, v := range row[sc.iVal0:] {
		if sc.factor != nil && sc.factor[j] {
			if err := sc.level(row, j, v, vals, nulls); err != nil {
				return err
			}
			continue
		}
		switch x := v.(type) {
		case float64:
			vals[j] = x
		case int64:
			vals[j] = float64(x)
			if x > maxExact || x < -maxExact {
				sc.inexact[j]++
			}
		case nil:
			nulls[j] = true
		default:
			_, _, err := sc.number(v)
			return sc.badValue(row, &sc.plan.Values[j], err)
		}
	}
	return nil
}

// level codes the value of factor column j.
func (sc *scanner) level(row []driver.Value, j int, v driver.Value, vals []float64, nulls []bool) error {
	c := &sc.plan.Values[j]
	var code float64
	var err error
	if c.Kind == connectors.KindBool {
		// Booleans are stored as integers 0 and 1 (TRUE and FALSE are
		// those integers), or as the text true and false.
		lv := ""
		switch x := v.(type) {
		case nil:
			nulls[j] = true
			return nil
		case int64:
			if x == 0 || x == 1 {
				lv = strconv.FormatBool(x == 1)
			}
		case float64:
			if x == 0 || x == 1 {
				lv = strconv.FormatBool(x == 1)
			}
		case string:
			if x == "true" || x == "false" {
				lv = x
			}
		}
		if lv == "" {
			return sc.badValue(row, c, fmt.Errorf("%v, which is not a boolean (0, 1, true or false)", v))
		}
		code, err = sc.g.LevelString(j, lv)
	} else {
		switch x := v.(type) {
		case nil:
			nulls[j] = true
			return nil
		case string:
			code, err = sc.g.LevelString(j, x)
		case []byte:
			code, err = sc.g.Level(j, x)
		case int64:
			sc.lvBuf = strconv.AppendInt(sc.lvBuf[:0], x, 10)
			code, err = sc.g.Level(j, sc.lvBuf)
		case float64:
			sc.lvBuf = strconv.AppendFloat(sc.lvBuf[:0], x, 'g', -1, 64)
			code, err = sc.g.Level(j, sc.lvBuf)
		default:
			return sc.badValue(row, c, fmt.Errorf("a %T", v))
		}
	}
	if err != nil {
		return fmt.Errorf("%s: %w", sc.t.source, err)
	}
	vals[j] = code
	return nil
}

func (sc *scanner) badValue(row []driver.Value, c *connectors.Column, err error) error {
	return fmt.Errorf("%s: column %q (declared %s) holds %v at %s; fix the row, filter it out with --where, or leave the column out: %w",
		sc.t.source, c.Name, c.Type, err, sc.where(row, sc.read), connectors.ErrBadValue)
}

// number reads a numeric cell; text and blobs are errors describing them.
func (sc *scanner) number(v driver.Value) (f float64, null bool, err error) {
	switch x := v.(type) {
	case float64:
		return x, false, nil
	case int64:
		return float64(x), false, nil
	case nil:
		return 0, true, nil
	case string:
		if len(x) > 40 {
			x = x[:40] + "…"
		}
		return 0, false, fmt.Errorf("text %q", x)
	case []byte:
		return 0, false, fmt.Errorf("a blob of %d bytes", len(x))
	}
	return 0, false, fmt.Errorf("a %T", v)
}

// timeOf reads a time cell: ISO 8601 text or Unix seconds. ok is false for
// NULL.
func (sc *scanner) timeOf(v driver.Value) (us int64, ok bool, err error) {
	switch x := v.(type) {
	case nil:
		return 0, false, nil
	case int64:
		if x > 9e12 || x < -9e12 {
			return 0, false, fmt.Errorf("%d is out of range for Unix seconds: %w", x, connectors.ErrBadValue)
		}
		return x * 1e6, true, nil
	case float64:
		us, ok := connectors.UnixSeconds(x)
		if !ok {
			if math.IsInf(x, 0) {
				return 0, false, nil
			}
			return 0, false, fmt.Errorf("%v is not a time in Unix seconds: %w", x, connectors.ErrBadValue)
		}
		return us, true, nil
	case string:
		us, err := sc.tp.Text(x)
		return us, err == nil, err
	case []byte:
		us, err := sc.tp.Text(string(x))
		return us, err == nil, err
	}
	return 0, false, fmt.Errorf("unexpected %T: %w", v, connectors.ErrBadValue)
}

// Estimate returns an upper estimate of the rows a scan reads: the largest
// rowid of a rowid table (cheap), scaled by the sample; 0 when unknown.
func (s *Source) Estimate(ctx context.Context, req connectors.Request) (int64, error) {
	ctx, cancel := s.ctx(ctx)
	defer cancel()
	t, err := s.describe(ctx, req)
	if err != nil {
		return 0, err
	}
	return s.estimate(ctx, t, req)
}

func (s *Source) estimate(ctx context.Context, t *target, req connectors.Request) (int64, error) {
	if t.rowid == "" {
		return 0, nil
	}
	var n *int64
	if err := s.db.QueryRowContext(ctx, "SELECT max("+t.rowid+") FROM "+t.from).Scan(&n); err != nil {
		return 0, s.wrap(err)
	}
	if n == nil || *n < 0 {
		return 0, nil
	}
	est := *n
	if req.SamplePct > 0 && req.SamplePct < 100 {
		est = int64(float64(est) * req.SamplePct / 100)
	}
	return est, nil
}
