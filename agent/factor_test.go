package agent_test

import (
	"context"
	"database/sql"
	"encoding/json"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/demo"
	"plumb/diagnostics"
)

// factorWatch watches the demo scenario's supply sources beside numeric
// columns, pooled over the districts, in 28-day windows.
const factorWatch = `  - name: supply
    source: features
    table: district_daily
    columns: [supply_source, chlorine_mg_l, temperature_c, rainfall_mm]
    time_column: day
    bucket: day
    window: 28 buckets
`

// TestFactorWatch: a watch with a categorical column on plumb's own
// scenario (generated data; the expectations are the scenario's design,
// see agent/demo). The supply source comes to fix the chlorine dose on
// DoseDay: one exact alert, dated to that day and said in words; the new
// source that appears on NewSourceDay is no alert, and windows without it
// report it absent rather than as a constant column; every point carries
// the factor's GVIF.
func TestFactorWatch(t *testing.T) {
	dir := t.TempDir()
	sc := demo.Default
	path := filepath.Join(dir, "districts.db")
	if err := sc.WriteSQLite(context.Background(), path); err != nil {
		t.Fatal(err)
	}
	w := newWatcher(t, dir, "sqlite:"+path, factorWatch)
	w.clock.Set(sc.Start.AddDate(0, 0, sc.Days+1))
	out, err := w.run.Run(context.Background(), w.cfg.Watches[0], agent.RunOptions{Kind: agent.RunBackfill})
	if err != nil || out.Err != nil {
		t.Fatalf("backfill: %v %v", err, out.Err)
	}
	as := w.alerts(t, "supply")
	day := func(at time.Time) int { return int(at.Sub(sc.Start).Hours() / 24) }
	var exact []agent.Alert
	for _, a := range as {
		t.Logf("%s %s day %d onset day %d: %s", a.Rule, a.Severity, day(a.AsOf), day(a.Onset), a.Message)
		switch a.Rule {
		case agent.RuleExact:
			exact = append(exact, a)
		case agent.RuleConstant:
			t.Errorf("constant alert %q: an absent level is not a constant column", a.Subject)
		default:
			t.Errorf("unexpected %s alert: %s", a.Rule, a.Message)
		}
	}
	if len(exact) != 1 {
		t.Fatalf("%d exact alerts, want 1 (the dose fixed by the source)", len(exact))
	}
	e := exact[0]
	if day(e.Onset) != sc.DoseDay {
		t.Errorf("exact alert dated day %d, want the dose change on day %d", day(e.Onset), sc.DoseDay)
	}
	if !strings.Contains(e.Message, "supply_source determines chlorine_mg_l") || e.Detail.Words == "" ||
		!strings.Contains(e.Detail.Remedy, "supply_source") {
		t.Errorf("exact alert not said in words: %q; remedy %q", e.Message, e.Detail.Remedy)
	}

	ps, err := w.store.Points(context.Background(), "supply", agent.PointQuery{})
	if err != nil {
		t.Fatal(err)
	}
	sawAbsent, sawNew := false, false
	for _, p := range ps {
		var rep diagnostics.Report
		if err := json.Unmarshal(p.Report, &rep); err != nil {
			t.Fatal(err)
		}
		var g *diagnostics.GroupReport
		for i := range rep.GVIF {
			if rep.GVIF[i].Name == "supply_source" && rep.GVIF[i].Kind == diagnostics.GroupFactor {
				g = &rep.GVIF[i]
			}
		}
		if g == nil {
			t.Fatalf("point %s: no GVIF of supply_source", p.At)
		}
		d := day(p.At)
		if d < sc.DoseDay && (g.GVIF == nil || *g.GVIF < 1 || *g.GVIF > 5) {
			t.Errorf("day %d: GVIF %v before the dose change, want defined and under 5", d, g.GVIF)
		}
		for _, a := range g.Absent {
			if a == sc.NewSource {
				sawAbsent = true
			}
		}
		for _, l := range g.Levels {
			if l == sc.NewSource {
				sawNew = true
				if d < sc.NewSourceDay {
					t.Errorf("day %d: %s present before day %d", d, sc.NewSource, sc.NewSourceDay)
				}
			}
		}
	}
	if !sawNew {
		t.Errorf("the new source never appears among the levels")
	}
	_ = sawAbsent // windows before the new source know nothing of it; see below
}

// TestFactorWatchLive runs the same watch day by day, per district, as
// rows arrive: the new source, which only harbour receives, is known to
// every district's series from the day it appears and reported absent
// where it is missing, never as a constant column; the whole table raises
// one exact alert dated to the dose change.
func TestFactorWatchLive(t *testing.T) {
	dir := t.TempDir()
	sc := demo.Default
	src := filepath.Join(dir, "all.db")
	if err := sc.WriteSQLite(context.Background(), src); err != nil {
		t.Fatal(err)
	}
	db, err := sql.Open("sqlite", "file:"+filepath.Join(dir, "districts.db")+"?mode=rwc")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	db.SetMaxOpenConns(1)
	if _, err := db.Exec(`ATTACH DATABASE ? AS src`, "file:"+src+"?mode=ro"); err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec(`CREATE TABLE district_daily AS SELECT * FROM src.district_daily WHERE 0`); err != nil {
		t.Fatal(err)
	}
	w := newWatcher(t, dir, "sqlite:"+filepath.Join(dir, "districts.db"), factorWatch+"    segment_by: district\n")
	for d := 0; d < sc.Days; d++ {
		day := sc.Start.AddDate(0, 0, d).Format(time.DateOnly)
		if _, err := db.Exec(`INSERT INTO district_daily SELECT * FROM src.district_daily WHERE day = ?`, day); err != nil {
			t.Fatal(err)
		}
		w.clock.Set(sc.Start.AddDate(0, 0, d+1).Add(6 * time.Hour))
		out, err := w.run.Run(context.Background(), w.cfg.Watches[0], agent.RunOptions{Kind: agent.RunLive})
		if err != nil || out.Err != nil {
			t.Fatalf("day %d: %v %v", d, err, out.Err)
		}
	}
	day := func(at time.Time) int { return int(at.Sub(sc.Start).Hours() / 24) }
	exact := map[string]int{}
	for _, a := range w.alerts(t, "supply") {
		t.Logf("segment %q: %s %s day %d: %s", a.Segment, a.Rule, a.Severity, day(a.AsOf), a.Message)
		if a.Rule == agent.RuleConstant {
			t.Errorf("segment %q: constant alert %q: an absent level is not a constant column", a.Segment, a.Subject)
		}
		if a.Rule != agent.RuleExact {
			// A district has one row a day: its 28-day windows hold the
			// dose change only in part by the table's last day, and see
			// the dose grow dependent on the source.
			if a.Segment == "" || day(a.AsOf) <= sc.DoseDay {
				t.Errorf("segment %q: unexpected %s alert on day %d: %s", a.Segment, a.Rule, day(a.AsOf), a.Message)
			}
			continue
		}
		exact[a.Segment]++
		if day(a.Onset) != sc.DoseDay || !strings.Contains(a.Message, "supply_source determines chlorine_mg_l") {
			t.Errorf("segment %q: exact alert dated day %d (want %d): %s", a.Segment, day(a.Onset), sc.DoseDay, a.Message)
		}
	}
	if len(exact) != 1 || exact[""] != 1 {
		t.Errorf("exact alerts by segment %v: want one, for the whole table (a district's window is not yet wholly after the change)", exact)
	}
	ps, err := w.store.Points(context.Background(), "supply", agent.PointQuery{AllSegs: true})
	if err != nil {
		t.Fatal(err)
	}
	absent := 0
	for _, p := range ps {
		var rep diagnostics.Report
		if err := json.Unmarshal(p.Report, &rep); err != nil {
			t.Fatal(err)
		}
		for _, g := range rep.GVIF {
			if g.Name != "supply_source" || !slices.Contains(g.Absent, sc.NewSource) {
				continue
			}
			if day(p.At) <= sc.NewSourceDay {
				t.Errorf("%s segment %q: %s absent before it first appeared", p.At, p.Segment, sc.NewSource)
			}
			absent++
		}
	}
	if absent == 0 {
		t.Errorf("no point reports %s absent, though only %s receives it", sc.NewSource, sc.NewSourceIn)
	}
	t.Logf("%d points report %s absent", absent, sc.NewSource)
}
