package sqlstore

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/connectors/postgres/pgtest"
)

// openWith opens a store at url with the lock's keeper set by every.
func openWith(t *testing.T, url string, every time.Duration) *Store {
	t.Helper()
	s, err := Open(context.Background(), url, Options{Migrate: true, LockCheckEvery: every})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// TestSQLiteLockSurvivesDeletedSidecars: a temporary-file cleaner that
// deletes the files beside the database (the lock file of old, the
// write-ahead log and its index) used to free the lock, and a second
// agent was admitted. The lock now lives on the database file itself.
func TestSQLiteLockSurvivesDeletedSidecars(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "state.db")
	s1 := openWith(t, "sqlite:"+path, -1)
	release, err := s1.Lock(ctx, "plumb agent")
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 0)); err != nil {
		t.Fatal(err)
	}
	side, _ := filepath.Glob(path + "?*")
	if len(side) == 0 {
		t.Fatal("no file beside the database to delete")
	}
	for _, f := range side {
		if err := os.Remove(f); err != nil {
			t.Fatal(err)
		}
	}
	t.Logf("deleted %v", side)
	s2 := openWith(t, "sqlite:"+path, -1)
	_, err = s2.Lock(ctx, "plumb check")
	var le *agent.LockedError
	if !errors.As(err, &le) || le.Info == nil || le.Info.Holder != "plumb agent" {
		t.Fatalf("second lock after deleting %v: %v; want it refused, naming the holder", side, err)
	}
}

// TestSQLiteLockLostWhenFileReplaced: a database file replaced under the
// agent (a restore) is not the store it locked: the lock is lost for good
// and nothing more is written into the old file.
func TestSQLiteLockLostWhenFileReplaced(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "state.db")
	s := openWith(t, "sqlite:"+path, -1)
	release, err := s.Lock(ctx, "plumb agent")
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	if err := s.CheckLock(ctx); err != nil {
		t.Fatalf("check while held: %v", err)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(path, path+".old"); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
	if err := s.CheckLock(ctx); !errors.Is(err, agent.ErrLockLost) || !strings.Contains(err.Error(), "replaced") {
		t.Fatalf("check after the file was replaced: %v", err)
	}
	select {
	case <-s.LockLost():
	default:
		t.Fatal("LockLost not closed")
	}
	if _, err := s.CommitRun(ctx, sampleRun("district_daily", 0)); !errors.Is(err, agent.ErrLockLost) {
		t.Fatalf("commit after the lock was lost: %v", err)
	}
	if err := s.Delivered(ctx, 1, t0); !errors.Is(err, agent.ErrLockLost) {
		t.Fatalf("outbox write after the lock was lost: %v", err)
	}
}

// advisoryHolder is the server process holding the store's advisory
// lock, 0 for none.
func advisoryHolder(t *testing.T, s *Store) int {
	t.Helper()
	var pid int
	err := s.DB().QueryRowContext(context.Background(), `SELECT coalesce(max(pid), 0) FROM pg_locks
		WHERE locktype = 'advisory' AND granted AND database = (SELECT oid FROM pg_database WHERE datname = current_database())`).Scan(&pid)
	if err != nil {
		t.Fatal(err)
	}
	return pid
}

// terminate ends the server process of the store's lock connection, as a
// store restart or an operator would, and waits until its lock is gone.
func terminate(t *testing.T, s *Store) int {
	t.Helper()
	pid := advisoryHolder(t, s)
	if pid == 0 {
		t.Fatal("nobody holds the advisory lock")
	}
	if _, err := s.DB().ExecContext(context.Background(), `SELECT pg_terminate_backend($1)`, pid); err != nil {
		t.Fatal(err)
	}
	for i := 0; advisoryHolder(t, s) == pid; i++ {
		if i == 600 {
			t.Fatal("the terminated backend keeps its lock")
		}
		time.Sleep(50 * time.Millisecond)
	}
	return pid
}

// TestPostgresLockLostToTerminatedBackend: the advisory lock dies with
// its connection. Nothing used to notice: the agent wrote on, and a second
// agent was admitted beside it. Now the first stops writing at once, and,
// since the second took the store meanwhile, knows it has lost it for
// good.
func TestPostgresLockLostToTerminatedBackend(t *testing.T) {
	ctx := context.Background()
	url := pgtest.Start(t)
	s1, s2 := openWith(t, url, -1), openWith(t, url, -1)
	release, err := s1.Lock(ctx, "agent one")
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 0)); err != nil {
		t.Fatal(err)
	}
	terminate(t, s1)
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 1)); !errors.Is(err, agent.ErrLockLost) {
		t.Fatalf("commit after the lock's connection was ended: %v; want ErrLockLost", err)
	}
	r2, err := s2.Lock(ctx, "agent two")
	if err != nil {
		t.Fatalf("second agent after the first lost its lock: %v", err)
	}
	defer r2()
	err = s1.CheckLock(ctx)
	if !errors.Is(err, agent.ErrLockLost) || !strings.Contains(err.Error(), "agent two") {
		t.Fatalf("first agent's check: %v; want lost for good, naming agent two", err)
	}
	select {
	case <-s1.LockLost():
	default:
		t.Fatal("LockLost not closed")
	}
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 1)); !errors.Is(err, agent.ErrLockLost) {
		t.Fatalf("first agent's commit after losing for good: %v", err)
	}
	if _, err := s2.CommitRun(ctx, sampleRun("district_daily", 1)); err != nil {
		t.Fatalf("second agent's commit: %v", err)
	}
	runs, _ := s2.Runs(ctx, "district_daily", 0)
	if len(runs) != 2 {
		t.Fatalf("%d runs recorded, want 2 (one per holder)", len(runs))
	}
}

// TestPostgresLockTakenAgain: when nobody took the store meanwhile, the
// lock is taken again on a new connection and writes resume; a second
// agent is refused.
func TestPostgresLockTakenAgain(t *testing.T) {
	ctx := context.Background()
	url := pgtest.Start(t)
	s1, s2 := openWith(t, url, -1), openWith(t, url, -1)
	release, err := s1.Lock(ctx, "agent one")
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	old := terminate(t, s1)
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 0)); !errors.Is(err, agent.ErrLockLost) {
		t.Fatalf("commit while the lock is lost: %v", err)
	}
	if err := s1.CheckLock(ctx); err != nil {
		t.Fatalf("taking the lock again: %v", err)
	}
	if pid := advisoryHolder(t, s1); pid == 0 || pid == old {
		t.Fatalf("advisory lock held by %d (old connection %d)", pid, old)
	}
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 0)); err != nil {
		t.Fatalf("commit after taking the lock again: %v", err)
	}
	if _, err := s2.Lock(ctx, "agent two"); !errors.Is(err, agent.ErrLocked) || !strings.Contains(err.Error(), "agent one") {
		t.Fatalf("second agent: %v; want refused, naming agent one", err)
	}
}

// TestPostgresLockKeeperNoticesAtOnce: with the keeper on (and its
// periodic check an hour away), a dropped lock connection is noticed by
// the wait on it, and the lock is taken again before a second agent can
// be admitted for long.
func TestPostgresLockKeeperNoticesAtOnce(t *testing.T) {
	ctx := context.Background()
	url := pgtest.Start(t)
	s1, s2 := openWith(t, url, time.Hour), openWith(t, url, -1)
	release, err := s1.Lock(ctx, "agent one")
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	old := terminate(t, s1)
	// Poll until the keeper has taken it again (no timing is asserted).
	for i := 0; ; i++ {
		if pid := advisoryHolder(t, s1); pid != 0 && pid != old && s1.lockGone() == nil {
			break
		}
		if i == 600 {
			t.Fatal("the keeper did not take the lock again")
		}
		time.Sleep(50 * time.Millisecond)
	}
	if _, err := s1.CommitRun(ctx, sampleRun("district_daily", 0)); err != nil {
		t.Fatalf("commit after the keeper took the lock again: %v", err)
	}
	if _, err := s2.Lock(ctx, "agent two"); !errors.Is(err, agent.ErrLocked) {
		t.Fatalf("second agent: %v; want refused", err)
	}
}
