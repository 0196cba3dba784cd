package agent

import (
	"encoding/json"
	"strings"
	"testing"
	"time"

	"plumb/agent/config"
	"plumb/diagnostics"
)

func TestHeadline(t *testing.T) {
	onset := time.Date(2026, 8, 10, 0, 0, 0, 0, time.UTC)
	asOf := onset.AddDate(0, 0, 7)
	exact := func(eq string) *Alert {
		return &Alert{Watch: "district_daily", Rule: RuleExact, Severity: Critical, AsOf: asOf, Onset: onset,
			Detail: AlertDetail{Equation: eq}}
	}
	for _, c := range []struct {
		a     *Alert
		event string
		want  string
	}{
		{exact("total_connections = 1·residential_connections + 1·commercial_connections + 0"), EventOpened,
			"district_daily: total_connections became the exact sum of two columns since 2026-08-10"},
		{exact("billed_volume_m3 = 1·metered_volume_m3 + 0"), EventOpened,
			"district_daily: billed_volume_m3 became an exact copy of metered_volume_m3 since 2026-08-10"},
		{exact("pressure_kpa = 100·pressure_bar + 0"), EventOpened,
			"district_daily: pressure_kpa became an exact multiple of pressure_bar since 2026-08-10"},
		{exact("temperature_f = 1.8·temperature_c + 32"), EventOpened,
			"district_daily: temperature_f became an exact linear function of temperature_c since 2026-08-10"},
		{exact("d = 2·a - 1·b + 4"), EventOpened,
			"district_daily: d became an exact linear combination of two columns since 2026-08-10"},
		{exact("total_connections = 1·residential_connections + 1·commercial_connections + 0"), EventResolved,
			"district_daily: total_connections became the exact sum of two columns since 2026-08-10; resolved"},
		{&Alert{Watch: "district_daily", Segment: "harbour", Rule: RuleConstant, Severity: Critical, AsOf: asOf,
			Columns: []string{"pressure_bar"}}, EventOpened,
			"district_daily (harbour): pressure_bar stopped varying since 2026-08-17"},
		{&Alert{Watch: "district_daily", Rule: RuleLevel, Severity: Critical, AsOf: asOf, Onset: onset,
			Columns: []string{"billed_volume_m3", "metered_volume_m3"}, Detail: AlertDetail{Metric: MetricMaxVIF, Limit: 10}}, EventEscalated,
			"district_daily: max VIF (billed_volume_m3) at or above the critical level 10 since 2026-08-10; now critical"},
		{&Alert{Watch: "district_daily", Rule: RuleTrend, Severity: Warning, AsOf: asOf,
			Detail: AlertDetail{Metric: MetricMaxVIF, Forecast: &Forecast{RatePerDay: 0.08, Limit: 10, Crossing: time.Date(2026, 8, 24, 0, 0, 0, 0, time.UTC)}}}, EventOpened,
			"district_daily: max VIF rising ~8%/day, forecast to reach 10 around 2026-08-24"},
		{&Alert{Watch: "district_daily", Rule: RuleLevel, Severity: Warning, AsOf: time.Date(2026, 8, 17, 6, 0, 0, 0, time.UTC),
			Detail: AlertDetail{Metric: MetricCentered, Limit: 15}}, EventSnoozeEnded,
			"district_daily: centered condition number at or above the warning level 15 since 2026-08-17 06:00 UTC; still open after the snooze"},
	} {
		if got := Headline(c.a, c.event); got != c.want {
			t.Errorf("got  %q\nwant %q", got, c.want)
		}
	}
	lv := &Alert{Watch: "district_daily", Rule: RuleLevel, Severity: Critical, AsOf: asOf, Onset: onset, ResolvedAsOf: onset.AddDate(0, 0, 30),
		Detail: AlertDetail{Metric: MetricMaxVIF, Limit: 5}}
	if got := Headline(lv, EventResolved); got != "district_daily: max VIF at critical level since 2026-08-10; resolved as of 2026-09-09" {
		t.Errorf("resolved level: %q", got)
	}
	resolved := exact("total_connections = 1·residential_connections + 1·commercial_connections + 0")
	resolved.ResolvedAsOf = onset.AddDate(0, 0, 30)
	if got := Headline(resolved, EventResolved); !strings.HasSuffix(got, "; resolved as of 2026-09-09") {
		t.Errorf("resolved: %q", got)
	}
}

func TestNotificationContent(t *testing.T) {
	onset := time.Date(2026, 8, 10, 0, 0, 0, 0, time.UTC)
	now := time.Date(2026, 8, 18, 6, 15, 3, 0, time.UTC)
	w := &config.Watch{Name: "district_daily", Source: "warehouse", Table: "ops.district_daily", Notify: []string{"oncall"}}
	e := newEvaluation(&Runner{Config: &config.Config{PublicURL: "https://plumb.example.org/water/"}}, w, RunOptions{Kind: RunLive}, nil, nil)
	a := &Alert{ID: "a1", Watch: "district_daily", Segment: "harbour east", Rule: RuleLevel, Subject: MetricMaxVIF, Severity: Critical,
		AsOf: onset.AddDate(0, 0, 3), OpenedAt: now, Onset: onset, Message: "max VIF 14 is at or above the critical level 10",
		Columns: []string{"billed_volume_m3", "metered_volume_m3"},
		Drivers: []diagnostics.Driver{{Column: "metered_volume_m3", Share: 0.93}},
		Window:  &AlertWindow{Start: onset.AddDate(0, 0, -4), End: onset.AddDate(0, 0, 3), Rows: 196},
		Detail:  AlertDetail{Metric: MetricMaxVIF, Value: 14, Limit: 10, Remedy: "consider dropping or combining billed_volume_m3"}}
	raw, err := json.Marshal(e.notification(a, EventOpened, now))
	if err != nil {
		t.Fatal(err)
	}
	var got map[string]any
	json.Unmarshal(raw, &got)
	want := map[string]any{
		"summary":        "district_daily (harbour east): max VIF (billed_volume_m3) at or above the critical level 10 since 2026-08-10",
		"segment":        "harbour east",
		"onset":          "2026-08-10T00:00:00Z",
		"as_of":          "2026-08-13T00:00:00Z",
		"resolved_as_of": nil,
		"recorded_at":    "2026-08-18T06:15:03Z",
		"url":            "https://plumb.example.org/water/watches/district_daily?segment=harbour+east",
		"caution":        CautionGovernance,
		"remedy":         "consider dropping or combining billed_volume_m3; " + CautionOmitted,
	}
	for k, v := range want {
		if got[k] != v {
			t.Errorf("%s = %#v, want %#v", k, got[k], v)
		}
	}
	win, _ := got["window"].(map[string]any)
	if win["start"] != "2026-08-06T00:00:00Z" || win["end"] != "2026-08-13T00:00:00Z" || win["rows"] != 196.0 {
		t.Errorf("window %v", got["window"])
	}
	if d, _ := got["drivers"].([]any); len(d) != 1 || d[0].(map[string]any)["column"] != "metered_volume_m3" {
		t.Errorf("drivers %v", got["drivers"])
	}
	if c, _ := got["columns"].([]any); len(c) != 2 {
		t.Errorf("columns %v", got["columns"])
	}
	// Wall-clock opening and resolution times are not in the body.
	for _, k := range []string{"opened_at", "resolved_at"} {
		if _, ok := got[k]; ok {
			t.Errorf("%s in the body: wall clock only as recorded_at", k)
		}
	}
	// Without public_url there is no link; a remedy that already carries
	// the caution is left alone; an alert without columns has [] not null.
	e.r.Config.PublicURL = ""
	a.Detail.Remedy = "drop one of them; " + CautionOmitted
	a.Columns = nil
	n := e.notification(a, EventOpened, now)
	if n.URL != "" || n.Remedy != a.Detail.Remedy || n.Columns == nil {
		t.Errorf("url %q remedy %q columns %v", n.URL, n.Remedy, n.Columns)
	}
}
