package sqlstore

import (
	"context"
	"errors"
	"fmt"
	"os"
	"sync"
	"syscall"
	"time"

	"plumb/agent"
	"plumb/migrations"
)

// Lock makes this process the store's only writer. On SQLite it takes an
// exclusive flock(2) on PATH.lock, on PostgreSQL a session advisory lock
// on a connection kept for the purpose; either is released by release or
// by the holder's death. The holder's name, pid and host are written to
// plumb_lock so that a refused process can say who holds the store.
func (s *Store) Lock(ctx context.Context, holder string) (func() error, error) {
	var (
		release func() error
		err     error
	)
	switch s.dialect {
	case migrations.SQLite:
		release, err = s.lockFile()
	case migrations.Postgres:
		release, err = s.lockAdvisory(ctx)
	}
	if err != nil {
		var le *agent.LockedError
		if errors.As(err, &le) {
			le.Info = s.lockInfo(ctx)
		}
		return nil, err
	}
	host, _ := os.Hostname()
	now := time.Now()
	if _, err := s.exec(ctx, `INSERT INTO plumb_lock (id, holder, pid, host, acquired_at, heartbeat_at)
		VALUES (1, ?, ?, ?, ?, ?)
		ON CONFLICT (id) DO UPDATE SET holder = excluded.holder, pid = excluded.pid, host = excluded.host,
			acquired_at = excluded.acquired_at, heartbeat_at = excluded.heartbeat_at`,
		holder, os.Getpid(), host, micro(now), micro(now)); err != nil {
		release()
		return nil, fmt.Errorf("state store %s: recording the lock holder: %w", s.display, err)
	}
	var once sync.Once
	var rerr error
	return func() error {
		once.Do(func() {
			ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
			defer cancel()
			_, err := s.exec(ctx, `DELETE FROM plumb_lock WHERE id = 1 AND pid = ?`, os.Getpid())
			rerr = errors.Join(err, release())
		})
		return rerr
	}, nil
}

func (s *Store) lockFile() (func() error, error) {
	path := s.path + ".lock"
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("state store %s: lock file: %w", s.path, err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, &agent.LockedError{}
		}
		return nil, fmt.Errorf("state store %s: locking %s: %w", s.path, path, err)
	}
	return func() error {
		// Closing the descriptor drops the lock.
		return f.Close()
	}, nil
}

// advisoryKey names the lock; the schema is part of it so that stores in
// different schemas of one database do not exclude each other.
const advisoryKey = `hashtext('plumb-agent:' || current_schema())`

func (s *Store) lockAdvisory(ctx context.Context) (func() error, error) {
	conn, err := s.db.Conn(ctx)
	if err != nil {
		return nil, fmt.Errorf("state store %s: %w", s.display, err)
	}
	var ok bool
	if err := conn.QueryRowContext(ctx, `SELECT pg_try_advisory_lock(`+advisoryKey+`)`).Scan(&ok); err != nil {
		conn.Close()
		return nil, fmt.Errorf("state store %s: taking the advisory lock: %w", s.display, err)
	}
	if !ok {
		conn.Close()
		return nil, &agent.LockedError{}
	}
	return func() error {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		_, err := conn.ExecContext(ctx, `SELECT pg_advisory_unlock(`+advisoryKey+`)`)
		// Closing the connection would release it as well.
		return errors.Join(err, conn.Close())
	}, nil
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
