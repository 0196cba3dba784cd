package sqlite

import (
	"context"
	"database/sql/driver"
	"errors"
	"fmt"
	"strings"

	msqlite "modernc.org/sqlite"

	"plumb/connectors"
)

// checkReadOnly compiles query, without running it, under an authorizer
// that lets through only what a reading SELECT does: read columns, call
// functions, recurse in a WITH. Anything else (ATTACH, PRAGMA, writes,
// schema changes, transactions) refuses the query before a byte is
// touched: SQLite's read-only mode does not stop ATTACH from creating a
// file. SQLite presents VACUUM and REINDEX to no authorizer; they are
// stopped before, by connectors.CleanQuery, which admits only statements
// that start with SELECT, WITH or VALUES. The authorizer is removed before
// the connection goes back to the pool.
func (s *Source) checkReadOnly(ctx context.Context, query string) error {
	conn, err := s.db.Conn(ctx)
	if err != nil {
		return s.wrap(err)
	}
	defer conn.Close()
	var refused []string
	policy := func(action msqlite.AuthorizerActionCode, arg1, arg2, _, _ string) msqlite.AuthorizerReturnCode {
		switch action {
		case msqlite.AuthSelect, msqlite.AuthRead, msqlite.AuthRecursive:
			return msqlite.AuthorizerOK
		case msqlite.AuthFunction:
			if !strings.EqualFold(arg2, "load_extension") {
				return msqlite.AuthorizerOK
			}
		}
		refused = append(refused, actionName(action, arg1, arg2))
		return msqlite.AuthorizerDeny
	}
	var prepErr error
	err = conn.Raw(func(dc any) error {
		reg, ok := dc.(msqlite.AuthorizerRegisterer)
		prep, ok2 := dc.(driver.ConnPrepareContext)
		if !ok || !ok2 {
			return errors.New("the SQLite driver cannot check a statement before running it")
		}
		if err := reg.RegisterAuthorizer(policy); err != nil {
			return err
		}
		st, err := prep.PrepareContext(ctx, query)
		if err == nil {
			st.Close()
		}
		prepErr = err
		if err := reg.RegisterAuthorizer(nil); err != nil {
			return driver.ErrBadConn // drop the connection rather than keep the policy
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("query: %w", s.wrap(err))
	}
	if len(refused) > 0 {
		return fmt.Errorf("query: only a reading SELECT runs; this one would %s: %w", strings.Join(refused, ", "), connectors.ErrFragment)
	}
	if prepErr != nil {
		return fmt.Errorf("query: %w", s.wrap(prepErr))
	}
	return nil
}

// actionName says what a refused action would have done.
func actionName(a msqlite.AuthorizerActionCode, arg1, arg2 string) string {
	switch a {
	case msqlite.AuthAttach:
		return "attach a database"
	case msqlite.AuthDetach:
		return "detach a database"
	case msqlite.AuthPragma:
		return "run PRAGMA " + arg1
	case msqlite.AuthInsert, msqlite.AuthUpdate, msqlite.AuthDelete:
		return "write to " + arg1
	case msqlite.AuthTransaction, msqlite.AuthSavepoint:
		return "control a transaction"
	case msqlite.AuthFunction:
		return "call " + arg2
	case msqlite.AuthAnalyze:
		return "analyze"
	}
	return fmt.Sprintf("change the schema (authorizer action %d)", a)
}
