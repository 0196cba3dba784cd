// Package pgtest starts throwaway PostgreSQL servers for tests, from the
// system's server binaries (/usr/lib/postgresql/VERSION/bin, the newest
// found). Since PostgreSQL refuses to run as root, a root test process runs
// initdb and postgres as the unprivileged postgres user, in a temporary
// directory owned by it. Servers listen on 127.0.0.1 at a free port (and a
// unix socket in their directory), with fsync off.
//
// Start gives each test a fresh database on one server shared by the test
// binary; call Main from TestMain so that the shared server is stopped and
// its directory removed when the tests end. NewServer starts a private
// server that a test may kill.
//
// Without server binaries the tests are skipped with a message, except
// when CI=true, where they fail.
package pgtest

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"net"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// Server is a running throwaway PostgreSQL.
type Server struct {
	Dir      string // owns the data directory and the socket
	Port     int
	Password string // of the superuser "postgres"
	Version  string // e.g. "15"

	cmd  *exec.Cmd
	done chan struct{}
	mu   sync.Mutex
	gone bool
}

var (
	sharedOnce sync.Once
	shared     *Server
	sharedErr  error
	dbSeq      atomic.Int64
)

// Main runs the tests and then stops the shared server, if one was
// started. Use it as TestMain's body: os.Exit(pgtest.Main(m)).
func Main(m *testing.M) int {
	code := m.Run()
	if shared != nil {
		shared.Stop()
	}
	return code
}

// Start returns the URL of a fresh, empty database on the shared server,
// connecting as the superuser with a password over TCP. The database is
// dropped when the test ends.
func Start(t testing.TB) string {
	t.Helper()
	sharedOnce.Do(func() { shared, sharedErr = startServer() })
	if sharedErr != nil {
		unavailable(t, sharedErr)
	}
	return shared.NewDatabase(t)
}

// NewServer starts a private server for one test, stopped and removed in
// the test's cleanup (use it for tests that kill the server).
func NewServer(t testing.TB) *Server {
	t.Helper()
	s, err := startServer()
	if err != nil {
		unavailable(t, err)
	}
	t.Cleanup(s.Stop)
	return s
}

// ErrNoBinaries is returned when no PostgreSQL server binaries are found.
var ErrNoBinaries = errors.New("no PostgreSQL server binaries found under /usr/lib/postgresql/*/bin (apt-get install postgresql)")

func unavailable(t testing.TB, err error) {
	t.Helper()
	if errors.Is(err, ErrNoBinaries) && os.Getenv("CI") != "true" {
		t.Skipf("pgtest: %v; skipping the PostgreSQL tests", err)
	}
	t.Fatalf("pgtest: %v", err)
}

// URL returns the superuser URL of a database on the server.
func (s *Server) URL(db string) string {
	return fmt.Sprintf("postgres://postgres:%s@127.0.0.1:%d/%s?sslmode=disable", s.Password, s.Port, db)
}

// NewDatabase creates a fresh database and returns its URL; it is dropped
// in the test's cleanup.
func (s *Server) NewDatabase(t testing.TB) string {
	t.Helper()
	name := fmt.Sprintf("t%d_%d", os.Getpid(), dbSeq.Add(1))
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, s.URL("postgres"))
	if err != nil {
		t.Fatalf("pgtest: connect: %v", err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "CREATE DATABASE "+name); err != nil {
		t.Fatalf("pgtest: create database: %v", err)
	}
	t.Cleanup(func() {
		if s.stopped() {
			return
		}
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		conn, err := pgx.Connect(ctx, s.URL("postgres"))
		if err != nil {
			return
		}
		defer conn.Close(ctx)
		conn.Exec(ctx, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)")
	})
	return s.URL(name)
}

func (s *Server) stopped() bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.gone
}

// Stop shuts the server down (fast shutdown) and removes its directory.
func (s *Server) Stop() {
	s.mu.Lock()
	gone := s.gone
	s.gone = true
	s.mu.Unlock()
	if !gone {
		s.cmd.Process.Signal(syscall.SIGINT)
		select {
		case <-s.done:
		case <-time.After(30 * time.Second):
			s.cmd.Process.Kill()
			<-s.done
		}
	}
	os.RemoveAll(s.Dir)
}

// Kill ends the server and its backends at once with SIGKILL, as a crash
// would; its directory is removed in cleanup.
func (s *Server) Kill() {
	s.mu.Lock()
	s.gone = true
	s.mu.Unlock()
	// Backends leave the postmaster's process group (setsid) and may go on
	// streaming a result after it dies: kill its children too.
	pid := s.cmd.Process.Pid
	children := childrenOf(pid)
	syscall.Kill(pid, syscall.SIGKILL)
	for _, c := range children {
		syscall.Kill(c, syscall.SIGKILL)
	}
	<-s.done
}

// childrenOf lists the processes whose parent is pid (from /proc).
func childrenOf(pid int) []int {
	var out []int
	entries, _ := os.ReadDir("/proc")
	for _, e := range entries {
		c, err := strconv.Atoi(e.Name())
		if err != nil {
			continue
		}
		stat, err := os.ReadFile("/proc/" + e.Name() + "/stat")
		if err != nil {
			continue
		}
		// pid (comm) state ppid …; comm may hold spaces and parentheses.
		rest := string(stat)
		if i := strings.LastIndexByte(rest, ')'); i >= 0 {
			rest = rest[i+1:]
		}
		f := strings.Fields(rest)
		if len(f) > 1 && f[1] == strconv.Itoa(pid) {
			out = append(out, c)
		}
	}
	return out
}

// Binaries returns the newest server bin directory found, and its version.
func Binaries() (dir, version string, err error) {
	if d := os.Getenv("PLUMB_PG_BIN"); d != "" {
		return d, filepath.Base(filepath.Dir(d)), nil
	}
	found, _ := filepath.Glob("/usr/lib/postgresql/*/bin/postgres")
	sort.Slice(found, func(i, j int) bool {
		vi, _ := strconv.ParseFloat(filepath.Base(filepath.Dir(filepath.Dir(found[i]))), 64)
		vj, _ := strconv.ParseFloat(filepath.Base(filepath.Dir(filepath.Dir(found[j]))), 64)
		return vi > vj
	})
	for _, f := range found {
		bin := filepath.Dir(f)
		if _, err := os.Stat(filepath.Join(bin, "initdb")); err == nil {
			return bin, filepath.Base(filepath.Dir(bin)), nil
		}
	}
	return "", "", ErrNoBinaries
}

func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// credential returns the postgres user's credential when running as root.
func credential() (*syscall.Credential, int, int, error) {
	if os.Geteuid() != 0 {
		return nil, -1, -1, nil
	}
	u, err := user.Lookup("postgres")
	if err != nil {
		return nil, 0, 0, fmt.Errorf("running as root needs the postgres system user to run the server: %w", err)
	}
	uid, _ := strconv.Atoi(u.Uid)
	gid, _ := strconv.Atoi(u.Gid)
	return &syscall.Credential{Uid: uint32(uid), Gid: uint32(gid)}, uid, gid, nil
}

func startServer(settings ...string) (*Server, error) {
	bin, version, err := Binaries()
	if err != nil {
		return nil, err
	}
	cred, uid, gid, err := credential()
	if err != nil {
		return nil, err
	}
	dir, err := os.MkdirTemp("", "plumb-pg-")
	if err != nil {
		return nil, err
	}
	ok := false
	defer func() {
		if !ok {
			os.RemoveAll(dir)
		}
	}()
	if cred != nil {
		if err := os.Chown(dir, uid, gid); err != nil {
			return nil, err
		}
	}
	pw := make([]byte, 12)
	rand.Read(pw)
	s := &Server{Dir: dir, Password: hex.EncodeToString(pw), Version: version, done: make(chan struct{})}
	pwfile := filepath.Join(dir, "pwfile")
	if err := os.WriteFile(pwfile, []byte(s.Password+"\n"), 0o600); err != nil {
		return nil, err
	}
	if cred != nil {
		os.Chown(pwfile, uid, gid)
	}
	data := filepath.Join(dir, "data")
	initdb := exec.Command(filepath.Join(bin, "initdb"), "-D", data, "-U", "postgres", "--pwfile", pwfile,
		"--auth-local=trust", "--auth-host=scram-sha-256", "-E", "UTF8", "--no-locale", "--no-sync")
	initdb.SysProcAttr = &syscall.SysProcAttr{Credential: cred}
	initdb.Dir = dir
	if out, err := initdb.CombinedOutput(); err != nil {
		return nil, fmt.Errorf("initdb: %v\n%s", err, out)
	}
	os.Remove(pwfile)
	if s.Port, err = freePort(); err != nil {
		return nil, err
	}
	logf, err := os.Create(filepath.Join(dir, "server.log"))
	if err != nil {
		return nil, err
	}
	defer logf.Close()
	cmd := exec.Command(filepath.Join(bin, "postgres"), "-D", data,
		"-c", "listen_addresses=127.0.0.1", "-p", strconv.Itoa(s.Port),
		"-c", "unix_socket_directories="+dir,
		"-c", "fsync=off", "-c", "synchronous_commit=off", "-c", "full_page_writes=off",
		"-c", "max_connections=60", "-c", "log_min_messages=warning")
	for _, kv := range settings {
		cmd.Args = append(cmd.Args, "-c", kv)
	}
	cmd.Stdout, cmd.Stderr = logf, logf
	cmd.Dir = dir
	// Its own process group, for Kill; the parent-death signal is a safety
	// net for test binaries that do not call Main.
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: cred, Setpgid: true, Pdeathsig: syscall.SIGINT}
	if err := cmd.Start(); err != nil {
		return nil, fmt.Errorf("postgres: %w", err)
	}
	s.cmd = cmd
	go func() { cmd.Wait(); close(s.done) }()

	deadline := time.Now().Add(60 * time.Second)
	for {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		conn, err := pgx.Connect(ctx, s.URL("postgres"))
		cancel()
		if err == nil {
			conn.Close(context.Background())
			break
		}
		select {
		case <-s.done:
			log, _ := os.ReadFile(filepath.Join(dir, "server.log"))
			return nil, fmt.Errorf("postgres exited at start: %s", tail(string(log)))
		default:
		}
		if time.Now().After(deadline) {
			s.Stop()
			log, _ := os.ReadFile(filepath.Join(dir, "server.log"))
			return nil, fmt.Errorf("postgres did not accept connections in 60s: %v; log: %s", err, tail(string(log)))
		}
		time.Sleep(50 * time.Millisecond)
	}
	ok = true
	return s, nil
}

func tail(s string) string {
	lines := strings.Split(strings.TrimSpace(s), "\n")
	if len(lines) > 15 {
		lines = lines[len(lines)-15:]
	}
	return strings.Join(lines, "\n")
}
