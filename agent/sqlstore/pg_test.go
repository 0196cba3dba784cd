package sqlstore

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/connectors/postgres/pgtest"
	"plumb/migrations"
)

func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

func openPostgres(t *testing.T) (*Store, string) {
	t.Helper()
	url := pgtest.Start(t)
	s, err := Open(context.Background(), url, Options{Migrate: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s, url
}

func TestPostgresStore(t *testing.T) {
	s, _ := openPostgres(t)
	if s.Dialect() != migrations.Postgres {
		t.Fatalf("dialect %s", s.Dialect())
	}
	storeSuite(t, s)
}

func TestPostgresLock(t *testing.T) {
	ctx := context.Background()
	s1, url := openPostgres(t)
	release, err := s1.Lock(ctx, "plumb agent")
	if err != nil {
		t.Fatal(err)
	}
	s2, err := Open(ctx, url, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	_, err = s2.Lock(ctx, "plumb check")
	var le *agent.LockedError
	if !errors.As(err, &le) || le.Info == nil || le.Info.Holder != "plumb agent" || !strings.Contains(err.Error(), "plumb agent (pid") {
		t.Fatalf("second lock: %v", err)
	}
	if err := release(); err != nil {
		t.Fatal(err)
	}
	r2, err := s2.Lock(ctx, "plumb check")
	if err != nil {
		t.Fatalf("after release: %v", err)
	}
	r2()
}

// TestPostgresLockReleasedOnCrash holds the lock in a child process killed
// with SIGKILL; the server ends its session and the lock with it.
func TestPostgresLockReleasedOnCrash(t *testing.T) {
	if url := os.Getenv("PLUMB_PG_LOCK_CHILD"); url != "" {
		s, err := Open(context.Background(), url, Options{})
		if err != nil {
			fmt.Println("open:", err)
			os.Exit(1)
		}
		if _, err := s.Lock(context.Background(), "child"); err != nil {
			fmt.Println("lock:", err)
			os.Exit(1)
		}
		fmt.Println("locked")
		time.Sleep(time.Minute)
		os.Exit(0)
	}
	ctx := context.Background()
	s, url := openPostgres(t)
	cmd := exec.Command(os.Args[0], "-test.run=^TestPostgresLockReleasedOnCrash$")
	cmd.Env = append(os.Environ(), "PLUMB_PG_LOCK_CHILD="+url)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	buf := make([]byte, 256)
	n, _ := out.Read(buf)
	if !strings.Contains(string(buf[:n]), "locked") {
		cmd.Process.Kill()
		t.Fatalf("child said %q", buf[:n])
	}
	if _, err := s.Lock(ctx, "parent"); !errors.Is(err, agent.ErrLocked) {
		cmd.Process.Kill()
		t.Fatalf("lock while the child holds it: %v", err)
	}
	cmd.Process.Kill()
	cmd.Wait()
	// The server notices the closed socket and ends the session; poll
	// until it has (no timing is asserted).
	for i := 0; ; i++ {
		release, err := s.Lock(ctx, "parent")
		if err == nil {
			release()
			return
		}
		if !errors.Is(err, agent.ErrLocked) || i == 300 {
			t.Fatalf("lock after the holder died: %v", err)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

func TestPostgresRefusesNewerStore(t *testing.T) {
	ctx := context.Background()
	s, url := openPostgres(t)
	if _, err := s.DB().ExecContext(ctx, "INSERT INTO "+migrations.VersionTable+" (version_id, is_applied) VALUES ($1, true)",
		migrations.Latest(migrations.Postgres)+1); err != nil {
		t.Fatal(err)
	}
	_, err := Open(ctx, url, Options{Migrate: true})
	var tooNew *migrations.ErrStoreNewer
	if !errors.As(err, &tooNew) {
		t.Fatalf("%v; want ErrStoreNewer", err)
	}
	if strings.Contains(err.Error(), strings.TrimPrefix(strings.SplitN(url, "@", 2)[0], "postgres://postgres:")) {
		t.Fatalf("error leaks the password: %v", err)
	}
}
