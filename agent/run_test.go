package agent_test

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/notify"
	"plumb/agent/sqlstore"
	_ "plumb/connectors/sqlite"
)

type fakeClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *fakeClock) Set(t time.Time) {
	c.mu.Lock()
	c.t = t
	c.mu.Unlock()
}

var start = time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)

// driftSource is a SQLite feature table where billed_volume_m3 drifts
// toward a combination of residential and commercial connections: its
// independent noise shrinks over the first 60 days and grows back over the
// next 30, so its VIF rises from about 2 to about 40 and falls again.
type driftSource struct {
	db  *sql.DB
	rng *rand.Rand
	url string
}

const perDay = 40

func newDriftSource(t *testing.T, dir string) *driftSource {
	t.Helper()
	path := filepath.Join(dir, "features.db")
	db, err := sql.Open("sqlite", "file:"+path+"?mode=rwc&_pragma=busy_timeout(5000)")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	if _, err := db.Exec(`CREATE TABLE district_daily (day TEXT NOT NULL, district TEXT NOT NULL,
		temperature_c REAL, residential_connections REAL, commercial_connections REAL, billed_volume_m3 REAL)`); err != nil {
		t.Fatal(err)
	}
	return &driftSource{db: db, rng: rand.New(rand.NewPCG(7, 11)), url: "sqlite:" + path}
}

// noiseSD is the standard deviation of billed volume's own noise on day d.
// The signal 0.1·residential + 0.3·commercial has variance
// 0.01·500² + 0.09·50² = 2725, so VIF ≈ 1 + 2725/sd² (the R² of billed
// volume on the other two): sd 52 gives about 2, sd 8.4 about 40.
func noiseSD(d int) float64 {
	x := float64(d)
	if d > 60 {
		x = 60 - 2*float64(d-60)
		x = math.Max(x, 0)
	}
	return 52 * math.Pow(8.4/52, x/60)
}

func (s *driftSource) addDay(t *testing.T, d int) {
	t.Helper()
	tx, err := s.db.Begin()
	if err != nil {
		t.Fatal(err)
	}
	day := start.AddDate(0, 0, d).Format(time.DateOnly)
	for i := 0; i < perDay; i++ {
		res := 10000 + 500*s.rng.NormFloat64()
		com := 600 + 50*s.rng.NormFloat64()
		temp := 17 + 4*s.rng.NormFloat64()
		billed := 0.1*res + 0.3*com + noiseSD(d)*s.rng.NormFloat64()
		if _, err := tx.Exec(`INSERT INTO district_daily VALUES (?, ?, ?, ?, ?, ?)`, day, fmt.Sprintf("d%02d", i%4), temp, res, com, billed); err != nil {
			t.Fatal(err)
		}
	}
	if err := tx.Commit(); err != nil {
		t.Fatal(err)
	}
}

// receiver is an httptest webhook endpoint that checks signatures and
// records what it was sent; while down it answers 503.
type receiver struct {
	mu      sync.Mutex
	secret  string
	down    bool
	got     []agent.Notification
	badSigs int
	srv     *httptest.Server
}

func newReceiver(t *testing.T, secret string) *receiver {
	r := &receiver{secret: secret}
	r.srv = httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, req *http.Request) {
		b, _ := io.ReadAll(req.Body)
		r.mu.Lock()
		defer r.mu.Unlock()
		if r.down {
			w.WriteHeader(http.StatusServiceUnavailable)
			return
		}
		if !notify.Verify(r.secret, req.Header.Get(notify.HeaderID), req.Header.Get(notify.HeaderTimestamp), req.Header.Get(notify.HeaderSignature), b) {
			r.badSigs++
			w.WriteHeader(http.StatusUnauthorized)
			return
		}
		var n agent.Notification
		if err := json.Unmarshal(b, &n); err != nil || n.ID != req.Header.Get(notify.HeaderID) {
			w.WriteHeader(http.StatusBadRequest)
			return
		}
		r.got = append(r.got, n)
		w.WriteHeader(http.StatusNoContent)
	}))
	t.Cleanup(r.srv.Close)
	return r
}

func (r *receiver) notifications() []agent.Notification {
	r.mu.Lock()
	defer r.mu.Unlock()
	return slices.Clone(r.got)
}

type harness struct {
	t     *testing.T
	src   *driftSource
	store *sqlstore.Store
	cfg   *config.Config
	clock *fakeClock
	run   *agent.Runner
	del   *agent.Deliverer
	recv  *receiver
}

const driftConfig = `
store: sqlite:%s
sources: {features: "%s"}
notifiers:
  oncall: {webhook: "%s", secret_env: PLUMB_TEST_SECRET}
watches:
  - name: billing
    source: features
    table: district_daily
    columns: [temperature_c, residential_connections, commercial_connections, billed_volume_m3]
    time_column: day
    bucket: day
    window: 7 buckets
    rescan: 2 buckets
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 1000000, critical: 10000000}
      horizon: 14d
    notify: [oncall]
`

func newHarness(t *testing.T) *harness {
	t.Helper()
	dir := t.TempDir()
	h := &harness{t: t, src: newDriftSource(t, dir), recv: newReceiver(t, "hook-secret"), clock: &fakeClock{t: start}}
	statePath := filepath.Join(dir, "state.db")
	cfg, err := config.Parse([]byte(fmt.Sprintf(driftConfig, statePath, h.src.url, h.recv.srv.URL)))
	if err != nil {
		t.Fatal(err)
	}
	if err := cfg.Resolve(config.Resolver{Env: func(k string) (string, bool) { return "hook-secret", k == "PLUMB_TEST_SECRET" }}); err != nil {
		t.Fatal(err)
	}
	h.cfg = cfg
	h.store = openTestStore(t, cfg)
	h.run = &agent.Runner{Store: h.store, Config: cfg, Clock: h.clock}
	h.del = &agent.Deliverer{Store: h.store, Clock: h.clock, Notifiers: map[string]agent.NotifierConfig{
		"oncall": {Notifier: &notify.Webhook{URL: h.recv.srv.URL, Secrets: []string{"hook-secret"}, Now: h.clock.Now}, Timeout: 5 * time.Second, MaxAge: 7 * 24 * time.Hour},
	}}
	return h
}

// liveDay loads day d, runs the watch the morning after and delivers.
func (h *harness) liveDay(d int) *agent.Outcome {
	h.t.Helper()
	h.src.addDay(h.t, d)
	h.clock.Set(start.AddDate(0, 0, d+1).Add(6 * time.Hour))
	out, err := h.run.Run(context.Background(), h.cfg.Watches[0], agent.RunOptions{Kind: agent.RunLive})
	if err != nil {
		h.t.Fatal(err)
	}
	if out.Err != nil {
		h.t.Fatalf("day %d: %v", d, out.Err)
	}
	if _, err := h.del.Once(context.Background()); err != nil {
		h.t.Fatal(err)
	}
	return out
}

type alertKey struct {
	ID, Rule, Subject, Severity string
	AsOf, ResolvedAsOf          time.Time
}

func alertKeys(t *testing.T, s agent.Store) []alertKey {
	t.Helper()
	as, err := s.Alerts(context.Background(), agent.AlertQuery{})
	if err != nil {
		t.Fatal(err)
	}
	var out []alertKey
	for _, a := range as {
		out = append(out, alertKey{a.ID, string(a.Rule), a.Subject, string(a.Severity), a.AsOf, a.ResolvedAsOf})
	}
	return out
}

func TestDriftScenario(t *testing.T) {
	h := newHarness(t)
	var firstTrend, firstCritical = -1, -1
	for d := 0; d < 100; d++ {
		out := h.liveDay(d)
		for _, a := range out.Open {
			if a.Rule == agent.RuleTrend && firstTrend < 0 {
				firstTrend = d
			}
			if a.Rule == agent.RuleLevel && a.Severity == agent.Critical && firstCritical < 0 {
				firstCritical = d
			}
		}
	}
	if firstTrend < 0 || firstCritical < 0 || firstTrend >= firstCritical {
		t.Fatalf("trend first open on day %d, critical on day %d: want the trend first", firstTrend, firstCritical)
	}
	// One cause, one alert: it opened as the trend warning, became the
	// critical level alert, and resolved when the drift reversed.
	keys := alertKeys(t, h.store)
	if len(keys) != 1 || keys[0].Severity != "critical" || keys[0].ResolvedAsOf.IsZero() {
		t.Fatalf("alerts %+v: want one, critical, resolved", keys)
	}
	level := keys
	if as, _ := h.store.Alerts(context.Background(), agent.AlertQuery{OpenOnly: true}); len(as) != 0 {
		t.Errorf("alerts still open after the drift reversed: %+v", as)
	}
	// The receiver heard each event once: the alert opened, escalated once
	// and resolved.
	seen := map[string]int{}
	var levelEvents []string
	for _, n := range h.recv.notifications() {
		seen[n.ID]++
		if n.AlertID == level[0].ID {
			levelEvents = append(levelEvents, n.Event+":"+string(n.Severity))
		}
	}
	for id, c := range seen {
		if c != 1 {
			t.Errorf("event %s delivered %d times", id, c)
		}
	}
	if strings.Join(levelEvents, " ") != "opened:warning escalated:critical resolved:critical" {
		t.Errorf("level alert events %v", levelEvents)
	}
	if h.recv.badSigs != 0 {
		t.Errorf("%d requests with a bad signature", h.recv.badSigs)
	}
	t.Logf("trend opened on day %d, critical on day %d; %d alerts, %d notifications", firstTrend, firstCritical, len(keys), len(seen))
}

func TestIncrementalReadsLess(t *testing.T) {
	h := newHarness(t)
	for d := 0; d < 30; d++ {
		h.src.addDay(t, d)
	}
	h.clock.Set(start.AddDate(0, 0, 30).Add(6 * time.Hour))
	ctx := context.Background()
	first, err := h.run.Run(ctx, h.cfg.Watches[0], agent.RunOptions{})
	if err != nil || first.Err != nil {
		t.Fatal(err, first.Err)
	}
	if first.Run.RowsRead != 30*perDay || first.Run.BucketsScanned != 30 || first.Run.Points != 30 {
		t.Fatalf("first run %+v: want the whole history, 30 buckets", first.Run)
	}
	h.src.addDay(t, 30)
	h.clock.Set(start.AddDate(0, 0, 31).Add(6 * time.Hour))
	next, err := h.run.Run(ctx, h.cfg.Watches[0], agent.RunOptions{})
	if err != nil || next.Err != nil {
		t.Fatal(err, next.Err)
	}
	// rescan 2 buckets: the newest stored bucket (day 29) and the one
	// before (day 28) are rescanned, with the new day 30; the time filter
	// starts two days earlier still (day 26, its safety margin), so days
	// 26–30 are read: 5·40 rows instead of 31·40.
	if next.Run.RowsRead != 5*perDay || next.Run.BucketsScanned != 3 || next.Run.Points != 3 {
		t.Fatalf("incremental run %+v: want 200 rows, 3 buckets, 3 points", next.Run)
	}
	ps, err := h.store.Points(ctx, "billing", agent.PointQuery{})
	if err != nil || len(ps) != 31 {
		t.Fatalf("history has %d points, %v; want 31", len(ps), err)
	}
	for i, p := range ps {
		if want := start.AddDate(0, 0, i+1); !p.At.Equal(want) {
			t.Fatalf("point %d at %s, want %s", i, p.At, want)
		}
		// window: 7 buckets of 40 rows (fewer at the start).
		if want := int64(min(i+1, 7) * perDay); p.RowsUsed != want {
			t.Fatalf("point %d has %d rows, want %d", i, p.RowsUsed, want)
		}
	}
}

func TestBackfillMatchesLive(t *testing.T) {
	const days = 70
	live := newHarness(t)
	for d := 0; d < days; d++ {
		live.liveDay(d)
	}
	back := newHarness(t)
	for d := 0; d < days; d++ {
		back.src.addDay(t, d)
	}
	back.clock.Set(start.AddDate(0, 0, days).Add(6 * time.Hour))
	ctx := context.Background()
	out, err := back.run.Run(ctx, back.cfg.Watches[0], agent.RunOptions{Kind: agent.RunBackfill})
	if err != nil || out.Err != nil {
		t.Fatal(err, out.Err)
	}
	a, b := alertKeys(t, live.store), alertKeys(t, back.store)
	if len(a) == 0 || !slices.Equal(a, b) {
		t.Fatalf("live alerts\n%+v\nbackfill alerts\n%+v", a, b)
	}
	// The backfill delivered nothing ...
	if _, err := back.del.Once(ctx); err != nil {
		t.Fatal(err)
	}
	if n := back.recv.notifications(); len(n) != 0 {
		t.Fatalf("backfill delivered %d notifications", len(n))
	}
	// ... and the next live run delivers the alerts still open, once each.
	var open []string
	for _, k := range b {
		if k.ResolvedAsOf.IsZero() {
			open = append(open, k.ID)
		}
	}
	if len(open) == 0 {
		t.Fatal("the scenario has no open alert at day 70")
	}
	for i := 0; i < 2; i++ {
		back.clock.Set(back.clock.Now().Add(time.Hour))
		if out, err := back.run.Run(ctx, back.cfg.Watches[0], agent.RunOptions{Kind: agent.RunCheck}); err != nil || out.Err != nil {
			t.Fatal(err, out.Err)
		}
		if _, err := back.del.Once(ctx); err != nil {
			t.Fatal(err)
		}
	}
	var got []string
	for _, n := range back.recv.notifications() {
		if n.Event != agent.EventOpened {
			t.Errorf("unexpected %s event for %s", n.Event, n.AlertID)
		}
		got = append(got, n.AlertID)
	}
	slices.Sort(got)
	slices.Sort(open)
	if !slices.Equal(got, open) {
		t.Fatalf("delivered openings %v, want each open alert once: %v", got, open)
	}
	// A backfill of the last 20 days recomputes them and finds the same alerts.
	out, err = back.run.Run(ctx, back.cfg.Watches[0], agent.RunOptions{Kind: agent.RunBackfill, From: start.AddDate(0, 0, days-20)})
	if err != nil || out.Err != nil {
		t.Fatal(err, out.Err)
	}
	if out.Run.BucketsScanned != 20 {
		t.Errorf("partial backfill scanned %d buckets, want 20", out.Run.BucketsScanned)
	}
	if c := alertKeys(t, back.store); !slices.Equal(a, c) {
		t.Fatalf("after a partial backfill\n%+v\nwant\n%+v", c, a)
	}
}

func TestReceiverDownNothingLost(t *testing.T) {
	h := newHarness(t)
	h.del.Notifiers["oncall"] = agent.NotifierConfig{Notifier: h.del.Notifiers["oncall"].Notifier, Timeout: 5 * time.Second, MaxAge: 60 * 24 * time.Hour}
	for d := 0; d < 100; d++ {
		h.recv.mu.Lock()
		h.recv.down = d >= 20 && d < 50
		h.recv.mu.Unlock()
		h.liveDay(d)
	}
	ob, err := h.store.Outbox(context.Background(), "")
	if err != nil {
		t.Fatal(err)
	}
	var retried int
	want := map[string]bool{}
	for _, e := range ob {
		want[e.EventID] = true
		if e.DeliveredAt.IsZero() {
			t.Errorf("event %s not delivered (attempts %d, last error %s)", e.EventID, e.Attempts, e.LastError)
		}
		if e.Attempts > 1 {
			retried++
		}
	}
	if retried == 0 {
		t.Fatal("no delivery needed a retry: the outage did not happen")
	}
	got := map[string]int{}
	for _, n := range h.recv.notifications() {
		got[n.ID]++
	}
	for id := range want {
		if got[id] != 1 {
			t.Errorf("event %s received %d times", id, got[id])
		}
	}
	if len(got) != len(want) {
		t.Errorf("received %d events, outbox has %d", len(got), len(want))
	}
}

func TestFailingSourceGoesBlind(t *testing.T) {
	h := newHarness(t)
	for d := 0; d < 10; d++ {
		h.liveDay(d)
	}
	ctx := context.Background()
	if _, err := h.src.db.Exec(`ALTER TABLE district_daily RENAME TO district_daily_old`); err != nil {
		t.Fatal(err)
	}
	for i := 1; i <= 4; i++ {
		h.clock.Set(h.clock.Now().Add(24 * time.Hour))
		out, err := h.run.Run(ctx, h.cfg.Watches[0], agent.RunOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if out.Err == nil || out.Run.Status != agent.StatusFailed || !strings.Contains(out.Run.Error, "district_daily") {
			t.Fatalf("failure %d: %+v", i, out.Run)
		}
		blind := slices.ContainsFunc(out.Open, func(a agent.Alert) bool { return a.Rule == agent.RuleBlind })
		if blind != (i >= 3) {
			t.Fatalf("after %d failures blind=%v", i, blind)
		}
		h.del.Once(ctx)
	}
	if _, err := h.src.db.Exec(`ALTER TABLE district_daily_old RENAME TO district_daily`); err != nil {
		t.Fatal(err)
	}
	out := h.liveDay(10)
	if slices.ContainsFunc(out.Open, func(a agent.Alert) bool { return a.Rule == agent.RuleBlind }) {
		t.Fatal("blind alert still open after a good run")
	}
	var events []string
	for _, n := range h.recv.notifications() {
		if n.Rule == agent.RuleBlind {
			events = append(events, n.Event)
		}
	}
	if strings.Join(events, ",") != "opened,resolved" {
		t.Fatalf("blind events %v", events)
	}
	runs, _ := h.store.Runs(ctx, "billing", 0)
	failed := 0
	for _, r := range runs {
		if r.Status == agent.StatusFailed {
			failed++
		}
	}
	if failed != 4 {
		t.Fatalf("%d failed runs recorded, want 4", failed)
	}
}

// openTestStore opens and migrates cfg's state store, closed when the
// test ends.
func openTestStore(t *testing.T, cfg *config.Config) *sqlstore.Store {
	t.Helper()
	st, err := sqlstore.Open(context.Background(), cfg.StoreURL(), sqlstore.Options{Migrate: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	return st
}
