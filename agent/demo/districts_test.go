package demo

import (
	"context"
	"database/sql"
	"path/filepath"
	"testing"

	"plumb/diagnostics"
	"plumb/stream"
)

// The scenario's three stories, checked through plumb's own diagnostics.
// The thresholds are the scenario's design, not reference values: VIF 10
// is the common-practice "serious" level (no source).

var features = []string{
	"temperature_c", "rainfall_mm", "population_served", "residential_connections",
	"commercial_connections", "total_connections", "pipe_age_years", "pressure_bar",
	"metered_volume_m3", "billed_volume_m3",
}

func rowValues(r Row) []float64 {
	return []float64{r.TemperatureC, r.RainfallMM, float64(r.PopulationServed), float64(r.ResidentialConnections),
		float64(r.CommercialConnections), float64(r.TotalConnections), r.PipeAgeYears, r.PressureBar,
		r.MeteredVolumeM3, r.BilledVolumeM3}
}

// window analyzes one district's rows of days [from, to).
func window(t *testing.T, rows []Row, district string, from, to int, cols []string) *diagnostics.Report {
	t.Helper()
	m := stream.NewMoments(features)
	q := stream.NewQR(features)
	b := stream.NewBlock(len(features), 64, false)
	for _, r := range rows {
		d := int(r.Day.Sub(Default.Start).Hours() / 24)
		if r.District != district || d < from || d >= to {
			continue
		}
		vals, _ := b.AppendRow()
		copy(vals, rowValues(r))
	}
	m.Add(b)
	q.Add(b)
	rep, err := diagnostics.Analyze(m, q, diagnostics.Options{Columns: cols})
	if err != nil {
		t.Fatal(err)
	}
	return rep
}

func vifOf(t *testing.T, rep *diagnostics.Report, name string) float64 {
	t.Helper()
	for _, c := range rep.Columns {
		if c.Name == name {
			if c.VIF == nil {
				t.Fatalf("%s: VIF undefined (%s)", name, c.Undefined)
			}
			return *c.VIF
		}
	}
	t.Fatalf("no column %s", name)
	return 0
}

func TestStories(t *testing.T) {
	s := Default
	rows := s.Rows()
	if len(rows) != s.Days*len(s.Districts) {
		t.Fatalf("%d rows", len(rows))
	}
	volumes := []string{"temperature_c", "rainfall_mm", "population_served", "metered_volume_m3", "billed_volume_m3"}
	for _, d := range s.Districts {
		early := vifOf(t, window(t, rows, d, 0, 28, volumes), "billed_volume_m3")
		late := vifOf(t, window(t, rows, d, s.Days-28, s.Days, volumes), "billed_volume_m3")
		if early > 5 || late < 10*early || late < 30 {
			t.Errorf("%s: billed volume VIF %.3g in the first four weeks, %.3g in the last: want low, then above 30", d, early, late)
		}
	}
	conns := []string{"residential_connections", "commercial_connections", "total_connections", "temperature_c"}
	before := window(t, rows, s.Districts[0], s.ChangeDay-28, s.ChangeDay, conns)
	after := window(t, rows, s.Districts[0], s.ChangeDay, s.Days, conns)
	if before.Rank != 5 || after.Rank != 4 {
		t.Errorf("rank %d before the change, %d after: want 5 then 4", before.Rank, after.Rank)
	}
	stuck := window(t, rows, s.StuckDistrict, s.StuckDay, s.Days, features)
	for _, c := range stuck.Columns {
		if c.Name == "pressure_bar" && !c.Constant {
			t.Errorf("%s pressure after day %d: not reported constant", s.StuckDistrict, s.StuckDay)
		}
	}
}

func TestWriteSQLite(t *testing.T) {
	path := filepath.Join(t.TempDir(), "d.db")
	if err := Default.WriteSQLite(context.Background(), path); err != nil {
		t.Fatal(err)
	}
	if err := Default.WriteSQLite(context.Background(), path); err == nil {
		t.Error("writing over an existing demo table succeeded")
	}
	db, err := sql.Open("sqlite", "file:"+path+"?mode=ro")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var n int
	var sum float64
	if err := db.QueryRow("SELECT count(*), sum(demand_m3) FROM "+Table).Scan(&n, &sum); err != nil {
		t.Fatal(err)
	}
	want := 0.0
	for _, r := range Default.Rows() {
		want += r.DemandM3
	}
	if n != Default.Days*len(Default.Districts) || sum-want > 1e-6*want || want-sum > 1e-6*want {
		t.Errorf("%d rows, demand sum %v; want %d and %v", n, sum, Default.Days*len(Default.Districts), want)
	}
}
