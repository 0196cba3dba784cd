package stream

import (
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"math"

	"gonum.org/v1/gonum/floats"
)

// Encoding (little-endian), version 2:
//
//	magic "PLMB" | kind byte ('M' moments, 'Q' QR) | version byte | flags byte
//	p uint32 | p × (name length uint16, name bytes)
//	used int64 | sum of weights float64 | dropped int64 | bad weights int64
//	null, nan, inf: p × int64 each
//	Moments: origin p × f64 | scale p × f64 | (mean − origin)/scale p × f64 |
//	         co-moment of x/scale, upper triangle p(p+1)/2 × f64 | min p | max p
//	QR:      origin p × f64 | scale p × f64 | R upper triangle (p+1)(p+2)/2 × f64
//	         [extended: low parts of R, upper triangle, (p+1)(p+2)/2 × f64]
//	CRC-32C of all the preceding bytes, uint32
//
// Bit 0 of flags records whether the origin is set; bit 1, for QR only,
// that the factor is extended (double-double). A scale is a power of two
// within 2^±1022 (1 when no rows were used); that of a Moments column is
// the one its extremes call for (see scaleFor).
//
// Version 1 is version 2 without the scales, the sums kept in the columns'
// own units (every scale 1). It is still decoded: a Moments is brought to
// the scales its extremes call for, a QR factor to scales estimated from
// its origins and column norms (both exact multiplications by powers of
// two), and either is written back as version 2.

const (
	encVersion = 2
	oldVersion = 1 // still decoded
	kindMoment = 'M'
	kindQR     = 'Q'
	// MaxColumns bounds the columns of a decoded accumulator, so that a
	// corrupt header cannot ask for gigabytes.
	MaxColumns = 4096
	maxName    = 1024
)

var magic = [4]byte{'P', 'L', 'M', 'B'}

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// ErrCorrupt is wrapped by every decoding error.
var ErrCorrupt = errors.New("corrupt accumulator encoding")

func corrupt(format string, args ...any) error {
	return fmt.Errorf("%w: %s", ErrCorrupt, fmt.Sprintf(format, args...))
}

type encoder struct{ b []byte }

func (e *encoder) u8(v byte)     { e.b = append(e.b, v) }
func (e *encoder) u32(v uint32)  { e.b = binary.LittleEndian.AppendUint32(e.b, v) }
func (e *encoder) i64(v int64)   { e.b = binary.LittleEndian.AppendUint64(e.b, uint64(v)) }
func (e *encoder) f64(v float64) { e.b = binary.LittleEndian.AppendUint64(e.b, math.Float64bits(v)) }
func (e *encoder) f64s(v []float64) {
	for _, x := range v {
		e.f64(x)
	}
}
func (e *encoder) i64s(v []int64) {
	for _, x := range v {
		e.i64(x)
	}
}

func (e *encoder) header(kind byte, flags byte, names []string) {
	e.b = append(e.b, magic[:]...)
	e.u8(kind)
	e.u8(encVersion)
	e.u8(flags)
	e.u32(uint32(len(names)))
	for _, s := range names {
		e.b = binary.LittleEndian.AppendUint16(e.b, uint16(len(s)))
		e.b = append(e.b, s...)
	}
}

func (e *encoder) counts(c *Counts) {
	e.i64(c.Used)
	e.f64(c.SumWeights)
	e.i64(c.Dropped)
	e.i64(c.BadWeights)
	e.i64s(c.Null)
	e.i64s(c.NaN)
	e.i64s(c.Inf)
}

func (e *encoder) upper(a []float64, n int) {
	for i := 0; i < n; i++ {
		e.f64s(a[i*n+i : i*n+n])
	}
}

func (e *encoder) finish() []byte {
	return binary.LittleEndian.AppendUint32(e.b, crc32.Checksum(e.b, castagnoli))
}

func checkNames(names []string) error {
	if len(names) > MaxColumns {
		return fmt.Errorf("stream: %d columns exceed the encodable %d", len(names), MaxColumns)
	}
	for _, s := range names {
		if len(s) > maxName {
			return fmt.Errorf("stream: column name of %d bytes exceeds the encodable %d", len(s), maxName)
		}
	}
	return nil
}

// MarshalBinary encodes the accumulator (see the package's encoding notes).
func (m *Moments) MarshalBinary() ([]byte, error) {
	if err := checkNames(m.names); err != nil {
		return nil, err
	}
	var flags byte
	if m.hasOrg {
		flags = 1
	}
	e := encoder{b: make([]byte, 0, 64+m.p*(48+8*m.p))}
	e.header(kindMoment, flags, m.names)
	e.counts(&m.counts)
	e.f64s(m.origin)
	e.f64s(m.scale)
	e.f64s(m.mean)
	e.upper(m.co, m.p)
	e.f64s(m.min)
	e.f64s(m.max)
	return e.finish(), nil
}

// MarshalBinary encodes the factor (see the package's encoding notes).
func (q *QR) MarshalBinary() ([]byte, error) {
	if err := checkNames(q.names); err != nil {
		return nil, err
	}
	var flags byte
	if q.hasOrg {
		flags = 1
	}
	if q.rlo != nil {
		flags |= 2
	}
	e := encoder{b: make([]byte, 0, 64+q.p*40+8*q.n*q.n)}
	e.header(kindQR, flags, q.names)
	e.counts(&q.counts)
	e.f64s(q.origin)
	e.f64s(q.scale)
	e.upper(q.r, q.n)
	if q.rlo != nil {
		e.upper(q.rlo, q.n)
	}
	return e.finish(), nil
}

type decoder struct {
	b   []byte
	off int
	err error
}

func (d *decoder) need(n int) bool {
	if d.err != nil {
		return false
	}
	if n < 0 || len(d.b)-d.off < n {
		d.err = corrupt("truncated at byte %d", d.off)
		return false
	}
	return true
}

func (d *decoder) u8() byte {
	if !d.need(1) {
		return 0
	}
	v := d.b[d.off]
	d.off++
	return v
}

func (d *decoder) u16() uint16 {
	if !d.need(2) {
		return 0
	}
	v := binary.LittleEndian.Uint16(d.b[d.off:])
	d.off += 2
	return v
}

func (d *decoder) u32() uint32 {
	if !d.need(4) {
		return 0
	}
	v := binary.LittleEndian.Uint32(d.b[d.off:])
	d.off += 4
	return v
}

func (d *decoder) i64() int64 {
	if !d.need(8) {
		return 0
	}
	v := binary.LittleEndian.Uint64(d.b[d.off:])
	d.off += 8
	return int64(v)
}

func (d *decoder) f64() float64 { return math.Float64frombits(uint64(d.i64())) }

func (d *decoder) f64s(dst []float64) {
	for i := range dst {
		dst[i] = d.f64()
	}
}

func (d *decoder) i64s(dst []int64) {
	for i := range dst {
		dst[i] = d.i64()
	}
}

func (d *decoder) upper(dst []float64, n int) {
	for i := 0; i < n; i++ {
		d.f64s(dst[i*n+i : i*n+n])
	}
}

// header checks the frame (length, checksum, magic, kind, version) and reads
// the version and the column names.
func (d *decoder) header(kind byte) (version, flags byte, names []string) {
	if len(d.b) < 4+3+4+4 {
		d.err = corrupt("%d bytes is shorter than any accumulator", len(d.b))
		return 0, 0, nil
	}
	body := d.b[:len(d.b)-4]
	if got, want := crc32.Checksum(body, castagnoli), binary.LittleEndian.Uint32(d.b[len(d.b)-4:]); got != want {
		d.err = corrupt("checksum mismatch (stored %08x, computed %08x)", want, got)
		return 0, 0, nil
	}
	d.b = body
	if [4]byte(d.b[:4]) != magic {
		d.err = corrupt("not an accumulator (bad magic)")
		return 0, 0, nil
	}
	d.off = 4
	if k := d.u8(); k != kind {
		d.err = corrupt("accumulator kind %q, want %q", k, kind)
		return 0, 0, nil
	}
	if version = d.u8(); version != encVersion && version != oldVersion {
		d.err = fmt.Errorf("%w: encoding version %d is not supported (this build reads versions %d and %d)", ErrCorrupt, version, oldVersion, encVersion)
		return 0, 0, nil
	}
	flags = d.u8()
	p := d.u32()
	if p == 0 || p > MaxColumns {
		d.err = corrupt("%d columns (want 1 to %d)", p, MaxColumns)
		return 0, 0, nil
	}
	names = make([]string, p)
	for i := range names {
		l := int(d.u16())
		if l > maxName {
			d.err = corrupt("column name of %d bytes", l)
			return 0, 0, nil
		}
		if !d.need(l) {
			return 0, 0, nil
		}
		names[i] = string(d.b[d.off : d.off+l])
		d.off += l
	}
	return version, flags, names
}

func (d *decoder) expectRest(n int) {
	if d.err == nil && len(d.b)-d.off != n {
		d.err = corrupt("%d bytes of payload, want %d", len(d.b)-d.off, n)
	}
}

func (d *decoder) counts(c *Counts) {
	c.Used = d.i64()
	c.SumWeights = d.f64()
	c.Dropped = d.i64()
	c.BadWeights = d.i64()
	d.i64s(c.Null)
	d.i64s(c.NaN)
	d.i64s(c.Inf)
	if d.err != nil {
		return
	}
	if c.Used < 0 || c.Dropped < 0 || c.BadWeights < 0 || c.BadWeights > c.Dropped ||
		!(c.SumWeights >= 0) || math.IsInf(c.SumWeights, 0) || (c.Used == 0 && c.SumWeights != 0) {
		d.err = corrupt("inconsistent row counts (used %d, weight %g, dropped %d, bad weights %d)",
			c.Used, c.SumWeights, c.Dropped, c.BadWeights)
		return
	}
	for j := range c.Null {
		for _, v := range [3]int64{c.Null[j], c.NaN[j], c.Inf[j]} {
			if v < 0 || v > c.Dropped {
				d.err = corrupt("column %d: missing-value count %d outside 0..%d dropped rows", j, v, c.Dropped)
				return
			}
		}
	}
}

// state checks what the counts imply about the rest: an origin exactly when
// rows were used, and a finite one; scales that are powers of two in range,
// 1 without rows.
func (d *decoder) state(hasOrg bool, c *Counts, origin, scale []float64) {
	if d.err != nil {
		return
	}
	if hasOrg != (c.Used > 0) {
		d.err = corrupt("origin flag %v with %d rows used", hasOrg, c.Used)
		return
	}
	for j, v := range origin {
		if math.IsNaN(v) || math.IsInf(v, 0) || (!hasOrg && v != 0) {
			d.err = corrupt("column %d: origin %v (set %v)", j, v, hasOrg)
			return
		}
	}
	for j, s := range scale {
		if !isScale(s) || (!hasOrg && s != 1) {
			d.err = corrupt("column %d: scale %v (origin set %v)", j, s, hasOrg)
			return
		}
	}
}

// scales reads the scales of a version-2 encoding; a version-1 one has
// none (every scale stays 1).
func (d *decoder) scales(version byte, dst []float64) {
	if version != oldVersion {
		d.f64s(dst)
	}
}

// scaleBytes is the size of the scales in an encoding of p columns.
func scaleBytes(version byte, p int) int {
	if version == oldVersion {
		return 0
	}
	return 8 * p
}

// UnmarshalMoments decodes an accumulator written by Moments.MarshalBinary.
// A truncated, corrupted or foreign blob gives an error wrapping ErrCorrupt.
func UnmarshalMoments(b []byte) (*Moments, error) {
	d := decoder{b: b}
	version, flags, names := d.header(kindMoment)
	if d.err != nil {
		return nil, d.err
	}
	p := len(names)
	d.expectRest(8*(4+3*p) + scaleBytes(version, p) + 8*(2*p+p*(p+1)/2+2*p))
	if d.err != nil {
		return nil, d.err
	}
	if flags&^1 != 0 {
		return nil, corrupt("unknown flags %#x", flags)
	}
	m := NewMoments(names)
	m.hasOrg = flags&1 != 0
	d.counts(&m.counts)
	d.f64s(m.origin)
	d.scales(version, m.scale)
	d.f64s(m.mean)
	d.upper(m.co, p)
	d.f64s(m.min)
	d.f64s(m.max)
	d.state(m.hasOrg, &m.counts, m.origin, m.scale)
	if d.err != nil {
		return nil, d.err
	}
	for j := range m.min {
		lo, hi := m.min[j], m.max[j]
		if m.counts.Used == 0 {
			if !math.IsInf(lo, 1) || !math.IsInf(hi, -1) {
				return nil, corrupt("column %q: extremes %v, %v with no rows used", names[j], lo, hi)
			}
		} else if !(lo <= hi) || math.IsInf(lo, 0) || math.IsInf(hi, 0) {
			return nil, corrupt("column %q: extremes %v, %v", names[j], lo, hi)
		}
	}
	if version == oldVersion {
		// Sums in the columns' own units: bring them to the scales the
		// extremes call for.
		if m.hasOrg {
			for j := range m.scale {
				m.setScale(j, scaleFor(magnitude(m.min[j], m.max[j])))
			}
		}
		return m, nil
	}
	if m.hasOrg {
		for j, s := range m.scale {
			if want := scaleFor(magnitude(m.min[j], m.max[j])); s != want {
				return nil, corrupt("column %q: scale %v, its extremes call for %v", names[j], s, want)
			}
		}
	}
	return m, nil
}

// UnmarshalQR decodes a factor written by QR.MarshalBinary.
// A truncated, corrupted or foreign blob gives an error wrapping ErrCorrupt.
func UnmarshalQR(b []byte) (*QR, error) {
	d := decoder{b: b}
	version, flags, names := d.header(kindQR)
	if d.err != nil {
		return nil, d.err
	}
	if flags&^3 != 0 {
		return nil, corrupt("unknown flags %#x", flags)
	}
	extended := flags&2 != 0
	p := len(names)
	n := p + 1
	tri := n * (n + 1) / 2
	if extended {
		tri *= 2
	}
	d.expectRest(8*(4+3*p) + scaleBytes(version, p) + 8*(p+tri))
	if d.err != nil {
		return nil, d.err
	}
	q := NewQR(names)
	if extended {
		q = NewQRExtended(names)
	}
	q.hasOrg = flags&1 != 0
	d.counts(&q.counts)
	d.f64s(q.origin)
	d.scales(version, q.scale)
	d.upper(q.r, n)
	if extended {
		d.upper(q.rlo, n)
	}
	d.state(q.hasOrg, &q.counts, q.origin, q.scale)
	if d.err != nil {
		return nil, d.err
	}
	if version == oldVersion && q.hasOrg {
		// R in the columns' own units. A factor keeps no extremes: scale
		// each column by its origin or its root mean square deviation,
		// whichever is larger, the magnitude the column's values are
		// about.
		for j, c := range q.origin {
			col := make([]float64, j+2)
			for i := range col {
				col[i] = q.r[i*n+j+1]
			}
			mag := math.Abs(c)
			if r00 := math.Abs(q.r[0]); r00 > 0 {
				mag = math.Max(mag, floats.Norm(col[1:], 2)/r00)
			}
			if !(mag < math.Inf(1)) {
				mag = 0
			}
			q.setScale(j, scaleFor(mag))
		}
	}
	return q, nil
}
