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

// window analyzes one district's rows of days [from, to), or every
// district's when district is "".
func window(t *testing.T, rows []Row, district string, from, to int, cols []string) *diagnostics.Report {
	t.Helper()
	m := stream.NewMoments(features)
	q := stream.NewQR(features)
	b := stream.NewBlock(len(features), 64, false)
	for _, r := range rows {
		d := int(r.Day.Sub(Default.Start).Hours() / 24)
		if district != "" && r.District != district || d < from || d >= to {
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

// TestQuietOutsideStories checks that, apart from its stories, the
// scenario is not collinear on the column sets of plumb demo's watches:
// pooled over the districts (a whole-table watch) and within each one.
// VIF 5 is the common-practice "worth a look" level (no source).
func TestQuietOutsideStories(t *testing.T) {
	s := Default
	rows := s.Rows()
	cases := []struct {
		name     string
		cols     []string
		segments []string
		window   int
		to       int // last day (exclusive) of the windows checked
	}{
		// Before the meters converge.
		{"volumes", []string{"temperature_c", "rainfall_mm", "metered_volume_m3", "billed_volume_m3"}, []string{""}, 14, s.RolloutDay - 10},
		// Before the change day.
		{"connections", []string{"residential_connections", "commercial_connections", "total_connections"}, []string{""}, 28, s.ChangeDay},
		// Before the sensor sticks, within each district and pooled.
		{"demand", []string{"temperature_c", "rainfall_mm", "pressure_bar", "metered_volume_m3"}, append([]string{""}, s.Districts...), 28, s.StuckDay},
	}
	for _, c := range cases {
		for _, seg := range c.segments {
			worst := 0.0
			for end := c.window; end <= c.to; end++ {
				rep := window(t, rows, seg, end-c.window, end, c.cols)
				if rep.Rank != len(c.cols)+1 {
					t.Errorf("%s %q days %d-%d: rank %d", c.name, seg, end-c.window, end-1, rep.Rank)
				}
				for _, col := range c.cols {
					worst = max(worst, vifOf(t, rep, col))
				}
			}
			if worst >= 5 {
				t.Errorf("%s %q: max VIF %.3g on a full window before its story; want under 5", c.name, seg, worst)
			}
		}
	}
	// The stories themselves, pooled: the volumes converge and the total
	// becomes exact in the whole table too.
	vols := cases[0].cols
	if v := vifOf(t, window(t, rows, "", s.Days-14, s.Days, vols), "billed_volume_m3"); v < 30 {
		t.Errorf("pooled billed volume VIF %.3g in the last two weeks: want above 30", v)
	}
	if rep := window(t, rows, "", s.ChangeDay, s.ChangeDay+28, cases[1].cols); rep.Rank != 3 {
		t.Errorf("pooled connections after the change: rank %d, want 3 of 4", rep.Rank)
	}
}

// TestDoseStory checks the supply-source story with hand-built indicator
// columns (the base level, reservoir, left out): before DoseDay the
// chlorine dose varies within each source; from it, the dose is the
// source's own, so the design loses one rank; the new source appears only
// from NewSourceDay, in one district.
func TestDoseStory(t *testing.T) {
	s := Default
	rows := s.Rows()
	cols := []string{"blended", "groundwater", "desalinated", "chlorine_mg_l", "temperature_c"}
	fit := func(from, to int) *diagnostics.Report {
		t.Helper()
		m := stream.NewMoments(cols)
		b := stream.NewBlock(len(cols), 64, false)
		for _, r := range rows {
			d := int(r.Day.Sub(s.Start).Hours() / 24)
			if d < from || d >= to {
				continue
			}
			if r.SupplySource == s.NewSource && (d < s.NewSourceDay || r.District != s.NewSourceIn) {
				t.Fatalf("day %d %s: source %s before its day or outside %s", d, r.District, r.SupplySource, s.NewSourceIn)
			}
			vals, _ := b.AppendRow()
			for j, name := range cols[:3] {
				vals[j] = 0
				if r.SupplySource == name {
					vals[j] = 1
				}
			}
			vals[3], vals[4] = r.ChlorineMgL, r.TemperatureC
			if b.Full() {
				m.Add(b)
				b.Reset()
			}
		}
		m.Add(b)
		rep, err := diagnostics.Analyze(m, nil, diagnostics.Options{Columns: cols})
		if err != nil {
			t.Fatal(err)
		}
		return rep
	}
	if rep := fit(s.NewSourceDay-28, s.DoseDay); rep.Rank != 5 {
		t.Errorf("before the dose change: rank %d, want 5 (the desalinated column is empty)", rep.Rank)
	}
	if rep := fit(s.DoseDay-28, s.DoseDay); !(vifOf(t, rep, "chlorine_mg_l") < 5) {
		t.Errorf("before the dose change: chlorine VIF %.3g, want under 5", vifOf(t, rep, "chlorine_mg_l"))
	}
	if rep := fit(s.NewSourceDay, s.Days); rep.Rank != 5 {
		t.Errorf("after the dose change, with the new source: rank %d of 6, want 5 (chlorine fixed by source)", rep.Rank)
	}
}
