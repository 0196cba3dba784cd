package diagnostics

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"testing"

	"plumb/stream"
)

// waterColumns are the columns of the generated daily district feature
// table, in the project's own scenario (a water utility's demand
// forecasting features).
var waterColumns = []string{
	"temperature", "rainfall", "population_served", "residential_connections",
	"commercial_connections", "total_connections", "pipe_age", "pressure_z1",
	"pressure_z2", "pressure_z3", "metered_volume", "billed_volume",
	"zone_a", "zone_b", "zone_c", "zone_d",
}

// waterTable generates n days of one district's features from a fixed
// seed. By construction: total_connections is exactly residential +
// commercial; pressure_z2 is exactly 2.5·pressure_z1 − 0.75·pipe_age + 3;
// pressure_z3 is a stuck sensor at 52.3; billed_volume is a near copy of
// metered_volume; zone_a..zone_d are the dummies of a 4-level category
// with shares 0.1, 0.2, 0.3, 0.4.
func waterTable(seed uint64, n int) (names []string, rows [][]float64) {
	r := rand.New(rand.NewPCG(seed, 0x5eed))
	for day := 0; day < n; day++ {
		t := float64(day)
		temp := 15 + 8*math.Sin(2*math.Pi*t/365) + 2*r.NormFloat64()
		rain := 0.0
		if r.Float64() < 0.3 {
			rain = 6 * r.ExpFloat64()
		}
		pop := math.Round(48000 + 2*t + 300*r.NormFloat64())
		res := math.Round(pop/2.6 + 150*r.NormFloat64())
		com := math.Round(1800 + 60*r.NormFloat64())
		age := 32 + t/365 + 3*r.NormFloat64()
		p1 := 4.2 + 0.05*r.NormFloat64()
		p2 := 2.5*p1 - 0.75*age + 3
		metered := 0.2*pop + 300*temp - 50*rain + 500*r.NormFloat64()
		billed := 0.97*metered + 30*r.NormFloat64()
		zone := make([]float64, 4)
		u := r.Float64()
		switch {
		case u < 0.1:
			zone[0] = 1
		case u < 0.3:
			zone[1] = 1
		case u < 0.6:
			zone[2] = 1
		default:
			zone[3] = 1
		}
		row := []float64{temp, rain, pop, res, com, res + com, age, p1, p2, 52.3, metered, billed}
		rows = append(rows, append(row, zone...))
	}
	return waterColumns, rows
}

// feedSplit accumulates rows in blocks of random sizes (1..maxBlock).
func feedSplit(names []string, rows [][]float64, r *rand.Rand, maxBlock int) (*stream.Moments, *stream.QR) {
	m := stream.NewMoments(names)
	q := stream.NewQR(names)
	for len(rows) > 0 {
		k := min(1+r.IntN(maxBlock), len(rows))
		b := stream.NewBlock(len(names), k, false)
		for _, row := range rows[:k] {
			vals, _ := b.AppendRow()
			copy(vals, row)
		}
		m.Add(b)
		q.Add(b)
		rows = rows[k:]
	}
	return m, q
}

// analyzeBoth runs Analyze on both paths and checks that each report
// marshals to JSON (no NaN or ±Inf anywhere).
func analyzeBoth(t *testing.T, m *stream.Moments, q *stream.QR, opt Options) (qr, cp *Report) {
	t.Helper()
	var err error
	qr, err = Analyze(m, q, opt)
	if err != nil {
		t.Fatalf("QR path: %v", err)
	}
	cp, err = Analyze(m, nil, opt)
	if err != nil {
		t.Fatalf("cross-product path: %v", err)
	}
	for _, rep := range []*Report{qr, cp} {
		if _, err := json.Marshal(rep); err != nil {
			t.Fatalf("%s path: report does not marshal: %v", rep.Path, err)
		}
	}
	return qr, cp
}

func colByName(t *testing.T, rep *Report, name string) ColumnReport {
	t.Helper()
	for _, c := range rep.Columns {
		if c.Name == name {
			return c
		}
	}
	t.Fatalf("no column %q in report", name)
	return ColumnReport{}
}

// relErr is |a − b| / max(|a|, |b|), 0 when both are 0.
func relErr(a, b float64) float64 {
	d := math.Abs(a - b)
	if d == 0 {
		return 0
	}
	return d / math.Max(math.Abs(a), math.Abs(b))
}
