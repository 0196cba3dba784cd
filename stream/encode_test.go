package stream

import (
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// sampleMoments and sampleQR build accumulators of several shapes: empty,
// one column, weighted with missing values, selected columns.
func sampleMoments() map[string]*Moments {
	rng := rand.New(rand.NewPCG(101, 0))
	out := map[string]*Moments{}
	out["empty"] = NewMoments([]string{"temperature"})
	one := NewMoments([]string{"pipe_age"})
	feed(one, genRows(rng, 10, waterColumns[3:4]), nil, nil, 4)
	out["one column"] = one
	rows := genRows(rng, 500, waterColumns)
	null := withMissing(rng, rows, 0.02)
	w := make([]float64, len(rows))
	for i := range w {
		w[i] = rng.Float64() * 2
	}
	w[3] = -1 // a bad weight
	full := NewMoments(names(waterColumns))
	feed(full, rows, w, null, 64)
	out["weighted with missing"] = full
	out["selected"] = full.Select([]int{3, 1})
	dropped := NewMoments([]string{"rainfall", "température ℃"}) // non-ASCII name
	b := NewBlock(2, 2, false)
	vals, _ := b.AppendRow()
	vals[0] = math.NaN()
	dropped.Add(b)
	out["all dropped"] = dropped
	return out
}

func sampleQR() map[string]*QR {
	rng := rand.New(rand.NewPCG(102, 0))
	out := map[string]*QR{}
	out["empty"] = NewQR([]string{"temperature"})
	one := NewQR([]string{"pipe_age"})
	feed(one, genRows(rng, 10, waterColumns[3:4]), nil, nil, 4)
	out["one column"] = one
	rows := genRows(rng, 500, waterColumns)
	null := withMissing(rng, rows, 0.02)
	w := make([]float64, len(rows))
	for i := range w {
		w[i] = rng.Float64() * 2
	}
	full := NewQR(names(waterColumns))
	feed(full, rows, w, null, 64)
	out["weighted with missing"] = full
	ext := NewQRExtended(names(waterColumns))
	feed(ext, rows, w, null, 64)
	out["extended"] = ext
	out["extended empty"] = NewQRExtended([]string{"rainfall"})
	return out
}

// sameBits reports whether two float slices agree bit for bit.
func sameBits(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
			return false
		}
	}
	return true
}

func sameCounts(a, b *Counts) bool {
	eq := func(x, y []int64) bool {
		if len(x) != len(y) {
			return false
		}
		for i := range x {
			if x[i] != y[i] {
				return false
			}
		}
		return true
	}
	return a.Used == b.Used && math.Float64bits(a.SumWeights) == math.Float64bits(b.SumWeights) &&
		a.Dropped == b.Dropped && a.BadWeights == b.BadWeights &&
		eq(a.Null, b.Null) && eq(a.NaN, b.NaN) && eq(a.Inf, b.Inf)
}

// TestRoundTrip: decoding an encoding gives the accumulator back bit for bit
// (every field compared), re-encodes to the same bytes, and keeps
// accumulating exactly as the original does (property).
func TestRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(103, 0))
	for name, m := range sampleMoments() {
		t.Run("moments/"+name, func(t *testing.T) {
			blob, err := m.MarshalBinary()
			if err != nil {
				t.Fatal(err)
			}
			d, err := UnmarshalMoments(blob)
			if err != nil {
				t.Fatal(err)
			}
			if strings.Join(d.names, "\x00") != strings.Join(m.names, "\x00") || d.hasOrg != m.hasOrg ||
				!sameCounts(&d.counts, &m.counts) || !sameBits(d.origin, m.origin) || !sameBits(d.mean, m.mean) ||
				!sameBits(d.min, m.min) || !sameBits(d.max, m.max) {
				t.Fatal("decoded accumulator differs")
			}
			for i := 0; i < m.p; i++ {
				if !sameBits(d.co[i*m.p+i:(i+1)*m.p], m.co[i*m.p+i:(i+1)*m.p]) {
					t.Fatalf("co-moment row %d differs", i)
				}
			}
			again, _ := d.MarshalBinary()
			if string(again) != string(blob) {
				t.Fatal("re-encoding differs")
			}
			more := genRows(rng, 100, waterColumns[:m.p])
			feed(m, more, nil, nil, 32)
			feed(d, more, nil, nil, 32)
			a, _ := m.MarshalBinary()
			b, _ := d.MarshalBinary()
			if string(a) != string(b) {
				t.Fatal("decoded accumulator continues differently")
			}
		})
	}
	for name, q := range sampleQR() {
		t.Run("qr/"+name, func(t *testing.T) {
			blob, err := q.MarshalBinary()
			if err != nil {
				t.Fatal(err)
			}
			d, err := UnmarshalQR(blob)
			if err != nil {
				t.Fatal(err)
			}
			if strings.Join(d.names, "\x00") != strings.Join(q.names, "\x00") || d.hasOrg != q.hasOrg ||
				!sameCounts(&d.counts, &q.counts) || !sameBits(d.origin, q.origin) || !sameBits(d.r, q.r) ||
				d.Extended() != q.Extended() || !sameBits(d.rlo, q.rlo) {
				t.Fatal("decoded factor differs")
			}
			again, _ := d.MarshalBinary()
			if string(again) != string(blob) {
				t.Fatal("re-encoding differs")
			}
			more := genRows(rng, 100, waterColumns[:q.p])
			feed(q, more, nil, nil, 32)
			feed(d, more, nil, nil, 32)
			a, _ := q.MarshalBinary()
			b, _ := d.MarshalBinary()
			if string(a) != string(b) {
				t.Fatal("decoded factor continues differently")
			}
		})
	}
}

func allBlobs(t testing.TB) map[string][]byte {
	out := map[string][]byte{}
	for name, m := range sampleMoments() {
		b, err := m.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		out["moments/"+name] = b
	}
	for name, q := range sampleQR() {
		b, err := q.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		out["qr/"+name] = b
	}
	return out
}

func decodeAny(b []byte) error {
	if len(b) > 4 && b[4] == kindQR {
		_, err := UnmarshalQR(b)
		return err
	}
	_, err := UnmarshalMoments(b)
	return err
}

// reseal replaces the trailing checksum with the right one, so that a
// mutation reaches the checks behind it.
func reseal(b []byte) []byte {
	out := append([]byte(nil), b...)
	if len(out) < 4 {
		return out
	}
	body := out[:len(out)-4]
	binary.LittleEndian.PutUint32(out[len(out)-4:], crc32.Checksum(body, castagnoli))
	return out
}

// TestDecodeCorrupt: truncated, bit-flipped, wrong-kind, wrong-version and
// inconsistent blobs give an error wrapping ErrCorrupt (CRC-32C detects every
// single-bit error and every truncation here; the rest are checked fields).
func TestDecodeCorrupt(t *testing.T) {
	blobs := allBlobs(t)
	for name, blob := range blobs {
		t.Run(name, func(t *testing.T) {
			for n := 0; n < len(blob); n++ {
				if err := decodeAny(blob[:n]); !errors.Is(err, ErrCorrupt) {
					t.Fatalf("truncated to %d bytes: %v", n, err)
				}
			}
			if err := decodeAny(append(append([]byte(nil), blob...), 0)); !errors.Is(err, ErrCorrupt) {
				t.Fatalf("one byte appended: %v", err)
			}
			for i := 0; i < 8*len(blob); i++ {
				c := append([]byte(nil), blob...)
				c[i/8] ^= 1 << (i % 8)
				if err := decodeAny(c); !errors.Is(err, ErrCorrupt) {
					t.Fatalf("bit %d flipped: %v", i, err)
				}
			}
		})
	}

	m := blobs["moments/weighted with missing"]
	q := blobs["qr/weighted with missing"]
	withByte := func(b []byte, off int, v byte) []byte {
		c := append([]byte(nil), b...)
		c[off] = v
		return reseal(c)
	}
	withU32 := func(b []byte, off int, v uint32) []byte {
		c := append([]byte(nil), b...)
		binary.LittleEndian.PutUint32(c[off:], v)
		return reseal(c)
	}
	// Offsets of the layout documented in encode.go.
	countsOff := func(b []byte) int {
		p := int(binary.LittleEndian.Uint32(b[7:]))
		off := 11
		for range p {
			off += 2 + int(binary.LittleEndian.Uint16(b[off:]))
		}
		return off
	}
	withI64 := func(b []byte, off int, v uint64) []byte {
		c := append([]byte(nil), b...)
		binary.LittleEndian.PutUint64(c[off:], v)
		return reseal(c)
	}
	cm, cq := countsOff(m), countsOff(q)
	cases := []struct {
		name string
		blob []byte
		qr   bool   // decode as a factor
		want string // in the message
	}{
		{"moments as factor", m, true, "kind"},
		{"factor as moments", q, false, "kind"},
		{"version 3", withByte(m, 5, 3), false, "version 3"},
		{"version 0", withByte(q, 5, 0), true, "version 0"},
		{"bad magic", withByte(m, 0, 'X'), false, "magic"},
		{"unknown flags", withByte(m, 6, 3), false, "flags"},
		{"unknown factor flags", withByte(q, 6, 5), true, "flags"},
		{"extended flag on a float64 factor", withByte(q, 6, 3), true, "payload"},
		{"float64 flag on an extended factor", withByte(blobs["qr/extended"], 6, 1), true, "payload"},
		{"zero columns", withU32(m, 7, 0), false, "columns"},
		{"too many columns", withU32(q, 7, MaxColumns+1), true, "columns"},
		{"more columns than bytes", withU32(m, 7, 6), false, ""},
		{"huge name", withByte(withByte(m, 12, 0xff), 11, 0xff), false, ""},
		{"origin flag without rows", withByte(m, 6, 0), false, "origin"},
		{"negative rows", withI64(m, cm, 1<<63), false, "counts"},
		{"negative weight", withI64(q, cq+8, math.Float64bits(-1)), true, "counts"},
		{"NaN weight", withI64(q, cq+8, math.Float64bits(math.NaN())), true, "counts"},
		{"more bad weights than dropped", withI64(m, cm+24, 1<<40), false, "counts"},
		{"negative NULL count", withI64(m, cm+32, 1<<63), false, "missing"},
		{"origin not finite", withI64(q, cq+32+3*8*5, math.Float64bits(math.Inf(1))), true, "origin"},
		{"min above max", withI64(m, len(m)-4-8*5-8*5, math.Float64bits(1e300)), false, "extremes"},
		{"empty", nil, false, "shorter"},
		{"trailing checksum only", []byte{1, 2, 3, 4}, true, "shorter"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var err error
			if tc.qr {
				var d *QR
				d, err = UnmarshalQR(tc.blob)
				if d != nil {
					t.Error("non-nil factor with an error")
				}
			} else {
				var d *Moments
				d, err = UnmarshalMoments(tc.blob)
				if d != nil {
					t.Error("non-nil accumulator with an error")
				}
			}
			if !errors.Is(err, ErrCorrupt) {
				t.Fatalf("error %v does not wrap ErrCorrupt", err)
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %q does not mention %q", err, tc.want)
			}
		})
	}
}

// TestMarshalLimits: accumulators the encoding cannot hold are refused at
// encoding time rather than written wrong.
func TestMarshalLimits(t *testing.T) {
	long := strings.Repeat("x", maxName+1)
	if _, err := NewMoments([]string{long}).MarshalBinary(); err == nil {
		t.Error("over-long name encoded")
	}
	if _, err := NewQR([]string{long}).MarshalBinary(); err == nil {
		t.Error("over-long name encoded")
	}
	if _, err := NewMoments([]string{strings.Repeat("y", maxName)}).MarshalBinary(); err != nil {
		t.Errorf("longest name refused: %v", err)
	}
}

// exercise uses a decoded accumulator the way the rest of plumb does; it
// must not panic whatever the decoded values are.
func exerciseMoments(m *Moments) {
	rows := [][]float64{make([]float64, m.p), make([]float64, m.p)}
	for j := range rows[1] {
		rows[0][j] = float64(j)
		rows[1][j] = math.NaN()
	}
	c := m.Clone()
	feed(c, rows, nil, nil, 2)
	c.Merge(m)
	m.Merge(c)
	fresh := NewMoments(m.names)
	fresh.Merge(m)
	m.Means(nil)
	m.CoMoment(nil)
	m.Select([]int{0})
	_, _ = m.MarshalBinary()
}

func exerciseQR(q *QR) {
	rows := [][]float64{make([]float64, q.p)}
	for j := range rows[0] {
		rows[0][j] = float64(j)
	}
	c := q.Clone()
	feed(c, rows, nil, nil, 2)
	c.Merge(q)
	q.Merge(c)
	fresh := NewQR(q.names)
	fresh.Merge(q)
	q.R(nil)
	_, _ = q.MarshalBinary()
}

// fuzzDecode decodes b as it is and with its checksum repaired. A decoded
// accumulator must re-encode to the same bytes and be safe to use; an error
// must wrap ErrCorrupt.
func fuzzDecode[T any](t *testing.T, b []byte, decode func([]byte) (*T, error), marshal func(*T) ([]byte, error), use func(*T)) {
	for _, blob := range [][]byte{b, reseal(b)} {
		v, err := decode(blob)
		if err != nil {
			if !errors.Is(err, ErrCorrupt) {
				t.Fatalf("error %v does not wrap ErrCorrupt", err)
			}
			if v != nil {
				t.Fatal("value returned with an error")
			}
			continue
		}
		again, err := marshal(v)
		if err != nil {
			t.Fatalf("decoded value does not encode: %v", err)
		}
		if blob[5] == oldVersion {
			// Written back in the current version, which then holds.
			w, err := decode(again)
			if err != nil {
				t.Fatalf("re-encoded version-1 value does not decode: %v", err)
			}
			if more, _ := marshal(w); string(more) != string(again) {
				t.Fatal("re-encoded version-1 value re-encodes differently")
			}
		} else if string(again) != string(blob) {
			t.Fatal("decoded value re-encodes differently")
		}
		use(v)
	}
}

func fuzzSeeds(f *testing.F) {
	for _, b := range allBlobs(f) {
		f.Add(b)
		f.Add(b[:len(b)/2])
		c := append([]byte(nil), b...)
		c[len(c)/3] ^= 0x10
		f.Add(c)
		f.Add(reseal(append(append([]byte(nil), b[:len(b)-4]...), 0, 0, 0, 0, 0)))
	}
	for _, b := range v1Blobs(f) {
		f.Add(b)
	}
	f.Add([]byte{})
	f.Add([]byte("PLMBM\x01\x00"))
}

func FuzzUnmarshalMoments(f *testing.F) {
	fuzzSeeds(f)
	f.Fuzz(func(t *testing.T, b []byte) {
		fuzzDecode(t, b, UnmarshalMoments, (*Moments).MarshalBinary, exerciseMoments)
	})
}

func FuzzUnmarshalQR(f *testing.F) {
	fuzzSeeds(f)
	f.Fuzz(func(t *testing.T, b []byte) {
		fuzzDecode(t, b, UnmarshalQR, (*QR).MarshalBinary, exerciseQR)
	})
}

// v1Blobs reads the version-1 encodings kept in testdata/v1: the sample
// accumulators of sampleMoments and sampleQR as the version-1 encoder wrote
// them (file "moments-one_column.bin" is sample "moments/one column"), and
// tinyRows' accumulators ("moments-scaled_2p-300.bin",
// "qr-extended_scaled_2p-300.bin").
func v1Blobs(t testing.TB) map[string][]byte {
	files, err := filepath.Glob("testdata/v1/*.bin")
	if err != nil || len(files) == 0 {
		t.Fatalf("no version-1 encodings in testdata/v1 (%v)", err)
	}
	out := map[string][]byte{}
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		name := strings.TrimSuffix(filepath.Base(f), ".bin")
		name = strings.Replace(name, "-", "/", 1)
		out[strings.ReplaceAll(name, "_", " ")] = b
	}
	return out
}

// tinyRows are the rows of the version-1 "scaled 2p-300" accumulators: 300
// rows of waterColumns (seed 104) times 2⁻³⁰⁰ (exact), values about 1e-89,
// whose co-moments (about 1e-178 and below) a version-1 encoding holds in
// the columns' own units.
func tinyRows() [][]float64 {
	rows := genRows(rand.New(rand.NewPCG(104, 0)), 300, waterColumns)
	for _, r := range rows {
		for j := range r {
			r[j] = math.Ldexp(r[j], -300)
		}
	}
	return rows
}

// TestDecodeVersion1: accumulators stored in the version-1 encoding (in
// users' state stores) still decode, to the same numbers in the columns'
// own units as the current code computes from the same rows (bit for bit
// for the cross-products; to 1e-14 for the factors, whose Householder
// norms may round differently at another scale), are written back in the
// current version, and carry on accumulating as a fresh accumulator does
// (property).
func TestDecodeVersion1(t *testing.T) {
	fresh := map[string]any{}
	for name, m := range sampleMoments() {
		fresh["moments/"+name] = m
	}
	for name, q := range sampleQR() {
		fresh["qr/"+name] = q
	}
	tm := NewMoments(names(waterColumns))
	feed(tm, tinyRows(), nil, nil, 64)
	fresh["moments/scaled 2p-300"] = tm
	tq := NewQRExtended(names(waterColumns))
	feed(tq, tinyRows(), nil, nil, 64)
	fresh["qr/extended scaled 2p-300"] = tq

	blobs := v1Blobs(t)
	if len(blobs) != len(fresh) {
		t.Fatalf("%d version-1 encodings, %d samples", len(blobs), len(fresh))
	}
	for name, blob := range blobs {
		t.Run(name, func(t *testing.T) {
			if blob[5] != 1 {
				t.Fatalf("version byte %d, want 1", blob[5])
			}
			var again []byte
			switch want := fresh[name].(type) {
			case *Moments:
				got, err := UnmarshalMoments(blob)
				if err != nil {
					t.Fatal(err)
				}
				if !sameCounts(&got.counts, &want.counts) || got.hasOrg != want.hasOrg {
					t.Fatal("counts differ")
				}
				for i := 0; i < want.p; i++ {
					if got.Scale(i) != want.Scale(i) || !sameBits([]float64{got.Mean(i)}, []float64{want.Mean(i)}) || got.Min(i) != want.Min(i) || got.Max(i) != want.Max(i) {
						t.Errorf("column %d: scale %v, mean %v, min %v, max %v; fresh %v, %v, %v, %v", i,
							got.Scale(i), got.Mean(i), got.Min(i), got.Max(i), want.Scale(i), want.Mean(i), want.Min(i), want.Max(i))
					}
					for j := 0; j < want.p; j++ {
						if math.Float64bits(got.At(i, j)) != math.Float64bits(want.At(i, j)) {
							t.Errorf("At(%d,%d) = %v, fresh %v", i, j, got.At(i, j), want.At(i, j))
						}
					}
				}
				again, err = got.MarshalBinary()
				if err != nil {
					t.Fatal(err)
				}
				if want.N() > 0 {
					more := genRows(rand.New(rand.NewPCG(105, 0)), 50, waterColumns[:want.p])
					feed(got, more, nil, nil, 16)
					feed(want, more, nil, nil, 16)
					checkMomentsSame(t, got, want, 1e-15)
				}
			case *QR:
				got, err := UnmarshalQR(blob)
				if err != nil {
					t.Fatal(err)
				}
				if !sameCounts(&got.counts, &want.counts) || got.hasOrg != want.hasOrg || got.Extended() != want.Extended() {
					t.Fatal("counts or kind differ")
				}
				checkQRSame(t, got, want, 1e-14)
				again, err = got.MarshalBinary()
				if err != nil {
					t.Fatal(err)
				}
				if want.N() > 0 {
					more := genRows(rand.New(rand.NewPCG(105, 0)), 50, waterColumns[:want.p])
					feed(got, more, nil, nil, 16)
					feed(want, more, nil, nil, 16)
					checkQRSame(t, got, want, 1e-14)
				}
			default:
				t.Fatalf("no sample for %q", name)
			}
			if again[5] != encVersion {
				t.Errorf("re-encoded as version %d, want %d", again[5], encVersion)
			}
			if err := decodeAny(again); err != nil {
				t.Errorf("re-encoding does not decode: %v", err)
			}
		})
	}
}
