package agent

import (
	"math"
	"strings"
	"testing"
	"time"

	"plumb/agent/config"
)

func testLimits() config.Limits {
	return config.Limits{
		VIF:         config.Level{Warn: 5, Critical: 10},
		Condition:   config.Level{Warn: 15, Critical: 30},
		Horizon:     config.Duration(14 * 24 * time.Hour),
		ClearAfter:  3,
		BlindAfter:  3,
		Jump:        3.5,
		TrendPoints: 14,
		// The unit tests judge the condition number with the intercept;
		// the centered default is tested on real data in run_test.go.
		ConditionBasis: config.ConditionIntercept,
	}
}

var day0 = time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)

// clock is a controllable wall clock for the rules: a run an hour after
// each window end.
func runAt(at time.Time) time.Time { return at.Add(time.Hour) }

type stepper struct {
	t     *testing.T
	rules *Rules
	st    *RuleState
	open  map[string]*Alert
	n     int
	// roundTrip stores and reloads the state between steps, as the agent
	// does between runs.
	roundTrip bool
}

func newStepper(t *testing.T, l config.Limits) *stepper {
	st, _ := DecodeRuleState(nil)
	return &stepper{t: t, rules: &Rules{Watch: "district_daily", Limits: l, Bucket: "day"}, st: st, open: map[string]*Alert{}}
}

func (s *stepper) step(o Observation) []Change {
	if o.At.IsZero() {
		o.At = day0.AddDate(0, 0, s.n)
	}
	if o.Day.IsZero() {
		o.Day = o.At
	}
	s.n++
	if math.IsNaN(o.MaxVIF) || o.MaxVIF == 0 {
		o.MaxVIF = 2
	}
	ch := s.rules.Step(s.st, s.open, o, runAt(o.At))
	if s.roundTrip {
		st, err := DecodeRuleState(s.st.Encode())
		if err != nil {
			s.t.Fatal(err)
		}
		s.st = st
	}
	return ch
}

// cond is a full window whose judged condition number is v; the last
// bucket alone has no numbers of its own.
func cond(v float64) Observation {
	return Observation{ConditionNumber: v, CenteredCondition: v, Cond: v, Full: true,
		R2: math.NaN(), BucketCond: math.NaN(), BucketVIF: math.NaN()}
}

func events(ch []Change) string {
	var parts []string
	for _, c := range ch {
		e := c.Event
		if e == "" {
			e = "updated"
		}
		parts = append(parts, string(c.Alert.Rule)+":"+c.Alert.Subject+":"+e+":"+string(c.Alert.Severity))
	}
	return strings.Join(parts, " ")
}

func TestLevelHysteresis(t *testing.T) {
	s := newStepper(t, testLimits())
	// warn 15, critical 30, clear after 3 points under 15.
	want := []string{
		"",                                        // 10
		"level:condition_number:opened:warning",   // 16
		"level:condition_number:updated:warning",  // 20
		"level:condition_number:updated:warning",  // 14 (1 under): the message says so
		"level:condition_number:updated:warning",  // 14 (2 under)
		"level:condition_number:updated:warning",  // 16: the count starts again
		"level:condition_number:updated:warning",  // 14
		"level:condition_number:updated:warning",  // 14
		"level:condition_number:resolved:warning", // 14: third in a row
		"", // 12
	}
	var id string
	for i, v := range []float64{10, 16, 20, 14, 14, 16, 14, 14, 14, 12} {
		got := events(s.step(cond(v)))
		if got != want[i] {
			t.Fatalf("point %d (value %v): %q, want %q", i, v, got, want[i])
		}
		for _, a := range s.open {
			if id == "" {
				id = a.ID
			} else if a.ID != id {
				t.Fatalf("the alert changed identity: %s then %s", id, a.ID)
			}
		}
	}
	if len(s.open) != 0 {
		t.Fatalf("alerts still open: %v", s.open)
	}
}

func TestLevelEscalation(t *testing.T) {
	s := newStepper(t, testLimits())
	got := []string{events(s.step(cond(16))), events(s.step(cond(35))), events(s.step(cond(20))), events(s.step(cond(40)))}
	want := []string{
		"level:condition_number:opened:warning",
		"level:condition_number:escalated:critical",
		"level:condition_number:updated:critical", // no de-escalation while open: no flapping
		"level:condition_number:updated:critical",
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("step %d: %q, want %q", i, got[i], want[i])
		}
	}
	a := s.open[AlertKey(RuleLevel, MetricCondition)]
	// Critical since the second point (2026-06-02).
	if a == nil || !strings.Contains(a.Message, "condition number (with the intercept) 40 is at or above the critical level 30 since 2026-06-02") || a.Detail.Value != 40 {
		t.Fatalf("alert %+v", a)
	}
	if !a.AsOf.Equal(day0) || !a.UpdatedAsOf.Equal(day0.AddDate(0, 0, 3)) {
		t.Errorf("as_of %v, updated_as_of %v", a.AsOf, a.UpdatedAsOf)
	}
}

func TestExactAndConstantAtOnce(t *testing.T) {
	s := newStepper(t, testLimits())
	o := cond(12)
	o.Exact = []ExactDependency{{Dependent: "total_connections", Columns: []string{"total_connections", "residential_connections", "commercial_connections"},
		Equation: "total_connections = 1·residential_connections + 1·commercial_connections + 0"}}
	o.Constant = []ConstantColumn{{Name: "pressure_bar", Value: 3.415}}
	ch := s.step(o)
	if got := events(ch); got != "constant:pressure_bar:opened:critical exact:commercial_connections+residential_connections+total_connections:opened:critical" {
		t.Fatalf("events %q", got)
	}
	for _, c := range ch {
		switch c.Alert.Rule {
		case RuleExact:
			if !strings.Contains(c.Alert.Message, "total_connections = 1·residential_connections + 1·commercial_connections + 0 holds in every day since 2026-06-01") || c.Alert.Detail.Equation == "" {
				t.Errorf("exact message %q", c.Alert.Message)
			}
		case RuleConstant:
			if !strings.Contains(c.Alert.Message, "pressure_bar is constant at 3.415 in every day since 2026-06-01") || c.Alert.Detail.Remedy == "" {
				t.Errorf("constant message %q", c.Alert.Message)
			}
		}
	}
	// The dependency goes away: resolved after 3 points without it.
	for i := 0; i < 2; i++ {
		if got := events(s.step(cond(12))); got != "" {
			t.Fatalf("resolved too early: %q", got)
		}
	}
	if got := events(s.step(cond(12))); !strings.Contains(got, "exact:") || !strings.Contains(got, "resolved") || !strings.Contains(got, "constant:pressure_bar:resolved") {
		t.Fatalf("third point without: %q", got)
	}
}

// drifting returns condition numbers rising by rate per day from start,
// with a fixed small wiggle (deterministic, ±1 %).
func drifting(start, rate float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		wiggle := 1 + 0.01*math.Sin(float64(i)*1.7)
		out[i] = start * math.Pow(1+rate, float64(i)) * wiggle
	}
	return out
}

func TestTrendWarnsBeforeCritical(t *testing.T) {
	l := testLimits()
	l.Condition.Warn = 25 // keep the level rule quiet for most of the rise
	s := newStepper(t, l)
	s.roundTrip = true
	var trendAt, critAt = -1, -1
	var msg string
	for i, v := range drifting(12, 0.08, 20) {
		for _, c := range s.step(cond(v)) {
			if c.Event == EventOpened && c.Alert.Rule == RuleTrend && trendAt < 0 {
				trendAt, msg = i, c.Alert.Message
				if c.Alert.Detail.Forecast == nil || math.Abs(c.Alert.Detail.Forecast.RatePerDay-0.08) > 0.01 {
					t.Errorf("forecast %+v", c.Alert.Detail.Forecast)
				}
			}
			if c.Alert.Rule == RuleLevel && c.Alert.Severity == Critical && critAt < 0 {
				critAt = i
			}
		}
	}
	// 12·1.08^i reaches 30 at i = ln 2.5/ln 1.08 ≈ 11.9 (calculator), so
	// the critical level is crossed at point 12; the horizon is 14 days,
	// so the trend warns as soon as it has 5 points.
	if trendAt < 0 || critAt < 0 || trendAt >= critAt {
		t.Fatalf("trend opened at %d, critical at %d; want the trend first", trendAt, critAt)
	}
	if trendAt != 4 || critAt != 12 {
		t.Errorf("trend at %d, critical at %d; want 4 and 12", trendAt, critAt)
	}
	// At point 4 (2026-06-05) the value is 12·1.08⁴·(1 + 0.01·sin 6.8) =
	// 16.41 and 30 is ln(30/16.41)/ln 1.08 = 7.8 days ahead (calculator);
	// the fitted line, a little under the wiggling value, crosses on
	// 2026-06-13, and Sen's 90 % slope range puts it a day either side.
	if !strings.Contains(msg, "condition number (with the intercept) 16.4 rising ~8%/day: reaches 30 around 2026-06-13, between 2026-06-12 and 2026-06-14") {
		t.Errorf("trend message %q", msg)
	}
}

func TestTrendQuietWhenFlatOrFar(t *testing.T) {
	s := newStepper(t, testLimits())
	for i, v := range drifting(12, 0, 20) {
		if ch := s.step(cond(v)); len(ch) > 0 {
			t.Fatalf("flat series alerted at %d: %s", i, events(ch))
		}
	}
	// Rising 1 %/day from 10: 30 is ln 3/ln 1.01 ≈ 110 days away, beyond
	// the 14-day horizon.
	s = newStepper(t, testLimits())
	for i, v := range drifting(10, 0.01, 20) {
		if ch := s.step(cond(v)); len(ch) > 0 {
			t.Fatalf("slow rise alerted at %d: %s", i, events(ch))
		}
	}
}

func TestJump(t *testing.T) {
	s := newStepper(t, testLimits())
	vals := drifting(8, 0, 10)
	for i, v := range vals {
		if ch := s.step(cond(v)); len(ch) > 0 {
			t.Fatalf("alert before the jump at %d: %s", i, events(ch))
		}
	}
	// +50 %, still under the warn level of 15.
	ch := s.step(cond(vals[9] * 1.5))
	if got := events(ch); got != "jump:condition_number:opened:warning" {
		t.Fatalf("jump: %q", got)
	}
	if !strings.Contains(ch[0].Alert.Message, "jumped from") || !strings.Contains(ch[0].Alert.Message, "(+50%)") {
		t.Errorf("message %q", ch[0].Alert.Message)
	}
	// The new level stays: no new jump, and the alert clears after 3 points.
	v := vals[9] * 1.5
	var resolved bool
	for i := 0; i < 3; i++ {
		for _, c := range s.step(cond(v)) {
			if c.Event == EventResolved {
				resolved = true
			} else if c.Alert.Rule == RuleJump {
				t.Fatalf("a steady level counted as a jump again: %s", events([]Change{c}))
			}
		}
	}
	if !resolved {
		t.Fatal("jump alert did not resolve")
	}
}

// TestJumpBand checks that a jump is judged only from half the warn level
// up to it: the same +50 % near the floor of the metric, or above the warn
// level (where the level rule speaks), opens no jump; a drop from within
// the band does. Levels are the rule's design (warn 15 in testLimits).
func TestJumpBand(t *testing.T) {
	jumps := func(start, factor float64) (string, []Change) {
		t.Helper()
		s := newStepper(t, testLimits())
		vals := drifting(start, 0, 10)
		for _, v := range vals {
			s.step(cond(v))
		}
		ch := s.step(cond(vals[9] * factor))
		var out []Change
		for _, c := range ch {
			if c.Alert.Rule == RuleJump {
				out = append(out, c)
			}
		}
		return events(out), out
	}
	// 3 → 4.5 stays under half the warn level (7.5).
	if got, _ := jumps(3, 1.5); got != "" {
		t.Errorf("a jump near the floor alerted: %s", got)
	}
	// 16 → 24 is above the warn level: the level alert covers it.
	if got, _ := jumps(16, 1.5); got != "" {
		t.Errorf("a jump above the warn level alerted: %s", got)
	}
	// 6 → 9 lands within the band.
	if got, _ := jumps(6, 1.5); got != "jump:condition_number:opened:warning" {
		t.Errorf("a jump into the band: %q", got)
	}
	// 12 → 6: a drop from within the band.
	got, ch := jumps(12, 0.5)
	if got != "jump:condition_number:opened:warning" || !strings.Contains(ch[0].Alert.Message, "dropped from") {
		t.Errorf("a drop from the band: %q", got)
	}
}

func TestBlind(t *testing.T) {
	r := &Rules{Watch: "district_daily", Limits: testLimits()}
	open := map[string]*Alert{}
	now := day0
	for f := 1; f <= 2; f++ {
		if ch := r.Failure(open, f, "connection refused", now); len(ch) != 0 {
			t.Fatalf("blind after %d failures", f)
		}
	}
	ch := r.Failure(open, 3, "connection refused", now)
	if events(ch) != "blind::opened:warning" || !strings.Contains(ch[0].Alert.Message, "last 3 runs failed") {
		t.Fatalf("third failure: %s %q", events(ch), ch[0].Alert.Message)
	}
	if events(r.Failure(open, 4, "timeout", now.Add(time.Hour))) != "blind::updated:warning" {
		t.Fatal("fourth failure should update")
	}
	// Point rules leave the blind alert alone.
	st, _ := DecodeRuleState(nil)
	r.Step(st, open, Observation{At: now, ConditionNumber: 3, MaxVIF: 1}, now)
	if len(open) != 1 {
		t.Fatal("a point resolved the blind alert")
	}
	if events(r.Success(open, now.Add(2*time.Hour))) != "blind::resolved:warning" || len(open) != 0 {
		t.Fatal("success did not resolve")
	}
}

// TestReplayIsDeterministic checks that the same observations give the
// same alerts, ids and data times whether the state stays in memory or
// goes through its stored form between points, and whatever the wall clock.
func TestReplayIsDeterministic(t *testing.T) {
	series := append(drifting(12, 0.08, 16), drifting(40, -0.1, 16)...)
	run := func(roundTrip bool, shift time.Duration) []string {
		s := newStepper(t, testLimits())
		s.roundTrip = roundTrip
		var out []string
		for i, v := range series {
			o := cond(v)
			o.At = day0.AddDate(0, 0, i)
			for _, c := range s.rules.Step(s.st, s.open, o, o.At.Add(shift)) {
				out = append(out, c.Alert.ID+" "+c.Event+" "+c.Alert.AsOf.Format(time.RFC3339)+" "+string(c.Alert.Severity))
			}
			if roundTrip {
				s.st, _ = DecodeRuleState(s.st.Encode())
			}
		}
		return out
	}
	a, b := run(false, time.Hour), run(true, 400*24*time.Hour)
	if strings.Join(a, "\n") != strings.Join(b, "\n") || len(a) == 0 {
		t.Fatalf("replays differ:\n%s\n--\n%s", strings.Join(a, "\n"), strings.Join(b, "\n"))
	}
	// The drift up is one cause: one alert opens as a trend warning,
	// escalates when the critical level is crossed, and resolves on the
	// drift back down.
	joined := strings.Join(a, "\n")
	if strings.Count(joined, " opened ") != 1 || strings.Count(joined, " escalated ") != 1 || strings.Count(joined, " resolved ") != 1 {
		t.Fatalf("events:\n%s", joined)
	}
}

// TestSingularIsOneCause checks that a design made singular by an exact
// dependency and a constant column opens their two alerts and nothing
// else: the level judges the design without them (Cond), not the
// singular whole (ConditionNumber ∞).
func TestSingularIsOneCause(t *testing.T) {
	s := newStepper(t, testLimits())
	o := cond(12)
	o.ConditionNumber, o.CenteredCondition = math.Inf(1), math.Inf(1)
	o.Rank, o.Columns = 8, 10
	o.Exact = []ExactDependency{{Dependent: "total_connections", Columns: []string{"commercial_connections", "residential_connections", "total_connections"},
		Equation: "total_connections = 1·residential_connections + 1·commercial_connections + 0", Onset: day0.AddDate(0, 0, -9)}}
	o.Constant = []ConstantColumn{{Name: "pressure_bar", Value: 4.2, Onset: day0.AddDate(0, 0, -3)}}
	o.LeftOut = []string{"pressure_bar", "total_connections"}
	ch := s.step(o)
	if got := events(ch); got != "constant:pressure_bar:opened:critical exact:commercial_connections+residential_connections+total_connections:opened:critical" {
		t.Fatalf("events %q", got)
	}
	// Onsets come from the bucket history, before the window that shows them.
	for _, c := range ch {
		want := day0.AddDate(0, 0, -9)
		if c.Alert.Rule == RuleConstant {
			want = day0.AddDate(0, 0, -3)
		}
		if !c.Alert.Onset.Equal(want) || len(c.Alert.Columns) == 0 {
			t.Errorf("%s: onset %v columns %v; want onset %v", c.Alert.Rule, c.Alert.Onset, c.Alert.Columns, want)
		}
	}
	// Singular points leave no trace in trends and jumps: a long run of
	// them followed by a regular point opens no jump.
	for i := 0; i < 10; i++ {
		s.step(o)
	}
	for _, c := range s.step(cond(12)) {
		if c.Alert.Rule == RuleJump || c.Alert.Rule == RuleTrend {
			t.Fatalf("a singular history produced %s", events([]Change{c}))
		}
	}
}

// TestWarmUp checks that a window still filling opens nothing, however
// high its numbers, and that the first full window does.
func TestWarmUp(t *testing.T) {
	s := newStepper(t, testLimits())
	for i := 0; i < 6; i++ {
		o := cond(50)
		o.Full = false
		o.Exact = []ExactDependency{{Dependent: "b", Columns: []string{"a", "b"}, Equation: "b = 2·a + 0"}}
		o.Constant = []ConstantColumn{{Name: "c", Value: 1}}
		if ch := s.step(o); len(ch) > 0 {
			t.Fatalf("filling window %d alerted: %s", i, events(ch))
		}
	}
	if got := events(s.step(cond(50))); got != "level:condition_number:opened:critical" {
		t.Fatalf("first full window: %q", got)
	}
}

// TestLevelMessageAgrees checks that a critical alert whose value falls
// says so: critical since when, its peak and day, and where it is now.
func TestLevelMessageAgrees(t *testing.T) {
	s := newStepper(t, testLimits())
	for _, v := range []float64{10, 16, 35, 80, 22} {
		s.step(cond(v))
	}
	a := s.open[AlertKey(RuleLevel, MetricCondition)]
	if a == nil {
		t.Fatal("no level alert")
	}
	// Opened on 06-02 (16), critical from 06-03 (35), peak 80 on 06-04,
	// now 22 on 06-05.
	want := "critical since 2026-06-03, peak condition number (with the intercept) 80 on 2026-06-04; now 22, under the critical level 30 but at or above the warning level 15"
	if a.Message != want || a.Severity != Critical || !a.Onset.Equal(day0.AddDate(0, 0, 1)) {
		t.Fatalf("message %q severity %s onset %v\nwant %q", a.Message, a.Severity, a.Onset, want)
	}
	ch := s.step(cond(12))
	if len(ch) != 1 || !strings.Contains(ch[0].Alert.Message, "now 12, under the warning level 15: resolves after 2 more points under it") {
		t.Fatalf("clearing: %s %+v", events(ch), ch)
	}
	s.step(cond(12))
	ch = s.step(cond(12))
	if events(ch) != "level:condition_number:resolved:critical" ||
		!strings.HasPrefix(ch[0].Alert.Message, "resolved on 2026-06-08: condition number (with the intercept) 12, under the warning level 15 for 3 points; was critical from 2026-06-02, peak 80 on 2026-06-04") {
		t.Fatalf("resolved: %s %q", events(ch), ch[0].Alert.Message)
	}
	if !ch[0].Alert.ResolvedAsOf.Equal(day0.AddDate(0, 0, 7)) {
		t.Errorf("resolved_as_of %v", ch[0].Alert.ResolvedAsOf)
	}
}

// TestExpectedDependency checks that an exact dependency among the columns
// of an expected_dependencies set is not alerted, and that it stopping to
// hold opens a broken alert, which resolves when it holds again.
func TestExpectedDependency(t *testing.T) {
	s := newStepper(t, testLimits())
	s.roundTrip = true
	s.rules.Expected = [][]string{{"total_connections", "residential_connections", "commercial_connections"}}
	dep := ExactDependency{Dependent: "total_connections", Columns: []string{"commercial_connections", "residential_connections", "total_connections"},
		Equation: "total_connections = 1·residential_connections + 1·commercial_connections + 0", Onset: day0}
	with := func() Observation { o := cond(3); o.Exact = []ExactDependency{dep}; return o }
	for i := 0; i < 5; i++ {
		if ch := s.step(with()); len(ch) > 0 {
			t.Fatalf("expected dependency alerted: %s", events(ch))
		}
	}
	ch := s.step(cond(3)) // 2026-06-06: no longer holds
	if events(ch) != "broken:commercial_connections+residential_connections+total_connections:opened:warning" {
		t.Fatalf("break: %s", events(ch))
	}
	if m := ch[0].Alert.Message; !strings.Contains(m, "which held from 2026-06-01, stopped holding on 2026-06-06") || !ch[0].Alert.Onset.Equal(day0.AddDate(0, 0, 5)) {
		t.Errorf("broken alert %q onset %v", m, ch[0].Alert.Onset)
	}
	for i := 0; i < 2; i++ {
		if ch := s.step(cond(3)); len(ch) != 1 || ch[0].Event != "" {
			t.Fatalf("still broken: %s", events(ch))
		}
	}
	var got []string
	for i := 0; i < 3; i++ {
		got = append(got, events(s.step(with())))
	}
	if got[2] != "broken:commercial_connections+residential_connections+total_connections:resolved:warning" {
		t.Fatalf("holding again: %q", got)
	}
	// An undeclared dependency among other columns is alerted as usual.
	o := cond(3)
	o.Exact = []ExactDependency{{Dependent: "billed_volume_m3", Columns: []string{"billed_volume_m3", "metered_volume_m3"}, Equation: "billed_volume_m3 = 1·metered_volume_m3 + 0"}}
	if ch := s.step(o); !strings.Contains(events(ch), "exact:billed_volume_m3+metered_volume_m3:opened:critical") {
		t.Fatalf("undeclared: %s", events(ch))
	}
}

// TestConstantWords: a constant column's value is said as stored, so
// that an owner finds it in the table; a column constant but for
// rounding is said about its mean.
func TestConstantWords(t *testing.T) {
	for _, c := range []struct {
		col  ConstantColumn
		want string
	}{
		{ConstantColumn{Value: 3.415}, "constant at 3.415"},
		{ConstantColumn{Value: 1e9 + 0.1}, "constant at 1000000000.1"},
		{ConstantColumn{Value: -0.0625}, "constant at -0.0625"},
		{ConstantColumn{Value: 0}, "constant at 0"},
		{ConstantColumn{Value: 1e-7}, "constant at 1e-07"},
		{ConstantColumn{Value: 2.5e300}, "constant at 2.5e+300"},
		{ConstantColumn{Value: 3.4150000000000023, Near: true}, "constant but for rounding, at about 3.415"},
	} {
		if got := constantWords(c.col); got != c.want {
			t.Errorf("%+v: %q, want %q", c.col, got, c.want)
		}
	}
}
