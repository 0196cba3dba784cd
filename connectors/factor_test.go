package connectors

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"plumb/stream"
)

// supplyRow is a generated district-day: a temperature, a supply source
// (NULL now and then when nullEvery > 0) and a tariff band.
type supplyRow struct {
	bucket      int64
	segment     string
	temperature float64
	tempNull    bool
	source      string // "" for NULL
	tariff      string
	weight      float64
}

// supplyRows generates rows in which the supply sources appear one after
// another (reservoir from the start, river later, borehole last), so a
// streaming scan meets new levels mid-stream.
func supplyRows(n int, seed uint64, nullEvery int) []supplyRow {
	r := rand.New(rand.NewPCG(seed, 7))
	rows := make([]supplyRow, n)
	for i := range rows {
		src := []string{"reservoir"}
		if i > n/3 {
			src = append(src, "river")
		}
		if i > 2*n/3 {
			src = append(src, "borehole")
		}
		rows[i] = supplyRow{
			bucket:      int64(i/50) * 86400e6,
			segment:     SegmentKey([]string{"harbour", "north"}[r.IntN(2)]),
			temperature: 14 + 5*r.NormFloat64(),
			tempNull:    r.IntN(60) == 0,
			source:      src[r.IntN(len(src))],
			tariff:      []string{"standard", "off_peak", "business"}[r.IntN(3)],
			weight:      0.5 + r.Float64(),
		}
		if nullEvery > 0 && i%nullEvery == 3 {
			rows[i].source = ""
		}
	}
	return rows
}

var (
	supplyLevels = []string{"borehole", "reservoir", "river"}
	tariffLevels = []string{"business", "off_peak", "standard"}
)

// dummyNames are the expanded columns of (supply_source, temperature,
// tariff_band) with every level known.
func dummyNames() []string {
	var names []string
	for _, l := range supplyLevels {
		names = append(names, stream.IndicatorName("supply_source", l))
	}
	names = append(names, "temperature")
	for _, l := range tariffLevels {
		names = append(names, stream.IndicatorName("tariff_band", l))
	}
	return names
}

// feedFactors feeds rows to a Grouper over (supply_source, temperature,
// tariff_band) with both text columns as factors.
func feedFactors(t testing.TB, g *Grouper, rows []supplyRow) {
	for _, r := range rows {
		vals, nulls, err := g.Row(r.bucket, []byte(r.segment))
		if err != nil {
			t.Fatal(err)
		}
		if r.source == "" {
			nulls[0] = true
		} else if vals[0], err = g.LevelString(0, r.source); err != nil {
			t.Fatal(err)
		}
		vals[1], nulls[1] = r.temperature, r.tempNull
		if vals[2], err = g.Level(2, []byte(r.tariff)); err != nil {
			t.Fatal(err)
		}
		if g.weighted {
			g.SetWeight(r.weight)
		}
	}
}

// feedDummies feeds the same rows, skipping those with a NULL source, as
// hand-built 0/1 columns over every level, to a Grouper without factors.
func feedDummies(t testing.TB, g *Grouper, rows []supplyRow) {
	for _, r := range rows {
		if r.source == "" {
			continue
		}
		vals, nulls, err := g.Row(r.bucket, []byte(r.segment))
		if err != nil {
			t.Fatal(err)
		}
		vals[slices.Index(supplyLevels, r.source)] = 1
		vals[3], nulls[3] = r.temperature, r.tempNull
		vals[4+slices.Index(tariffLevels, r.tariff)] = 1
		if g.weighted {
			g.SetWeight(r.weight)
		}
	}
}

// sameMoments compares two accumulators: counts exactly, means and
// co-moments to tol relative to the columns' spread (different block
// boundaries round differently: common practice, no source).
func sameMoments(t *testing.T, what string, got, want *stream.Moments, tol float64) {
	t.Helper()
	if !slices.Equal(got.Names(), want.Names()) {
		t.Fatalf("%s: columns %v, want %v", what, got.Names(), want.Names())
	}
	gc, wc := got.Counts(), want.Counts()
	if gc.Used != wc.Used || gc.Dropped != wc.Dropped || !slices.Equal(gc.Null, wc.Null) {
		t.Fatalf("%s: counts used %d dropped %d null %v, want %d %d %v", what, gc.Used, gc.Dropped, gc.Null, wc.Used, wc.Dropped, wc.Null)
	}
	if wc.Used == 0 {
		return
	}
	sd := func(j int) float64 { return math.Max(math.Sqrt(want.At(j, j)), 1e-300) }
	for i := range want.P() {
		if d := math.Abs(got.Mean(i)-want.Mean(i)) / (sd(i) / math.Sqrt(float64(wc.Used))); d > tol {
			t.Errorf("%s: mean of %s off by %.2g sd", what, want.Names()[i], d)
		}
		if got.Min(i) != want.Min(i) || got.Max(i) != want.Max(i) {
			t.Errorf("%s: range of %s [%v, %v], want [%v, %v]", what, want.Names()[i], got.Min(i), got.Max(i), want.Min(i), want.Max(i))
		}
		for j := i; j < want.P(); j++ {
			if d := math.Abs(got.At(i, j)-want.At(i, j)) / (sd(i) * sd(j)); d > tol {
				t.Errorf("%s: co-moment %s×%s rel %.2g", what, want.Names()[i], want.Names()[j], d)
			}
		}
	}
}

// TestGrouperFactorsEqualDummies: a factor scan whose levels appear
// mid-stream gives, group by group, the accumulators of one pass over
// hand-built 0/1 columns of every level (to 1e-12: the new levels move the
// block boundaries); levels are listed in byte order whatever the order
// they came in.
func TestGrouperFactorsEqualDummies(t *testing.T) {
	rows := supplyRows(20000, 1, 0)
	cols := []string{"supply_source", "temperature", "tariff_band"}
	for _, keyed := range []bool{false, true} {
		for _, qr := range []bool{false, true} {
			o := GroupOptions{Columns: cols, QR: qr, Bucketed: keyed, Segmented: keyed, Weighted: qr}
			fo := o
			fo.Factors = []int{0, 2}
			g := NewGrouper(fo)
			feedFactors(t, g, rows)
			o.Columns = dummyNames()
			d := NewGrouper(o)
			feedDummies(t, d, rows)
			if got := g.Columns(); !slices.Equal(got, dummyNames()) {
				t.Fatalf("columns %v, want %v", got, dummyNames())
			}
			fs := g.Factors()
			if len(fs) != 2 || !slices.Equal(fs[0].Levels, supplyLevels) || !slices.Equal(fs[1].Levels, tariffLevels) || fs[0].Null != 0 {
				t.Fatalf("factors %+v", fs)
			}
			gg, dg := g.Groups(), d.Groups()
			if len(gg) != len(dg) {
				t.Fatalf("%d groups, want %d", len(gg), len(dg))
			}
			for i := range gg {
				if gg[i].Key != dg[i].Key {
					t.Fatalf("group %d: key %v, want %v", i, gg[i].Key, dg[i].Key)
				}
				sameMoments(t, "factor scan", gg[i].Moments, dg[i].Moments, 1e-12)
				if qr && (gg[i].QR == nil || !slices.Equal(gg[i].QR.Names(), dummyNames()) || gg[i].QR.N() != dg[i].QR.N()) {
					t.Fatalf("group %d: QR missing, over other columns or with other counts", i)
				}
			}
		}
	}
}

// TestGrouperFactorNulls: a NULL factor drops the row, counted against the
// factor and in the group's dropped rows, not against any column.
func TestGrouperFactorNulls(t *testing.T) {
	rows := supplyRows(3000, 2, 17)
	var nulls int64
	for _, r := range rows {
		if r.source == "" {
			nulls++
		}
	}
	cols := []string{"supply_source", "temperature", "tariff_band"}
	for _, keyed := range []bool{false, true} {
		g := NewGrouper(GroupOptions{Columns: cols, Factors: []int{0, 2}, Bucketed: keyed})
		feedFactors(t, g, rows)
		d := NewGrouper(GroupOptions{Columns: dummyNames(), Bucketed: keyed})
		feedDummies(t, d, rows)
		if f := g.Factors(); f[0].Null != nulls || f[1].Null != 0 {
			t.Fatalf("factor NULL counts %d %d, want %d 0", f[0].Null, f[1].Null, nulls)
		}
		res := &Result{Columns: g.Columns(), Groups: g.Groups()}
		want := (&Result{Columns: dummyNames(), Groups: d.Groups()}).Merged().Moments
		got := res.Merged().Moments
		if got.Counts().Dropped != want.Counts().Dropped+nulls {
			t.Errorf("dropped %d, want %d (NULL temperatures) + %d (NULL sources)", got.Counts().Dropped, want.Counts().Dropped, nulls)
		}
		// The dummy scan never saw those rows: count them there too.
		want.Drop(nulls)
		sameMoments(t, "with NULL sources", got, want, 1e-12)
	}
	// A factor NULL in every row: no levels, no columns.
	g := NewGrouper(GroupOptions{Columns: []string{"supply_source"}, Factors: []int{0}})
	for range 5 {
		_, nulls, _ := g.Row(0, nil)
		nulls[0] = true
	}
	res := &Result{Columns: g.Columns(), Factors: g.Factors(), Groups: g.Groups(), Read: 5}
	if err := CheckLevels("table demand", res); !errors.Is(err, ErrInsufficient) || !strings.Contains(err.Error(), `"supply_source"`) {
		t.Errorf("all-NULL factor: %v", err)
	}
}

// TestGrouperLevelLimit: the level beyond the limit is an error naming the
// column and the count, and the dictionary stops growing.
func TestGrouperLevelLimit(t *testing.T) {
	g := NewGrouper(GroupOptions{Columns: []string{"district", "rainfall"}, Factors: []int{0}, MaxLevels: 3})
	var first error
	for i := range 10 {
		vals, _, err := g.Row(0, nil)
		if err != nil {
			t.Fatal(err)
		}
		vals[0], err = g.LevelString(0, "district_"+string(rune('a'+i)))
		if err != nil && first == nil {
			first = err
			if i != 3 {
				t.Errorf("the limit was passed at value %d, want 3", i)
			}
		}
		vals[1] = float64(i)
	}
	if !errors.Is(first, ErrTooManyLevels) {
		t.Fatalf("error %v, want ErrTooManyLevels", first)
	}
	for _, w := range []string{`"district"`, "more than 3", "4 levels had been seen"} {
		if !strings.Contains(first.Error(), w) {
			t.Errorf("error %q does not say %q", first, w)
		}
	}
	if f := g.Factors(); len(f[0].Levels) != 3 {
		t.Errorf("%d levels kept after the limit, want 3", len(f[0].Levels))
	}
}

// TestUnionColumns: the union of level sets in canonical order.
func TestUnionColumns(t *testing.T) {
	f := []string{"supply_source", "tariff_band"}
	a := []string{"supply_source[river]", "temperature", "tariff_band[standard]"}
	b := []string{"supply_source[borehole]", "supply_source[river]", "temperature", "tariff_band[business]"}
	c := []string{"temperature"}
	want := []string{"supply_source[borehole]", "supply_source[river]", "temperature", "tariff_band[business]", "tariff_band[standard]"}
	for _, lists := range [][][]string{{a, b}, {b, a}, {a, c, b}, {c, b, a}} {
		if got := UnionColumns(f, lists...); !slices.Equal(got, want) {
			t.Errorf("UnionColumns(%q) = %q, want %q", lists, got, want)
		}
	}
	fa := []Factor{{Name: "supply_source", Levels: []string{"river"}, Null: 2}, {Name: "tariff_band", Levels: []string{"standard"}}}
	fb := []Factor{{Name: "supply_source", Levels: []string{"borehole", "river"}, Null: 1}, {Name: "tariff_band", Levels: []string{"business"}}}
	u := UnionFactors(fa, fb)
	if got := ExpandNames([]string{"supply_source", "temperature", "tariff_band"}, u); !slices.Equal(got, want) || u[0].Null != 3 {
		t.Errorf("ExpandNames(UnionFactors) = %q (NULL %d), want %q (3)", got, u[0].Null, want)
	}
}

// TestMergeDifferentLevels: groups that saw different levels (partitions
// of one scan), aligned and merged, equal one accumulation of all their
// rows; Result.Merged aligns by itself.
func TestMergeDifferentLevels(t *testing.T) {
	rows := supplyRows(6000, 3, 0)
	cols := []string{"supply_source", "temperature", "tariff_band"}
	// Three partitions by row order: the first sees reservoir only.
	var parts [][]Group
	var facs [][]Factor
	for k := range 3 {
		g := NewGrouper(GroupOptions{Columns: cols, Factors: []int{0, 2}, QR: true})
		feedFactors(t, g, rows[k*2000:(k+1)*2000])
		parts = append(parts, g.Groups())
		facs = append(facs, g.Factors())
	}
	if len(facs[0][0].Levels) != 1 || len(facs[2][0].Levels) != 3 {
		t.Fatalf("partitions' levels %v, %v: want them to differ", facs[0][0].Levels, facs[2][0].Levels)
	}
	d := NewGrouper(GroupOptions{Columns: dummyNames()})
	feedDummies(t, d, rows)
	want := d.Groups()[0].Moments
	names := ExpandNames(cols, UnionFactors(facs...))
	var lists [][]string
	for _, p := range parts {
		lists = append(lists, p[0].Moments.Names())
	}
	if u := UnionColumns([]string{"supply_source", "tariff_band"}, lists...); !slices.Equal(u, names) {
		t.Fatalf("UnionColumns %q, want %q", u, names)
	}
	for _, order := range [][]int{{0, 1, 2}, {2, 0, 1}} {
		var aligned [][]Group
		var raw []Group
		for _, k := range order {
			aligned = append(aligned, Align(parts[k], names))
			raw = append(raw, parts[k]...)
		}
		merged, err := MergeGroups(aligned, 0)
		if err != nil {
			t.Fatal(err)
		}
		sameMoments(t, "MergeGroups of aligned partitions", merged[0].Moments, want, 1e-12)
		r := &Result{Columns: names, Groups: raw}
		sameMoments(t, "Result.Merged of partitions", r.Merged().Moments, want, 1e-12)
		if q := r.Merged().QR; q == nil || q.N() != want.N() {
			t.Errorf("merged QR missing or with %v rows", q)
		}
	}
}

// TestChooseFactorTarget: the target of an OLS fit must be numeric.
func TestChooseFactorTarget(t *testing.T) {
	cols := []Column{{Name: "metered_volume", Type: "REAL", Kind: KindNumeric}, {Name: "temperature", Type: "REAL", Kind: KindNumeric},
		{Name: "supply_source", Type: "TEXT", Kind: KindText}, {Name: "leak_flag", Type: "BOOLEAN", Kind: KindBool}}
	for _, target := range []string{"supply_source", "leak_flag"} {
		_, err := Choose("table demand", cols, Request{}, target)
		if !errors.Is(err, ErrColumnType) || !strings.Contains(err.Error(), `"`+target+`"`) || !strings.Contains(err.Error(), "least-squares") ||
			!strings.Contains(err.Error(), "must be numeric") {
			t.Errorf("target %s: %v", target, err)
		}
	}
	p, err := Choose("table demand", cols, Request{Columns: []string{"temperature", "supply_source"}}, "metered_volume")
	if err != nil {
		t.Fatal(err)
	}
	if f := p.Factors(); len(f) != 1 || p.Values[f[0]].Name != "supply_source" {
		t.Errorf("factors %v of %v", f, p.Values)
	}
	// Unnamed text columns are skipped; booleans are used as factors.
	p, err = Resolve("table demand", cols, Request{})
	if err != nil {
		t.Fatal(err)
	}
	if len(p.Skipped) != 1 || p.Skipped[0].Name != "supply_source" || len(p.Factors()) != 1 || p.Values[p.Factors()[0]].Name != "leak_flag" {
		t.Errorf("default set %v, skipped %v", p.Values, p.Skipped)
	}
}

// TestFactorRowsAllocate: no allocation per row in steady state (every
// level known).
func TestFactorRowsAllocate(t *testing.T) {
	rows := supplyRows(2000, 4, 0)
	for _, keyed := range []bool{false, true} {
		g := NewGrouper(GroupOptions{Columns: []string{"supply_source", "temperature", "tariff_band"}, Factors: []int{0, 2}, Bucketed: keyed})
		feedFactors(t, g, rows[1500:]) // every level
		i := 0
		allocs := testing.AllocsPerRun(1000, func() {
			r := rows[i%len(rows)]
			i++
			vals, _, _ := g.Row(0, nil)
			vals[0], _ = g.Level(0, []byte(r.source))
			vals[1] = r.temperature
			vals[2], _ = g.LevelString(2, r.tariff)
		})
		// Folding a full block allocates nothing either; the average
		// over 1000 rows must be zero.
		if allocs != 0 {
			t.Errorf("keyed %v: %v allocations per row", keyed, allocs)
		}
	}
}

// BenchmarkGrouperFactors: rows with two factors against the same rows as
// hand-built 0/1 columns (the floor, measured in the same run).
func BenchmarkGrouperFactors(b *testing.B) {
	rows := supplyRows(1<<14, 5, 0)
	cols := []string{"supply_source", "temperature", "tariff_band"}
	var floor float64
	b.Run("dummies", func(b *testing.B) {
		b.ReportAllocs()
		g := NewGrouper(GroupOptions{Columns: dummyNames()})
		for i := 0; b.Loop(); i++ {
			r := rows[i%len(rows)]
			vals, _, _ := g.Row(0, nil)
			vals[slices.Index(supplyLevels, r.source)] = 1
			vals[3] = r.temperature
			vals[4+slices.Index(tariffLevels, r.tariff)] = 1
		}
		g.Groups()
		floor = float64(b.Elapsed().Nanoseconds()) / float64(b.N)
	})
	b.Run("factors", func(b *testing.B) {
		b.ReportAllocs()
		g := NewGrouper(GroupOptions{Columns: cols, Factors: []int{0, 2}})
		tariff := make([][]byte, len(rows))
		for i, r := range rows {
			tariff[i] = []byte(r.tariff)
		}
		for i := 0; b.Loop(); i++ {
			r := rows[i%len(rows)]
			vals, _, _ := g.Row(0, nil)
			vals[0], _ = g.LevelString(0, r.source)
			vals[1] = r.temperature
			vals[2], _ = g.Level(2, tariff[i%len(rows)])
		}
		g.Groups()
		if floor > 0 {
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/floor, "x-dummies")
		}
	})
}
