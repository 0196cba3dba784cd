package connectors

import (
	"errors"
	"math"
	"math/rand/v2"
	"runtime"
	"testing"
	"time"

	"plumb/stream"
)

// TestGrouperAgainstDirect feeds rows with many interleaved keys (enough
// to pass the buffer bound several times) and compares each group with an
// accumulator fed that group's rows directly.
func TestGrouperAgainstDirect(t *testing.T) {
	// Tests stay small (under 1 GB of memory each): this one allocates
	// about 70 MB in all; it once reserved a million-row block per group.
	var before runtime.MemStats
	runtime.ReadMemStats(&before)
	defer func() {
		var after runtime.MemStats
		runtime.ReadMemStats(&after)
		if alloc := after.TotalAlloc - before.TotalAlloc; alloc > 512<<20 {
			t.Errorf("the test allocated %d MB; keep it under 512 MB", alloc>>20)
		}
	}()
	names := []string{"temperature", "rainfall", "metered_volume"}
	for _, qr := range []bool{false, true} {
		g := NewGrouper(GroupOptions{Columns: names, QR: qr, Bucketed: true, Segmented: true, MaxSegments: 50})
		r := rand.New(rand.NewPCG(3, 4))
		type key struct {
			b   int64
			seg string
		}
		direct := map[key]*stream.Moments{}
		directQR := map[key]*stream.QR{}
		blocks := map[key]*stream.Block{}
		segs := []string{"harbour", "hillside", "north", "riverside", NullSegment}
		const n = 200000
		for i := 0; i < n; i++ {
			k := key{int64(r.IntN(40)) * 86400e6, segs[r.IntN(len(segs))]}
			vals, nulls, err := g.Row(k.b, []byte(k.seg))
			if err != nil {
				t.Fatal(err)
			}
			b := blocks[k]
			if b == nil {
				// One block per group, grown as rows come (about 1000
				// each): boundaries unlike the grouper's, memory in
				// proportion to the rows.
				b = stream.NewBlock(3, 64, false)
				blocks[k] = b
				direct[k] = stream.NewMoments(names)
				directQR[k] = stream.NewQR(names)
			}
			dv, dn := b.AppendRow()
			for j := range vals {
				v := 1e6 + r.NormFloat64()*float64(j+1)
				if r.IntN(500) == 0 {
					nulls[j], dn[j] = true, true
				}
				vals[j], dv[j] = v, v
			}
		}
		for k, b := range blocks {
			direct[k].Add(b)
			directQR[k].Add(b)
		}
		groups := g.Groups()
		if len(groups) != len(direct) {
			t.Fatalf("%d groups, want %d", len(groups), len(direct))
		}
		for i, gr := range groups {
			if i > 0 {
				a, b := groups[i-1].Key, gr.Key
				if a.Bucket.After(b.Bucket) || (a.Bucket.Equal(b.Bucket) && a.Segment >= b.Segment) {
					t.Fatalf("groups out of order at %d", i)
				}
			}
			k := key{gr.Key.Bucket.UnixMicro(), gr.Key.Segment}
			want := direct[k]
			got := gr.Moments
			if got.N() != want.N() || got.Counts().Dropped != want.Counts().Dropped {
				t.Fatalf("group %v: n %d dropped %d, want %d %d", k, got.N(), got.Counts().Dropped, want.N(), want.Counts().Dropped)
			}
			for a := 0; a < 3; a++ {
				// Different block boundaries: pairwise merges agree to
				// rounding (common practice, no source).
				if d := math.Abs(got.Mean(a)-want.Mean(a)) / math.Sqrt(want.At(a, a)/float64(want.N())); d > 1e-10 {
					t.Errorf("group %v mean %d off by %.2g sd", k, a, d)
				}
				for b := a; b < 3; b++ {
					if d := math.Abs(got.At(a, b)-want.At(a, b)) / math.Sqrt(want.At(a, a)*want.At(b, b)); d > 1e-12 {
						t.Errorf("group %v co-moment %d,%d rel %.2g", k, a, b, d)
					}
				}
			}
			if qr {
				if gr.QR == nil || gr.QR.N() != directQR[k].N() {
					t.Fatalf("group %v: QR missing or wrong count", k)
				}
			} else if gr.QR != nil {
				t.Fatalf("group %v: QR without asking", k)
			}
		}
	}
	g := NewGrouper(GroupOptions{Columns: []string{"a"}, Segmented: true, MaxSegments: 3})
	for i, s := range []string{"a", "b", "c", "a", "d"} {
		_, _, err := g.Row(0, []byte(s))
		if (i == 4) != (err != nil) {
			t.Fatalf("segment %d (%s): error %v", i, s, err)
		}
		if err != nil && !errors.Is(err, ErrTooManySegments) {
			t.Fatalf("error %v does not wrap ErrTooManySegments", err)
		}
	}
}

func TestBucketer(t *testing.T) {
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	at := func(s string, loc *time.Location) int64 {
		tm, err := time.ParseInLocation("2006-01-02 15:04", s, loc)
		if err != nil {
			t.Fatal(err)
		}
		return tm.UnixMicro()
	}
	// Worked by hand from the calendar: 2024-03-31 is a Sunday, the day
	// Amsterdam moves from +01:00 to +02:00 at 02:00 local time.
	cases := []struct {
		unit string
		loc  *time.Location
		in   string // in loc
		want string // bucket start, in loc
	}{
		{"hour", time.UTC, "2024-03-31 13:59", "2024-03-31 13:00"},
		{"day", time.UTC, "2024-03-31 23:59", "2024-03-31 00:00"},
		{"week", time.UTC, "2024-03-31 12:00", "2024-03-25 00:00"},
		{"week", time.UTC, "2024-04-01 00:00", "2024-04-01 00:00"},
		{"month", time.UTC, "2024-02-29 08:00", "2024-02-01 00:00"},
		{"day", ams, "2024-03-31 23:30", "2024-03-31 00:00"},
		{"hour", ams, "2024-03-31 03:30", "2024-03-31 03:00"},
		{"month", ams, "2024-04-01 00:30", "2024-04-01 00:00"},
		{"week", ams, "2024-04-07 23:59", "2024-04-01 00:00"},
	}
	for _, c := range cases {
		b := NewBucketer(c.unit, c.loc)
		got := b.Start(at(c.in, c.loc))
		if want := at(c.want, c.loc); got != want {
			t.Errorf("%s in %s of %s: %s, want %s", c.unit, c.loc, c.in, b.Time(got), c.want)
		}
		// The cached bucket answers the same.
		if again := b.Start(at(c.in, c.loc)); again != got {
			t.Errorf("%s %s: cached answer %d, first %d", c.unit, c.in, again, got)
		}
	}
	// The day of the switch is 23 hours long.
	b := NewBucketer("day", ams)
	d1 := b.Start(at("2024-03-31 12:00", ams))
	d2 := b.Start(at("2024-04-01 12:00", ams))
	if h := time.Duration(d2-d1) * time.Microsecond; h != 23*time.Hour {
		t.Errorf("2024-03-31 in Amsterdam lasts %v, want 23h", h)
	}
}

// TestStatsMoments: sufficient statistics shifted by an arbitrary origin
// give the accumulator the stream package computes from the rows.
func TestStatsMoments(t *testing.T) {
	names := []string{"pressure", "meter_reading", "pipe_age"}
	r := rand.New(rand.NewPCG(5, 6))
	b := stream.NewBlock(3, 500, false)
	for i := 0; i < 500; i++ {
		v, _ := b.AppendRow()
		v[0] = 4 + 0.3*r.NormFloat64()
		v[1] = 1e9 + r.NormFloat64()
		v[2] = 7 // constant
	}
	want := stream.NewMoments(names)
	want.Add(b)
	s := Stats{Names: names, Used: 500, SumWeights: 500, Null: make([]int64, 3), NaN: make([]int64, 3), Inf: make([]int64, 3),
		Origin: []float64{4.1, 1e9 + 0.5, 6.5}, Sum: make([]float64, 3), Cross: make([]float64, 6),
		Min: []float64{math.Inf(1), math.Inf(1), math.Inf(1)}, Max: []float64{math.Inf(-1), math.Inf(-1), math.Inf(-1)}}
	for i := 0; i < 500; i++ {
		row := b.Data[i*3 : i*3+3]
		k := 0
		for a := 0; a < 3; a++ {
			s.Sum[a] += row[a] - s.Origin[a]
			s.Min[a] = math.Min(s.Min[a], row[a])
			s.Max[a] = math.Max(s.Max[a], row[a])
			for c := a; c < 3; c++ {
				s.Cross[k] += (row[a] - s.Origin[a]) * (row[c] - s.Origin[c])
				k++
			}
		}
	}
	got, err := s.Moments()
	if err != nil {
		t.Fatal(err)
	}
	if got.N() != 500 || got.Mean(2) != 7 || got.At(2, 2) != 0 || got.At(0, 2) != 0 {
		t.Errorf("constant column: n %d mean %v co %v %v", got.N(), got.Mean(2), got.At(2, 2), got.At(0, 2))
	}
	for a := 0; a < 2; a++ {
		if d := math.Abs(got.Mean(a)-want.Mean(a)) / math.Sqrt(want.At(a, a)/500); d > 1e-12 {
			t.Errorf("mean %d off by %.2g sd", a, d)
		}
		for c := a; c < 2; c++ {
			if d := math.Abs(got.At(a, c)-want.At(a, c)) / math.Sqrt(want.At(a, a)*want.At(c, c)); d > 1e-12 {
				t.Errorf("co-moment %d,%d rel %.2g", a, c, d)
			}
		}
	}
}
