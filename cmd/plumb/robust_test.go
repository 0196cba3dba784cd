package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/sqlstore"
	"plumb/connectors"
	"plumb/connectors/postgres/pgtest"
)

// TestScheduleThatNeverFiresRefused: config check used to say OK with an
// empty "next", and the agent ran such a watch in a tight loop. Both
// refuse it now, naming the watch and the schedule.
func TestScheduleThatNeverFiresRefused(t *testing.T) {
	for _, spec := range []string{"0 0 31 2 *", "0 0 30 2 *", "0 0 31 4 *"} {
		cfg, _ := demoConfig(t, fmt.Sprintf("    schedule: %q\n", spec))
		want := []string{`watch "district_daily"`, fmt.Sprintf(`schedule %q never fires`, spec)}
		code, out, errs := plumbCLI(t, context.Background(), "config", "check", "--config", cfg)
		if code != exitError || strings.Contains(out, "OK") {
			t.Fatalf("config check %s: exit %d\n%s\n%s", spec, code, out, errs)
		}
		for _, w := range want {
			if !strings.Contains(errs, w) {
				t.Errorf("config check %s: %q lacks %q", spec, errs, w)
			}
		}
		// An agent that accepted it would run until the deadline.
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		code, _, errs = plumbCLI(t, ctx, "agent", "--config", cfg, "--listen", "off", "--jitter", "0")
		cancel()
		if code != exitError || !strings.Contains(errs, want[0]) || !strings.Contains(errs, want[1]) {
			t.Fatalf("agent %s: exit %d\n%s", spec, code, errs)
		}
	}
}

// panickySource is a real source whose Scan panics for three-column
// requests, as a bug met by some data would.
type panickySource struct{ connectors.Source }

func (p panickySource) Scan(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if len(req.Columns) == 3 {
		var idx []int
		_ = idx[len(req.Columns)-5]
	}
	return p.Source.Scan(ctx, req)
}

// TestCheckGoesOnAfterPanic: a panicking run made plumb check exit 70
// without reporting the other watches. Now it is an unread watch (exit 2,
// recorded) and the others are judged as usual.
func TestCheckGoesOnAfterPanic(t *testing.T) {
	testOpenSource = func(ctx context.Context, url string) (connectors.Source, error) {
		src, err := connectors.Open(ctx, url, connectors.Options{})
		if err != nil {
			return nil, err
		}
		return panickySource{src}, nil
	}
	t.Cleanup(func() { testOpenSource = nil })
	src := collinearTable(t, 3000, 0.01)
	dir := t.TempDir()
	cfg := filepath.Join(dir, "plumb.yaml")
	os.WriteFile(cfg, []byte(fmt.Sprintf(`store: sqlite:%s/state.db
sources: {g: "sqlite:%s"}
watches:
  - {name: gauges_all, source: g, table: gauges}
  - {name: gauges_pair, source: g, table: gauges, columns: [pressure_bar, flow_m3]}
`, dir, src)), 0o600)
	code, out, errs := plumbCLI(t, context.Background(), "check", "--config", cfg, "-q")
	if code != exitError {
		t.Fatalf("exit %d, want %d\n%s\n%s", code, exitError, out, errs)
	}
	lines := strings.Split(out, "\n")
	if !strings.HasPrefix(lines[0], "unread   gauges_all") ||
		!strings.Contains(out, "run panicked: runtime error: index out of range") {
		t.Fatalf("the panicking watch is not reported as failed:\n%s", out)
	}
	if !strings.Contains(out, "gauges_pair") || strings.Contains(out+errs, "goroutine ") {
		t.Fatalf("the other watch is missing, or a stack is shown:\n%s\n%s", out, errs)
	}
	st, err := sqlstore.Open(context.Background(), "sqlite:"+dir+"/state.db", sqlstore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	runs, _ := st.Runs(context.Background(), "gauges_all", 0)
	if len(runs) != 1 || runs[0].Status != agent.StatusFailed {
		t.Fatalf("recorded runs of the panicking watch: %+v", runs)
	}
}

// TestPanicIsOneLine: the last resort in main: a panic outside any run
// ends the command with exit 70 and one line, no stack.
func TestPanicIsOneLine(t *testing.T) {
	root := newRoot()
	root.AddCommand(&cobra.Command{Use: "explode", RunE: func(*cobra.Command, []string) error {
		var m map[string]int
		m["pressure_bar"]++
		return nil
	}})
	var out, errb bytes.Buffer
	code := execute(context.Background(), root, []string{"explode"}, &out, &errb)
	msg := errb.String()
	if code != exitInternal || strings.Count(msg, "\n") != 1 || !strings.Contains(msg, "internal error: assignment to entry in nil map") {
		t.Fatalf("exit %d, stderr %q", code, msg)
	}
}

// TestAgentStopsWhenLockTaken: on a PostgreSQL store the lock dies with
// its connection. Here another plumb has recorded itself as the holder
// and the agent's lock connection is ended: the agent notices at once,
// finds the store taken, says so and exits instead of writing on.
func TestAgentStopsWhenLockTaken(t *testing.T) {
	srv := pgtest.NewServer(t)
	storeURL := srv.NewDatabase(t)
	cfg, _ := demoConfig(t, "    schedule: \"@every 1h\"\n")
	b, _ := os.ReadFile(cfg)
	text := strings.Replace(string(b), "store: sqlite:", "store: "+storeURL+"\n# was: ", 1)
	if err := os.WriteFile(cfg, []byte(text), 0o600); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	done := make(chan int, 1)
	var out, errb syncBuffer
	go func() {
		done <- run(ctx, []string{"agent", "--config", cfg, "--jitter", "0", "--listen", "off"}, &out, &errb)
	}()
	conn, err := pgx.Connect(context.Background(), storeURL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(context.Background())
	deadline := time.Now().Add(60 * time.Second)
	for {
		var n int
		err := conn.QueryRow(context.Background(), `SELECT count(*) FROM plumb_runs`).Scan(&n)
		if err == nil && n > 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("no run recorded; log:\n%s", errb.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	if _, err := conn.Exec(context.Background(), `UPDATE plumb_lock SET holder = 'plumb agent (elsewhere)', pid = pid + 1`); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(context.Background(), `SELECT pg_terminate_backend(pid) FROM pg_locks WHERE locktype = 'advisory'`); err != nil {
		t.Fatal(err)
	}
	select {
	case code := <-done:
		log := errb.String()
		if code != exitError || !strings.Contains(log, "plumb agent (elsewhere)") || !strings.Contains(log, "lock") {
			t.Fatalf("agent exit %d:\n%s", code, log)
		}
	case <-time.After(60 * time.Second):
		t.Fatalf("the agent runs on without its lock:\n%s", errb.String())
	}
}

// syncBuffer is a bytes.Buffer safe for a writer and a reader at once.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}
