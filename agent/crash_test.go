package agent_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/sqlstore"
)

// crashChild runs 20 runs against the given store and source, alternating
// live runs and backfills from a random day, as fast as it can. The parent
// kills it with SIGKILL somewhere in the middle.
func crashChild(dir string) {
	ctx := context.Background()
	cfg, err := config.Load(filepath.Join(dir, "plumb.yaml"))
	if err != nil {
		fmt.Println(err)
		os.Exit(1)
	}
	st, err := sqlstore.Open(ctx, cfg.StoreURL(), sqlstore.Options{Migrate: true})
	if err != nil {
		fmt.Println(err)
		os.Exit(1)
	}
	release, err := st.Lock(ctx, "crash child")
	if err != nil {
		fmt.Println(err)
		os.Exit(1)
	}
	defer release()
	fmt.Println("started")
	r := &agent.Runner{Store: st, Config: cfg}
	rng := rand.New(rand.NewPCG(uint64(os.Getpid()), 3))
	for i := 0; i < 20; i++ {
		opt := agent.RunOptions{Kind: agent.RunLive}
		if i%2 == 1 {
			opt = agent.RunOptions{Kind: agent.RunBackfill, From: start.AddDate(0, 0, rng.IntN(40))}
		}
		if _, err := r.Run(ctx, cfg.Watches[0], opt); err != nil {
			fmt.Println(err)
			os.Exit(1)
		}
	}
	os.Exit(0)
}

func TestCrashLeavesNoPartialRun(t *testing.T) {
	if dir := os.Getenv("PLUMB_CRASH_CHILD"); dir != "" {
		crashChild(dir)
		return
	}
	if testing.Short() {
		t.Skip("crash test: several subprocesses")
	}
	h := newHarness(t)
	for d := 0; d < 40; d++ {
		h.src.addDay(t, d)
	}
	dir := t.TempDir()
	statePath := filepath.Join(dir, "state.db")
	cfgText := fmt.Sprintf(driftConfig, statePath, h.src.url, h.recv.srv.URL)
	if err := os.WriteFile(filepath.Join(dir, "plumb.yaml"), []byte(cfgText), 0o600); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(20261202, 1))
	kills := 0
	// Round 0 runs to the end, to learn how long 20 runs take here; the
	// next 20 rounds are each killed at a random point of that span.
	var span time.Duration
	for round := 0; round <= 20; round++ {
		cmd := exec.Command(os.Args[0], "-test.run=^TestCrashLeavesNoPartialRun$")
		cmd.Env = append(os.Environ(), "PLUMB_CRASH_CHILD="+dir, "PLUMB_TEST_SECRET=x")
		out, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		buf := make([]byte, 512)
		n, _ := out.Read(buf)
		if string(buf[:n]) != "started\n" {
			cmd.Process.Kill()
			cmd.Wait()
			t.Fatalf("child: %q", buf[:n])
		}
		began := time.Now()
		wait := time.Hour
		if round > 0 {
			wait = time.Duration(rng.Int64N(int64(span)))
		}
		done := make(chan error, 1)
		go func() { done <- cmd.Wait() }()
		select {
		case err := <-done:
			if err != nil {
				t.Fatalf("child failed on its own: %v", err)
			}
			if round == 0 {
				span = time.Since(began)
			}
		case <-time.After(wait):
			cmd.Process.Kill()
			<-done
			kills++
		}
	}
	t.Logf("%d of 20 children killed within %v", kills, span)
	if kills < 10 {
		t.Fatalf("only %d children were killed before they finished", kills)
	}

	ctx := context.Background()
	cfg, err := config.Parse([]byte(cfgText))
	if err != nil {
		t.Fatal(err)
	}
	st := openTestStore(t, cfg)
	checkStoreConsistent(t, st, 40)
	// The next run completes and leaves the store consistent.
	out, err := (&agent.Runner{Store: st, Config: cfg}).Run(ctx, cfg.Watches[0], agent.RunOptions{})
	if err != nil || out.Err != nil {
		t.Fatal(err, out.Err)
	}
	checkStoreConsistent(t, st, 40)
}

// checkStoreConsistent checks what a partial run would break: one bucket
// and one point per day, every point's window rows equal to the rows of the
// stored buckets it covers, the latest run's points all carrying its id,
// no duplicate alerts or deliveries.
func checkStoreConsistent(t *testing.T, st *sqlstore.Store, days int) {
	t.Helper()
	ctx := context.Background()
	bs, err := st.Buckets(ctx, "billing", time.Time{}, time.Time{})
	if err != nil || len(bs) != days {
		t.Fatalf("%d buckets, %v; want %d", len(bs), err, days)
	}
	rows := map[time.Time]int64{}
	for _, b := range bs {
		rows[b.Start] = b.Rows
	}
	ps, err := st.Points(ctx, "billing", agent.PointQuery{})
	if err != nil || len(ps) != days {
		t.Fatalf("%d points, %v; want %d", len(ps), err, days)
	}
	runs, err := st.Runs(ctx, "billing", 0)
	if err != nil || len(runs) == 0 {
		t.Fatalf("runs %v %v", runs, err)
	}
	ids := map[int64]agent.Run{}
	for _, r := range runs {
		ids[r.ID] = r
	}
	perRun := map[int64]int{}
	for i, p := range ps {
		if _, ok := ids[p.RunID]; !ok {
			t.Fatalf("point %s written by run %d, which is not recorded", p.At, p.RunID)
		}
		perRun[p.RunID]++
		var want int64
		for d := max(0, i-6); d <= i; d++ {
			want += rows[start.AddDate(0, 0, d)]
		}
		if p.RowsUsed != want {
			t.Fatalf("point %s has %d rows, its buckets %d", p.At, p.RowsUsed, want)
		}
	}
	last := runs[0]
	if last.Status == agent.StatusOK && perRun[last.ID] != last.Points {
		t.Fatalf("the latest run %d says %d points, the history has %d of them", last.ID, last.Points, perRun[last.ID])
	}
	ob, err := st.Outbox(ctx, "")
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]bool{}
	for _, e := range ob {
		if seen[e.EventID] {
			t.Fatalf("delivery %s enqueued twice", e.EventID)
		}
		seen[e.EventID] = true
	}
	as, err := st.Alerts(ctx, agent.AlertQuery{})
	if err != nil {
		t.Fatal(err)
	}
	keys := map[string]bool{}
	for _, a := range as {
		k := string(a.Rule) + a.Subject + strconv.FormatInt(a.AsOf.UnixMicro(), 10)
		if keys[k] {
			t.Fatalf("alert %s/%s at %s twice", a.Rule, a.Subject, a.AsOf)
		}
		keys[k] = true
	}
}
