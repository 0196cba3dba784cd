package sqlstore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"sync"
	"syscall"
	"time"

	"github.com/jackc/pgx/v5"

	"plumb/agent"
	"plumb/migrations"
)

// One writer per store.
//
// SQLite: an exclusive flock(2) on the database file itself, taken through
// a descriptor of its own. It lives as long as the file: deleting a file
// beside it (the write-ahead log, its index, a lock file of an older plumb)
// frees nothing, and the kernel drops it when the holder dies, SIGKILL
// included. SQLite's own locks are fcntl(2) locks, which flock does not
// touch. The descriptor is closed only after the database's connections
// (closing any descriptor of a file drops the process's fcntl locks on
// it). SQLite needs every process of a store on one host (its WAL index is
// shared memory), so the kernel sees every holder.
//
// PostgreSQL: a session advisory lock on a connection of its own, outside
// the pool. The lock dies with its connection (a restart of the store,
// pg_terminate_backend, a network cut), so it is watched: the keeper
// notices the connection go, writes stop, and the lock is taken again on a
// new connection if nobody else took it in between; otherwise the store is
// lost for good (LockLost) and the agent stops.
//
// On both, the holder's name, pid, host and time of acquisition are
// written to plumb_lock; that row names the holder to a refused process
// and is the fence of every write: each write transaction first checks
// that the row still names this process (and, on PostgreSQL, that the
// advisory lock is still held by its connection), so nothing is written
// once the lock is gone, whatever the keeper has noticed yet.

// lease is this process's hold on the store.
type lease struct {
	holder   string
	pid      int
	host     string
	acquired int64 // unix µs; with pid and host it names our plumb_lock row

	mu       sync.Mutex
	held     bool  // ours now: writes may go ahead
	gone     error // lost for good (wraps agent.ErrLockLost), or released
	released bool
	lost     chan struct{} // closed when lost for good

	// PostgreSQL: the connection holding the advisory lock, and the key.
	connMu  sync.Mutex
	conn    *pgx.Conn
	backend uint32 // the connection's server process
	key     int64

	stop func()        // ends the keeper
	done chan struct{} // closed when the keeper has ended
}

func (l *lease) state() (held bool, gone error, backend uint32) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.held, l.gone, l.backend
}

func (l *lease) isReleased() bool {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.released
}

// Lock makes this process the store's only writer (see above). It fails at
// once with a *agent.LockedError when another process holds the store.
func (s *Store) Lock(ctx context.Context, holder string) (func() error, error) {
	s.lockMu.Lock()
	defer s.lockMu.Unlock()
	if s.lease != nil && !s.lease.isReleased() {
		return nil, fmt.Errorf("state store %s: already locked by this process", s.display)
	}
	host, _ := os.Hostname()
	l := &lease{holder: holder, pid: os.Getpid(), host: host, acquired: time.Now().UnixMicro(), lost: make(chan struct{})}
	var err error
	switch s.dialect {
	case migrations.SQLite:
		err = s.lockFile()
	case migrations.Postgres:
		var got bool
		l.conn, l.key, got, err = s.tryAdvisory(ctx)
		if err == nil && !got {
			err = &agent.LockedError{}
		}
		if l.conn != nil {
			l.backend = l.conn.PgConn().PID()
		}
	}
	if err != nil {
		var le *agent.LockedError
		if errors.As(err, &le) {
			le.Info = s.lockInfo(ctx)
		}
		return nil, err
	}
	if _, err := s.exec(ctx, `INSERT INTO plumb_lock (id, holder, pid, host, acquired_at, heartbeat_at)
		VALUES (1, ?, ?, ?, ?, ?)
		ON CONFLICT (id) DO UPDATE SET holder = excluded.holder, pid = excluded.pid, host = excluded.host,
			acquired_at = excluded.acquired_at, heartbeat_at = excluded.heartbeat_at`,
		holder, l.pid, l.host, l.acquired, l.acquired); err != nil {
		s.unlock(l)
		return nil, fmt.Errorf("state store %s: recording the lock holder: %w", s.display, err)
	}
	if s.dialect == migrations.SQLite {
		// Into the database file, so that the row names us even to a
		// process that opens the store after its log was deleted.
		s.db.ExecContext(ctx, `PRAGMA wal_checkpoint(PASSIVE)`)
	}
	l.held = true
	s.lease = l
	kctx, stop := context.WithCancel(context.Background())
	l.stop, l.done = stop, make(chan struct{})
	if s.lockEvery >= 0 {
		go s.keep(kctx, l)
	} else {
		close(l.done)
	}
	var once sync.Once
	var rerr error
	return func() error {
		once.Do(func() { rerr = s.release(l) })
		return rerr
	}, nil
}

// release gives the lock up: the keeper ends, our row goes, the lock is
// dropped.
func (s *Store) release(l *lease) error {
	l.stop()
	<-l.done
	l.mu.Lock()
	if l.released {
		l.mu.Unlock()
		return nil
	}
	ours := l.gone == nil
	l.held, l.released = false, true
	if l.gone == nil {
		l.gone = fmt.Errorf("%w: it was released", agent.ErrLockLost)
	}
	l.mu.Unlock()
	var err error
	if ours {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		_, err = s.exec(ctx, `DELETE FROM plumb_lock WHERE id = 1 AND pid = ? AND host = ? AND acquired_at = ?`, l.pid, l.host, l.acquired)
	}
	return errors.Join(err, s.unlock(l))
}

// unlock drops the lock itself.
func (s *Store) unlock(l *lease) error {
	switch s.dialect {
	case migrations.SQLite:
		if s.dbFile != nil {
			return syscall.Flock(int(s.dbFile.Fd()), syscall.LOCK_UN)
		}
	case migrations.Postgres:
		l.connMu.Lock()
		defer l.connMu.Unlock()
		if l.conn != nil {
			// Closing the connection releases the lock as well; on a
			// connection that is gone both fail, and there is no lock.
			ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
			defer cancel()
			l.conn.Exec(ctx, `SELECT pg_advisory_unlock($1)`, l.key)
			l.conn.Close(ctx)
			l.conn = nil
		}
	}
	return nil
}

// lockFile takes the flock on the database file.
func (s *Store) lockFile() error {
	if s.dbFile == nil {
		f, err := os.OpenFile(s.path, os.O_RDWR, 0)
		if err != nil {
			return fmt.Errorf("state store %s: opening the database file to lock it: %w", s.path, err)
		}
		s.dbFile = f
	}
	if err := syscall.Flock(int(s.dbFile.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return &agent.LockedError{}
		}
		return fmt.Errorf("state store %s: locking the database file: %w", s.path, err)
	}
	return nil
}

// advisoryKey names the lock; the schema is part of it so that stores in
// different schemas of one database do not exclude each other.
const advisoryKey = `hashtext('plumb-agent:' || current_schema())::bigint`

// tryAdvisory opens a connection of its own and tries the advisory lock
// on it; without the lock the connection is closed.
func (s *Store) tryAdvisory(ctx context.Context) (conn *pgx.Conn, key int64, got bool, err error) {
	cfg := s.pgcfg.Copy()
	cfg.RuntimeParams["application_name"] += " lock"
	conn, err = pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		return nil, 0, false, fmt.Errorf("state store %s: connecting for the lock: %w", s.display, s.scrub(err))
	}
	err = conn.QueryRow(ctx, `SELECT `+advisoryKey).Scan(&key)
	if err == nil {
		err = conn.QueryRow(ctx, `SELECT pg_try_advisory_lock($1)`, key).Scan(&got)
	}
	if err != nil || !got {
		conn.Close(context.Background())
		if err != nil {
			return nil, 0, false, fmt.Errorf("state store %s: taking the advisory lock: %w", s.display, err)
		}
		return nil, key, false, nil
	}
	return conn, key, true, nil
}

// advisoryIDs splits an advisory lock key as pg_locks shows it.
func advisoryIDs(key int64) (classid, objid int64) {
	return int64(uint64(key) >> 32), int64(uint32(uint64(key)))
}

// fence checks, inside a write transaction, that this process still holds
// the store. A store that was never locked (tests, tools that only read)
// is not fenced.
func (s *Store) fence(ctx context.Context, tx *sql.Tx) error {
	s.lockMu.Lock()
	l := s.lease
	s.lockMu.Unlock()
	if l == nil {
		return nil
	}
	if err := s.lockGone(); err != nil {
		return err
	}
	_, _, backend := l.state()
	var (
		one int
		err error
	)
	switch s.dialect {
	case migrations.SQLite:
		err = tx.QueryRowContext(ctx, `SELECT 1 FROM plumb_lock WHERE id = 1 AND pid = ? AND host = ? AND acquired_at = ?`,
			l.pid, l.host, l.acquired).Scan(&one)
	case migrations.Postgres:
		classid, objid := advisoryIDs(l.key)
		err = tx.QueryRowContext(ctx, `SELECT 1 FROM plumb_lock WHERE id = 1 AND pid = $1 AND host = $2 AND acquired_at = $3
			AND EXISTS (SELECT 1 FROM pg_locks WHERE locktype = 'advisory' AND granted AND pid = $4
				AND database = (SELECT oid FROM pg_database WHERE datname = current_database())
				AND classid::bigint = $5 AND objid::bigint = $6 AND objsubid = 1)
			FOR SHARE OF plumb_lock`, l.pid, l.host, l.acquired, int64(backend), classid, objid).Scan(&one)
	}
	if errors.Is(err, sql.ErrNoRows) {
		l.mu.Lock()
		l.held = false
		l.mu.Unlock()
		s.lockLog.Error("state store lock lost: writes stop until it is taken again", "store", s.display)
		return fmt.Errorf("%w: its connection dropped, or another plumb took the store", agent.ErrLockLost)
	}
	return err
}

// lockGone is the fence's quick half, for reads that lead to effects
// (the outbox): an error when the lock was taken and is not held now.
func (s *Store) lockGone() error {
	s.lockMu.Lock()
	l := s.lease
	s.lockMu.Unlock()
	if l == nil {
		return nil
	}
	held, gone, _ := l.state()
	if gone != nil {
		return gone
	}
	if !held {
		return fmt.Errorf("%w: it was lost and is not taken again yet", agent.ErrLockLost)
	}
	return nil
}

// LockLost is closed when the lock this store took is lost for good:
// another process holds the store now, or its file was replaced. It is
// nil (never ready) before Lock.
func (s *Store) LockLost() <-chan struct{} {
	s.lockMu.Lock()
	defer s.lockMu.Unlock()
	if s.lease == nil {
		return nil
	}
	return s.lease.lost
}

// LockErr says why the lock was lost; nil while it is held.
func (s *Store) LockErr() error {
	s.lockMu.Lock()
	l := s.lease
	s.lockMu.Unlock()
	if l == nil {
		return nil
	}
	_, gone, _ := l.state()
	if gone == nil {
		return nil
	}
	return fmt.Errorf("state store %s: %w", s.display, gone)
}

// loseForGood marks the lock lost for good and says so.
func (s *Store) loseForGood(l *lease, why error) error {
	err := fmt.Errorf("%w: %v", agent.ErrLockLost, why)
	l.mu.Lock()
	if l.gone != nil {
		l.mu.Unlock()
		return l.gone
	}
	l.held, l.gone = false, err
	close(l.lost)
	l.mu.Unlock()
	s.lockLog.Error("state store lock lost for good", "store", s.display, "why", why.Error())
	return err
}

// CheckLock verifies the lock now, writes its heartbeat, and, on
// PostgreSQL, takes it again when its connection went and nobody else
// took it meanwhile. It returns nil while the lock is held, an error
// wrapping agent.ErrLockLost once it is lost for good, and other errors
// when it could not tell (the store is unreachable; writes wait).
// The keeper calls it; tests that turn the keeper off call it themselves.
func (s *Store) CheckLock(ctx context.Context) error {
	s.lockMu.Lock()
	l := s.lease
	s.lockMu.Unlock()
	if l == nil {
		return fmt.Errorf("state store %s: not locked", s.display)
	}
	if _, gone, _ := l.state(); gone != nil {
		return gone
	}
	switch s.dialect {
	case migrations.SQLite:
		var a, b syscall.Stat_t
		if err := syscall.Fstat(int(s.dbFile.Fd()), &a); err != nil {
			return err
		}
		if err := syscall.Stat(s.path, &b); err != nil || a.Ino != b.Ino || a.Dev != b.Dev {
			return s.loseForGood(l, fmt.Errorf("the database file %s was deleted or replaced", s.path))
		}
	case migrations.Postgres:
		if err := s.checkAdvisory(ctx, l); err != nil {
			return err
		}
	}
	return s.heartbeat(ctx, l)
}

// heartbeat writes the time into our row; a row that names someone else
// means the store was taken over.
func (s *Store) heartbeat(ctx context.Context, l *lease) error {
	res, err := s.exec(ctx, `UPDATE plumb_lock SET heartbeat_at = ? WHERE id = 1 AND pid = ? AND host = ? AND acquired_at = ?`,
		time.Now().UnixMicro(), l.pid, l.host, l.acquired)
	if err != nil {
		return s.wrap("writing the lock's heartbeat", err)
	}
	if n, err := res.RowsAffected(); err == nil && n == 0 {
		return s.loseForGood(l, fmt.Errorf("the lock record names another holder: %s", describeHolder(s.lockInfo(ctx))))
	}
	l.mu.Lock()
	l.held = l.gone == nil
	l.mu.Unlock()
	return nil
}

// checkAdvisory verifies the advisory lock on its connection and takes it
// again when the connection is gone.
func (s *Store) checkAdvisory(ctx context.Context, l *lease) error {
	l.connMu.Lock()
	defer l.connMu.Unlock()
	if l.conn != nil {
		classid, objid := advisoryIDs(l.key)
		var ok bool
		err := l.conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_locks WHERE locktype = 'advisory' AND granted
			AND pid = pg_backend_pid() AND classid::bigint = $1 AND objid::bigint = $2 AND objsubid = 1)`, classid, objid).Scan(&ok)
		if err == nil && ok {
			return nil
		}
		if err != nil && !l.conn.IsClosed() {
			return s.wrap("checking the lock", err) // slow, not gone: tell later
		}
		l.mu.Lock()
		l.held = false
		l.mu.Unlock()
		s.lockLog.Error("state store lock lost: its connection dropped; writes stop until it is taken again", "store", s.display)
		l.conn.Close(context.Background())
		l.conn = nil
	}
	conn, key, got, err := s.tryAdvisory(ctx)
	if err != nil {
		return err
	}
	if got && key != l.key {
		// Not the lock we held (the connection sees another schema).
		conn.Exec(ctx, `SELECT pg_advisory_unlock($1)`, key)
		conn.Close(context.Background())
		return s.loseForGood(l, errors.New("the lock taken again is not the one held: the store's schema differs on the new connection"))
	}
	if !got {
		return s.loseForGood(l, fmt.Errorf("another plumb holds the store now: %s", describeHolder(s.lockInfo(ctx))))
	}
	// Nobody can take it now; was anybody in between? Every holder writes
	// its row when it takes the lock.
	var (
		pid      int
		host     string
		acquired int64
	)
	err = conn.QueryRow(ctx, `SELECT pid, host, acquired_at FROM plumb_lock WHERE id = 1`).Scan(&pid, &host, &acquired)
	if err != nil || pid != l.pid || host != l.host || acquired != l.acquired {
		conn.Exec(ctx, `SELECT pg_advisory_unlock($1)`, key)
		conn.Close(context.Background())
		if err != nil && !errors.Is(err, pgx.ErrNoRows) {
			return s.wrap("reading the lock record", err)
		}
		return s.loseForGood(l, fmt.Errorf("another plumb held the store meanwhile: %s", describeHolder(s.lockInfo(ctx))))
	}
	l.conn = conn // the key is the schema's, as before
	l.mu.Lock()
	l.backend = conn.PgConn().PID()
	l.mu.Unlock()
	s.lockLog.Warn("state store lock taken again; writes resume", "store", s.display)
	return nil
}

// keep watches the lock until stopped: on PostgreSQL it waits on the
// lock's connection, so that a dropped connection is noticed at once; on
// both it checks every lockEvery.
func (s *Store) keep(ctx context.Context, l *lease) {
	defer close(l.done)
	defer func() {
		if p := recover(); p != nil {
			s.loseForGood(l, fmt.Errorf("the lock's keeper panicked: %v (a bug in plumb; please report it)", p))
		}
	}()
	every := s.lockEvery
	if every == 0 {
		every = 10 * time.Second
	}
	var lastErr time.Time
	for {
		waited := false
		if s.dialect == migrations.Postgres {
			l.connMu.Lock()
			if conn := l.conn; conn != nil {
				wctx, cancel := context.WithTimeout(ctx, every)
				conn.PgConn().WaitForNotification(wctx) // returns at the beat, or when the connection goes
				cancel()
				waited = true
			}
			l.connMu.Unlock()
		}
		if !waited {
			select {
			case <-ctx.Done():
			case <-time.After(every):
			}
		}
		if ctx.Err() != nil {
			return
		}
		cctx, cancel := context.WithTimeout(ctx, every)
		err := s.CheckLock(cctx)
		cancel()
		if errors.Is(err, agent.ErrLockLost) {
			return
		}
		if err != nil && time.Since(lastErr) > time.Minute {
			lastErr = time.Now()
			s.lockLog.Warn("cannot check the state store lock", "store", s.display, "err", err)
		}
		if err != nil && s.dialect == migrations.Postgres {
			// The connection may be gone; do not spin on it.
			select {
			case <-ctx.Done():
				return
			case <-time.After(min(every, 5*time.Second)):
			}
		}
	}
}

func describeHolder(li *agent.LockInfo) string {
	if li == nil {
		return "unknown"
	}
	return fmt.Sprintf("%s (pid %d on %s, since %s)", li.Holder, li.PID, li.Host, li.AcquiredAt.UTC().Format(time.RFC3339))
}

func (s *Store) lockInfo(ctx context.Context) *agent.LockInfo {
	var (
		li       agent.LockInfo
		acquired int64
	)
	err := s.db.QueryRowContext(ctx, s.q(`SELECT holder, pid, host, acquired_at FROM plumb_lock WHERE id = 1`)).
		Scan(&li.Holder, &li.PID, &li.Host, &acquired)
	if err != nil {
		return nil // no row (a crashed holder on SQLite rewrites it) or unreadable
	}
	li.AcquiredAt = fromMicro(acquired)
	return &li
}

// discard is the lock's logger when none is given.
var discard = slog.New(slog.DiscardHandler)
