package postgres

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"

	"plumb/connectors"
)

// pgEpochMicros is 2000-01-01 00:00 UTC in Unix microseconds, the origin
// of PostgreSQL's binary timestamps.
const pgEpochMicros = 946684800 * 1000000

const progressEvery = 1 << 16

// decoder folds binary rows (float8 values, bool flags, timestamptz, text)
// into a Grouper without allocating per value.
type decoder struct {
	lay     layout
	plan    *connectors.Plan
	source  string
	g       *connectors.Grouper
	bucket  *connectors.Bucketer
	read    int64
	noTime  int64
	inexact []int64
	err     error // a decoding error, kept so that it is not mistaken for the server's
	tick    func(n int64)
	segBuf  []byte // the current row's segment key
}

func newDecoder(source string, plan *connectors.Plan, lay layout, qr bool) *decoder {
	d := &decoder{lay: lay, plan: plan, source: source, g: connectors.NewGrouperFor(plan, qr), inexact: make([]int64, lay.p)}
	if plan.Time != nil {
		d.bucket = connectors.NewBucketer(plan.Bucket, plan.Location)
	}
	return d
}

var errLayout = errors.New("unexpected binary field size")

func f64(b []byte) (float64, bool) {
	if len(b) != 8 {
		return 0, false
	}
	return math.Float64frombits(binary.BigEndian.Uint64(b)), true
}

func (d *decoder) fail(err error) error {
	if d.err == nil {
		d.err = err
	}
	return err
}

func (d *decoder) row(f [][]byte) error {
	lay := &d.lay
	if len(f) != lay.n {
		return d.fail(fmt.Errorf("%s: row of %d fields, want %d: %w", d.source, len(f), lay.n, errLayout))
	}
	d.read++
	if d.tick != nil && d.read%progressEvery == 0 {
		d.tick(progressEvery)
	}
	var bucket int64
	if lay.iTime >= 0 {
		b := f[lay.iTime]
		if b == nil {
			d.noTime++
			return nil
		}
		if len(b) != 8 {
			return d.fail(fmt.Errorf("%s: time column: %w", d.source, errLayout))
		}
		us := int64(binary.BigEndian.Uint64(b))
		if us == math.MaxInt64 || us == math.MinInt64 { // ±infinity
			d.noTime++
			return nil
		}
		bucket = d.bucket.Start(us + pgEpochMicros)
	}
	var seg []byte
	if lay.iSeg >= 0 {
		if v := f[lay.iSeg]; v == nil {
			seg = nullSegment
		} else {
			d.segBuf = connectors.AppendSegmentKey(d.segBuf[:0], v)
			seg = d.segBuf
		}
	}
	vals, nulls, err := d.g.Row(bucket, seg)
	if err != nil {
		return d.fail(fmt.Errorf("%s: segment column %q: %w", d.source, d.plan.Segment.Name, err))
	}
	if lay.iWeight >= 0 {
		w := math.NaN()
		if b := f[lay.iWeight]; b != nil {
			var ok bool
			if w, ok = f64(b); !ok {
				return d.fail(fmt.Errorf("%s: weight column: %w", d.source, errLayout))
			}
		}
		d.g.SetWeight(w)
	}
	for j, b := range f[lay.iVal0 : lay.iVal0+lay.p] {
		if b == nil {
			nulls[j] = true
			continue
		}
		if lay.factor != nil && lay.factor[j] {
			code, err := d.g.Level(j, b)
			if err != nil {
				return d.fail(fmt.Errorf("%s: %w", d.source, err))
			}
			vals[j] = code
			continue
		}
		if len(b) != 8 {
			return d.fail(fmt.Errorf("%s: column %q: %w", d.source, d.plan.Values[j].Name, errLayout))
		}
		vals[j] = math.Float64frombits(binary.BigEndian.Uint64(b))
	}
	for k, j := range lay.flags {
		if b := f[lay.iVal0+lay.p+k]; len(b) == 1 && b[0] == 1 {
			d.inexact[j]++
		}
	}
	return nil
}

var nullSegment = []byte(connectors.NullSegment)

// copyParser reads the COPY binary format (PostgreSQL docs, "COPY", Binary
// Format) from the chunks pgconn writes, which need not align with tuples.
type copyParser struct {
	d      *decoder
	carry  []byte
	header bool
	done   bool
	fields [][]byte
}

var copySignature = []byte("PGCOPY\n\xff\r\n\x00")

func (c *copyParser) Write(b []byte) (int, error) {
	n := len(b)
	data := b
	if len(c.carry) > 0 {
		c.carry = append(c.carry, b...)
		data = c.carry
	}
	off, err := c.parse(data)
	if err != nil {
		return 0, err
	}
	rest := data[off:]
	if len(c.carry) > 0 {
		m := copy(c.carry, rest)
		c.carry = c.carry[:m]
	} else {
		c.carry = append(c.carry[:0], rest...)
	}
	return n, nil
}

func (c *copyParser) parse(data []byte) (int, error) {
	off := 0
	be := binary.BigEndian
	if !c.header {
		if len(data) < 19 {
			return 0, nil
		}
		if string(data[:11]) != string(copySignature) {
			return 0, c.d.fail(fmt.Errorf("%s: not a binary COPY stream", c.d.source))
		}
		ext := int(be.Uint32(data[15:19]))
		if len(data) < 19+ext {
			return 0, nil
		}
		off = 19 + ext
		c.header = true
	}
	for !c.done {
		start := off
		if len(data)-off < 2 {
			return start, nil
		}
		nf := int(int16(be.Uint16(data[off:])))
		off += 2
		if nf == -1 {
			c.done = true
			return off, nil
		}
		c.fields = c.fields[:0]
		complete := true
		for i := 0; i < nf; i++ {
			if len(data)-off < 4 {
				complete = false
				break
			}
			l := int(int32(be.Uint32(data[off:])))
			off += 4
			if l < 0 {
				c.fields = append(c.fields, nil)
				continue
			}
			if len(data)-off < l {
				complete = false
				break
			}
			c.fields = append(c.fields, data[off:off+l:off+l])
			off += l
		}
		if !complete {
			return start, nil
		}
		if err := c.d.row(c.fields); err != nil {
			return 0, err
		}
	}
	return off, nil
}
