package sqlstore

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"plumb/agent"
	"plumb/migrations"
)

// q rewrites ? placeholders as $1, $2, … for PostgreSQL. The queries of
// this package have no ? inside literals.
func (s *Store) q(query string) string {
	if s.dialect != migrations.Postgres {
		return query
	}
	var b strings.Builder
	n := 0
	for _, r := range query {
		if r == '?' {
			n++
			b.WriteString("$" + strconv.Itoa(n))
			continue
		}
		b.WriteRune(r)
	}
	return b.String()
}

func (s *Store) exec(ctx context.Context, query string, args ...any) (sql.Result, error) {
	return s.db.ExecContext(ctx, s.q(query), args...)
}

// Times are stored as unix microseconds; the zero time is NULL.
func micro(t time.Time) any {
	if t.IsZero() {
		return nil
	}
	return t.UnixMicro()
}

func fromMicro(v int64) time.Time { return time.UnixMicro(v).UTC() }

func fromNullMicro(v sql.NullInt64) time.Time {
	if !v.Valid {
		return time.Time{}
	}
	return fromMicro(v.Int64)
}

// Non-finite floats are stored as NULL.
func nullFloat(x float64) any {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return x
}

func orElse(v sql.NullFloat64, undefined float64) float64 {
	if !v.Valid {
		return undefined
	}
	return v.Float64
}

func nullString(s string) any {
	if s == "" {
		return nil
	}
	return s
}

// Open ends of a time range.
const (
	minMicro = math.MinInt64
	maxMicro = math.MaxInt64
)

func rangeMicro(from, to time.Time) (int64, int64) {
	f, t := int64(minMicro), int64(maxMicro)
	if !from.IsZero() {
		f = from.UnixMicro()
	}
	if !to.IsZero() {
		t = to.UnixMicro()
	}
	return f, t
}

func (s *Store) wrap(what string, err error) error {
	if err == nil {
		return nil
	}
	return fmt.Errorf("state store %s: %s: %w", s.display, what, err)
}

// LastBucket returns the start of the watch's newest bucket.
func (s *Store) LastBucket(ctx context.Context, watch string) (time.Time, bool, error) {
	var v sql.NullInt64
	err := s.db.QueryRowContext(ctx, s.q(`SELECT max(bucket_start) FROM plumb_buckets WHERE watch = ?`), watch).Scan(&v)
	if err != nil {
		return time.Time{}, false, s.wrap("reading buckets of "+watch, err)
	}
	return fromNullMicro(v), v.Valid, nil
}

// FirstBuckets returns the start of the oldest bucket of each of the
// watch's segments.
func (s *Store) FirstBuckets(ctx context.Context, watch string) (map[string]time.Time, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT segment, min(bucket_start) FROM plumb_buckets WHERE watch = ? GROUP BY segment`), watch)
	if err != nil {
		return nil, s.wrap("reading buckets of "+watch, err)
	}
	defer rows.Close()
	out := map[string]time.Time{}
	for rows.Next() {
		var seg string
		var v int64
		if err := rows.Scan(&seg, &v); err != nil {
			return nil, s.wrap("reading buckets of "+watch, err)
		}
		out[seg] = time.UnixMicro(v).UTC()
	}
	return out, s.wrap("reading buckets of "+watch, rows.Err())
}

// Buckets returns the watch's buckets starting in [from, to).
func (s *Store) Buckets(ctx context.Context, watch string, from, to time.Time) ([]agent.Bucket, error) {
	f, t := rangeMicro(from, to)
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT segment, bucket_start, columns, rows, moments, qr
		FROM plumb_buckets WHERE watch = ? AND bucket_start >= ? AND bucket_start < ?
		ORDER BY bucket_start, segment`), watch, f, t)
	if err != nil {
		return nil, s.wrap("reading buckets of "+watch, err)
	}
	defer rows.Close()
	var out []agent.Bucket
	for rows.Next() {
		b := agent.Bucket{Watch: watch}
		var (
			start int64
			cols  string
		)
		if err := rows.Scan(&b.Segment, &start, &cols, &b.Rows, &b.Moments, &b.QR); err != nil {
			return nil, s.wrap("reading buckets of "+watch, err)
		}
		b.Start = fromMicro(start)
		b.Columns = splitColumns(cols)
		out = append(out, b)
	}
	return out, s.wrap("reading buckets of "+watch, rows.Err())
}

// Column lists are stored as JSON arrays (names may hold commas).
func joinColumns(cols []string) string {
	b, _ := json.Marshal(cols)
	return string(b)
}

func splitColumns(s string) []string {
	var cols []string
	if json.Unmarshal([]byte(s), &cols) != nil {
		return nil
	}
	return cols
}

// Points returns points of a watch, oldest first.
func (s *Store) Points(ctx context.Context, watch string, pq agent.PointQuery) ([]agent.Point, error) {
	f, t := rangeMicro(pq.From, pq.To)
	query := `SELECT segment, at, run_id, rows_used, rows_dropped, condition_number, centered_condition,
		max_vif, max_vif_column, rank, columns, report
		FROM plumb_points WHERE watch = ? AND at >= ? AND at < ?`
	args := []any{watch, f, t}
	if !pq.AllSegs {
		query += ` AND segment = ?`
		args = append(args, pq.Segment)
	}
	query += ` ORDER BY at DESC, segment DESC`
	if pq.Limit > 0 {
		query += ` LIMIT ?`
		args = append(args, pq.Limit)
	}
	rows, err := s.db.QueryContext(ctx, s.q(query), args...)
	if err != nil {
		return nil, s.wrap("reading the history of "+watch, err)
	}
	defer rows.Close()
	var out []agent.Point
	for rows.Next() {
		p := agent.Point{Watch: watch}
		var (
			at             int64
			cond, cc, mvif sql.NullFloat64
			mcol, report   sql.NullString
		)
		if err := rows.Scan(&p.Segment, &at, &p.RunID, &p.RowsUsed, &p.RowsDropped, &cond, &cc, &mvif, &mcol,
			&p.Rank, &p.Columns, &report); err != nil {
			return nil, s.wrap("reading the history of "+watch, err)
		}
		p.At = fromMicro(at)
		p.ConditionNumber = orElse(cond, math.Inf(1))
		p.CenteredCondition = orElse(cc, math.Inf(1))
		p.MaxVIF = orElse(mvif, math.Inf(1))
		p.MaxVIFColumn = mcol.String
		if report.Valid {
			p.Report = json.RawMessage(report.String)
		}
		out = append(out, p)
	}
	if err := rows.Err(); err != nil {
		return nil, s.wrap("reading the history of "+watch, err)
	}
	slices.Reverse(out)
	return out, nil
}

// PointColumns returns the per-column metrics of one point.
func (s *Store) PointColumns(ctx context.Context, watch, segment string, at time.Time) ([]agent.ColumnMetric, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT name, vif, tolerance, r2, se_inflation, constant, mean, sd
		FROM plumb_point_columns WHERE watch = ? AND segment = ? AND at = ? ORDER BY name`), watch, segment, at.UnixMicro())
	if err != nil {
		return nil, s.wrap("reading column metrics of "+watch, err)
	}
	defer rows.Close()
	var out []agent.ColumnMetric
	for rows.Next() {
		var (
			c                            agent.ColumnMetric
			vif, tol, r2, se, mean, sdev sql.NullFloat64
		)
		if err := rows.Scan(&c.Name, &vif, &tol, &r2, &se, &c.Constant, &mean, &sdev); err != nil {
			return nil, s.wrap("reading column metrics of "+watch, err)
		}
		nan := math.NaN()
		c.VIF, c.Tolerance, c.R2, c.SEInflation = orElse(vif, nan), orElse(tol, nan), orElse(r2, nan), orElse(se, nan)
		c.Mean, c.SD = orElse(mean, nan), orElse(sdev, nan)
		out = append(out, c)
	}
	return out, s.wrap("reading column metrics of "+watch, rows.Err())
}

// Runs returns the latest runs, newest first.
func (s *Store) Runs(ctx context.Context, watch string, limit int) ([]agent.Run, error) {
	query := `SELECT id, watch, kind, status, started_at, finished_at, rows_read, rows_dropped,
		buckets_scanned, points, as_of, error FROM plumb_runs`
	var args []any
	if watch != "" {
		query += ` WHERE watch = ?`
		args = append(args, watch)
	}
	query += ` ORDER BY id DESC`
	if limit > 0 {
		query += ` LIMIT ?`
		args = append(args, limit)
	}
	rows, err := s.db.QueryContext(ctx, s.q(query), args...)
	if err != nil {
		return nil, s.wrap("reading runs", err)
	}
	defer rows.Close()
	var out []agent.Run
	for rows.Next() {
		var (
			r              agent.Run
			kind           string
			started, ended int64
			asOf           sql.NullInt64
			msg            sql.NullString
		)
		if err := rows.Scan(&r.ID, &r.Watch, &kind, &r.Status, &started, &ended, &r.RowsRead, &r.RowsDropped,
			&r.BucketsScanned, &r.Points, &asOf, &msg); err != nil {
			return nil, s.wrap("reading runs", err)
		}
		r.Kind = agent.RunKind(kind)
		r.StartedAt, r.FinishedAt, r.AsOf = fromMicro(started), fromMicro(ended), fromNullMicro(asOf)
		r.Error = msg.String
		out = append(out, r)
	}
	return out, s.wrap("reading runs", rows.Err())
}

// States returns the rule states of a watch.
func (s *Store) States(ctx context.Context, watch string) ([]agent.WatchState, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT segment, evaluated_through, state, failures, last_run_at
		FROM plumb_watch_state WHERE watch = ? ORDER BY segment`), watch)
	if err != nil {
		return nil, s.wrap("reading the state of "+watch, err)
	}
	defer rows.Close()
	var out []agent.WatchState
	for rows.Next() {
		st := agent.WatchState{Watch: watch}
		var (
			through, last sql.NullInt64
			state         string
		)
		if err := rows.Scan(&st.Segment, &through, &state, &st.Failures, &last); err != nil {
			return nil, s.wrap("reading the state of "+watch, err)
		}
		st.EvaluatedThrough, st.LastRunAt = fromNullMicro(through), fromNullMicro(last)
		st.State = json.RawMessage(state)
		out = append(out, st)
	}
	return out, s.wrap("reading the state of "+watch, rows.Err())
}

const alertCols = `id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of, updated_at,
	resolved_as_of, resolved_at, message, detail, notify_state, onset, columns, drivers, data_window`

// ackCols are the acknowledgement's columns, read after alertCols. Runs
// never write them (Acknowledge and the end of a snooze do).
const ackCols = `ack_by, ack_at, ack_until, ack_note, ack_severity, ack_ended_at`

func scanAlert(rows *sql.Rows) (agent.Alert, error) {
	var (
		a                          agent.Alert
		rule, sev, detail, cols    string
		asOf, opened, updAsOf, upd int64
		resAsOf, res, onset        sql.NullInt64
		drivers, window            sql.NullString
		ackBy, ackNote, ackSev     sql.NullString
		ackAt, ackUntil, ackEnded  sql.NullInt64
	)
	err := rows.Scan(&a.ID, &a.Watch, &a.Segment, &rule, &a.Subject, &sev, &asOf, &opened, &updAsOf, &upd,
		&resAsOf, &res, &a.Message, &detail, &a.NotifyState, &onset, &cols, &drivers, &window,
		&ackBy, &ackAt, &ackUntil, &ackNote, &ackSev, &ackEnded)
	if err != nil {
		return a, err
	}
	a.Onset = fromNullMicro(onset)
	if err := json.Unmarshal([]byte(cols), &a.Columns); err != nil {
		return a, fmt.Errorf("alert %s: columns: %w", a.ID, err)
	}
	if drivers.Valid {
		if err := json.Unmarshal([]byte(drivers.String), &a.Drivers); err != nil {
			return a, fmt.Errorf("alert %s: drivers: %w", a.ID, err)
		}
	}
	if window.Valid {
		a.Window = &agent.AlertWindow{}
		if err := json.Unmarshal([]byte(window.String), a.Window); err != nil {
			return a, fmt.Errorf("alert %s: window: %w", a.ID, err)
		}
	}
	a.Rule, a.Severity = agent.Rule(rule), agent.Severity(sev)
	a.AsOf, a.OpenedAt, a.UpdatedAsOf, a.UpdatedAt = fromMicro(asOf), fromMicro(opened), fromMicro(updAsOf), fromMicro(upd)
	a.ResolvedAsOf, a.ResolvedAt = fromNullMicro(resAsOf), fromNullMicro(res)
	if err := json.Unmarshal([]byte(detail), &a.Detail); err != nil {
		return a, fmt.Errorf("alert %s: detail: %w", a.ID, err)
	}
	if ackBy.Valid {
		a.Ack = &agent.Ack{By: ackBy.String, At: fromNullMicro(ackAt), Until: fromNullMicro(ackUntil), Note: ackNote.String,
			Severity: agent.Severity(ackSev.String), EndedAt: fromNullMicro(ackEnded)}
	}
	return a, nil
}

// Acknowledge records an owner's acknowledgement of an open alert.
func (s *Store) Acknowledge(ctx context.Context, id string, ack agent.Ack) (agent.Alert, error) {
	res, err := s.exec(ctx, `UPDATE plumb_alerts SET ack_by = ?, ack_at = ?, ack_until = ?, ack_note = ?,
		ack_severity = severity, ack_ended_at = NULL WHERE id = ? AND resolved_at IS NULL`,
		ack.By, ack.At.UnixMicro(), micro(ack.Until), nullString(ack.Note), id)
	if err != nil {
		return agent.Alert{}, s.wrap("acknowledging alert "+id, err)
	}
	n, err := res.RowsAffected()
	if err != nil {
		return agent.Alert{}, s.wrap("acknowledging alert "+id, err)
	}
	a, found, err := s.alert(ctx, id)
	switch {
	case err != nil:
		return agent.Alert{}, err
	case !found:
		return agent.Alert{}, fmt.Errorf("alert %s: %w", id, agent.ErrNoAlert)
	case n == 0:
		return a, fmt.Errorf("alert %s: %w (as of %s)", id, agent.ErrAlertResolved, a.ResolvedAsOf.UTC().Format(time.RFC3339))
	}
	return a, nil
}

// alert reads one alert by id.
func (s *Store) alert(ctx context.Context, id string) (agent.Alert, bool, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT `+alertCols+`, `+ackCols+` FROM plumb_alerts WHERE id = ?`), id)
	if err != nil {
		return agent.Alert{}, false, s.wrap("reading alert "+id, err)
	}
	defer rows.Close()
	if !rows.Next() {
		return agent.Alert{}, false, s.wrap("reading alert "+id, rows.Err())
	}
	a, err := scanAlert(rows)
	return a, err == nil, s.wrap("reading alert "+id, err)
}

// Alerts returns alerts ordered by data time.
func (s *Store) Alerts(ctx context.Context, aq agent.AlertQuery) ([]agent.Alert, error) {
	query := `SELECT ` + alertCols + `, ` + ackCols + ` FROM plumb_alerts WHERE 1 = 1`
	var args []any
	if aq.Watch != "" {
		query += ` AND watch = ?`
		args = append(args, aq.Watch)
	}
	if aq.OpenOnly {
		query += ` AND resolved_at IS NULL`
	}
	if !aq.Since.IsZero() {
		query += ` AND (resolved_at IS NULL OR resolved_at >= ?)`
		args = append(args, aq.Since.UnixMicro())
	}
	query += ` ORDER BY as_of, watch, segment, id`
	if aq.Limit > 0 {
		query += ` LIMIT ?`
		args = append(args, aq.Limit)
	}
	rows, err := s.db.QueryContext(ctx, s.q(query), args...)
	if err != nil {
		return nil, s.wrap("reading alerts", err)
	}
	defer rows.Close()
	var out []agent.Alert
	for rows.Next() {
		a, err := scanAlert(rows)
		if err != nil {
			return nil, s.wrap("reading alerts", err)
		}
		out = append(out, a)
	}
	return out, s.wrap("reading alerts", rows.Err())
}

// CommitRun writes a run's results in one transaction.
func (s *Store) CommitRun(ctx context.Context, r *agent.RunResult) (int64, error) {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return 0, s.wrap("starting the run's transaction", err)
	}
	defer tx.Rollback()
	if err := s.fence(ctx, tx); err != nil {
		return 0, s.wrap(fmt.Sprintf("the run of %s is not recorded", r.Run.Watch), err)
	}
	id, err := s.commit(ctx, tx, r)
	if err != nil {
		return 0, s.wrap(fmt.Sprintf("writing the run of %s", r.Run.Watch), err)
	}
	if err := tx.Commit(); err != nil {
		return 0, s.wrap(fmt.Sprintf("committing the run of %s", r.Run.Watch), err)
	}
	r.Run.ID = id
	return id, nil
}

func (s *Store) commit(ctx context.Context, tx *sql.Tx, r *agent.RunResult) (int64, error) {
	run := &r.Run
	exec := func(query string, args ...any) error {
		_, err := tx.ExecContext(ctx, s.q(query), args...)
		return err
	}
	var id int64
	err := tx.QueryRowContext(ctx, s.q(`INSERT INTO plumb_runs (watch, kind, status, started_at, finished_at,
		duration_ms, rows_read, rows_dropped, buckets_scanned, points, as_of, error)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) RETURNING id`),
		run.Watch, string(run.Kind), run.Status, run.StartedAt.UnixMicro(), run.FinishedAt.UnixMicro(),
		run.FinishedAt.Sub(run.StartedAt).Milliseconds(), run.RowsRead, run.RowsDropped, run.BucketsScanned,
		run.Points, micro(run.AsOf), nullString(run.Error)).Scan(&id)
	if err != nil {
		return 0, fmt.Errorf("run: %w", err)
	}

	switch {
	case r.ReplaceAllBuckets:
		if err := exec(`DELETE FROM plumb_buckets WHERE watch = ?`, run.Watch); err != nil {
			return 0, fmt.Errorf("buckets: %w", err)
		}
	case !r.ReplaceBucketsFrom.IsZero():
		if err := exec(`DELETE FROM plumb_buckets WHERE watch = ? AND bucket_start >= ?`, run.Watch, r.ReplaceBucketsFrom.UnixMicro()); err != nil {
			return 0, fmt.Errorf("buckets: %w", err)
		}
	}
	if len(r.Buckets) > 0 {
		st, err := tx.PrepareContext(ctx, s.q(`INSERT INTO plumb_buckets (watch, segment, bucket_start, columns, rows, moments, qr, run_id)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?)
			ON CONFLICT (watch, segment, bucket_start) DO UPDATE SET columns = excluded.columns, rows = excluded.rows,
				moments = excluded.moments, qr = excluded.qr, run_id = excluded.run_id`))
		if err != nil {
			return 0, fmt.Errorf("buckets: %w", err)
		}
		defer st.Close()
		for _, b := range r.Buckets {
			var qr any
			if b.QR != nil {
				qr = b.QR
			}
			if _, err := st.ExecContext(ctx, run.Watch, b.Segment, b.Start.UnixMicro(), joinColumns(b.Columns), b.Rows, b.Moments, qr, id); err != nil {
				return 0, fmt.Errorf("bucket %s: %w", b.Start.Format(time.RFC3339), err)
			}
		}
	}

	if !r.ReplacePointsFrom.IsZero() {
		from := r.ReplacePointsFrom.UnixMicro()
		if err := exec(`DELETE FROM plumb_point_columns WHERE watch = ? AND at >= ?`, run.Watch, from); err != nil {
			return 0, fmt.Errorf("points: %w", err)
		}
		if err := exec(`DELETE FROM plumb_points WHERE watch = ? AND at >= ?`, run.Watch, from); err != nil {
			return 0, fmt.Errorf("points: %w", err)
		}
	}
	if len(r.Points) > 0 {
		pst, err := tx.PrepareContext(ctx, s.q(`INSERT INTO plumb_points (watch, segment, at, run_id, rows_used, rows_dropped,
			condition_number, centered_condition, max_vif, max_vif_column, rank, columns, report)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)
			ON CONFLICT (watch, segment, at) DO UPDATE SET run_id = excluded.run_id, rows_used = excluded.rows_used,
				rows_dropped = excluded.rows_dropped, condition_number = excluded.condition_number,
				centered_condition = excluded.centered_condition, max_vif = excluded.max_vif,
				max_vif_column = excluded.max_vif_column, rank = excluded.rank, columns = excluded.columns,
				report = excluded.report`))
		if err != nil {
			return 0, fmt.Errorf("points: %w", err)
		}
		defer pst.Close()
		dst, err := tx.PrepareContext(ctx, s.q(`DELETE FROM plumb_point_columns WHERE watch = ? AND segment = ? AND at = ?`))
		if err != nil {
			return 0, fmt.Errorf("points: %w", err)
		}
		defer dst.Close()
		cst, err := tx.PrepareContext(ctx, s.q(`INSERT INTO plumb_point_columns (watch, segment, at, name, vif, tolerance,
			r2, se_inflation, constant, mean, sd) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`))
		if err != nil {
			return 0, fmt.Errorf("points: %w", err)
		}
		defer cst.Close()
		for i := range r.Points {
			p := &r.Points[i]
			p.RunID = id
			at := p.At.UnixMicro()
			var report any
			if len(p.Report) > 0 {
				report = string(p.Report)
			}
			if _, err := pst.ExecContext(ctx, run.Watch, p.Segment, at, id, p.RowsUsed, p.RowsDropped,
				nullFloat(p.ConditionNumber), nullFloat(p.CenteredCondition), nullFloat(p.MaxVIF),
				nullString(p.MaxVIFColumn), p.Rank, p.Columns, report); err != nil {
				return 0, fmt.Errorf("point %s: %w", p.At.Format(time.RFC3339), err)
			}
			if _, err := dst.ExecContext(ctx, run.Watch, p.Segment, at); err != nil {
				return 0, fmt.Errorf("point %s: %w", p.At.Format(time.RFC3339), err)
			}
			for _, c := range p.PerColumn {
				if _, err := cst.ExecContext(ctx, run.Watch, p.Segment, at, c.Name, nullFloat(c.VIF), nullFloat(c.Tolerance),
					nullFloat(c.R2), nullFloat(c.SEInflation), c.Constant, nullFloat(c.Mean), nullFloat(c.SD)); err != nil {
					return 0, fmt.Errorf("point %s column %q: %w", p.At.Format(time.RFC3339), c.Name, err)
				}
			}
		}
	}

	for _, aid := range r.DeleteAlerts {
		if err := exec(`DELETE FROM plumb_outbox WHERE alert_id = ?`, aid); err != nil {
			return 0, fmt.Errorf("alert %s: %w", aid, err)
		}
		if err := exec(`DELETE FROM plumb_alerts WHERE id = ?`, aid); err != nil {
			return 0, fmt.Errorf("alert %s: %w", aid, err)
		}
	}
	for _, a := range r.Alerts {
		detail, err := json.Marshal(a.Detail)
		if err != nil {
			return 0, fmt.Errorf("alert %s: %w", a.ID, err)
		}
		cols := a.Columns
		if cols == nil {
			cols = []string{}
		}
		colsJSON, _ := json.Marshal(cols)
		var drivers, window any
		if len(a.Drivers) > 0 {
			b, _ := json.Marshal(a.Drivers)
			drivers = string(b)
		}
		if a.Window != nil {
			b, _ := json.Marshal(a.Window)
			window = string(b)
		}
		if err := exec(`INSERT INTO plumb_alerts (`+alertCols+`) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)
			ON CONFLICT (id) DO UPDATE SET rule = excluded.rule, subject = excluded.subject,
				severity = excluded.severity, updated_as_of = excluded.updated_as_of,
				updated_at = excluded.updated_at, resolved_as_of = excluded.resolved_as_of,
				resolved_at = excluded.resolved_at, message = excluded.message, detail = excluded.detail,
				notify_state = excluded.notify_state, onset = excluded.onset, columns = excluded.columns,
				drivers = excluded.drivers, data_window = excluded.data_window`,
			a.ID, a.Watch, a.Segment, string(a.Rule), a.Subject, string(a.Severity), a.AsOf.UnixMicro(), a.OpenedAt.UnixMicro(),
			a.UpdatedAsOf.UnixMicro(), a.UpdatedAt.UnixMicro(), micro(a.ResolvedAsOf), micro(a.ResolvedAt),
			a.Message, string(detail), a.NotifyState, micro(a.Onset), string(colsJSON), drivers, window); err != nil {
			return 0, fmt.Errorf("alert %s: %w", a.ID, err)
		}
	}
	for _, st := range r.States {
		state := string(st.State)
		if state == "" {
			state = "{}"
		}
		if err := exec(`INSERT INTO plumb_watch_state (watch, segment, evaluated_through, state, failures, last_run_at)
			VALUES (?, ?, ?, ?, ?, ?)
			ON CONFLICT (watch, segment) DO UPDATE SET evaluated_through = excluded.evaluated_through,
				state = excluded.state, failures = excluded.failures, last_run_at = excluded.last_run_at`,
			st.Watch, st.Segment, micro(st.EvaluatedThrough), state, st.Failures, micro(st.LastRunAt)); err != nil {
			return 0, fmt.Errorf("state of %s/%s: %w", st.Watch, st.Segment, err)
		}
	}
	for _, se := range r.SnoozesEnded {
		if err := exec(`UPDATE plumb_alerts SET ack_ended_at = ? WHERE id = ? AND ack_until = ? AND ack_ended_at IS NULL`,
			se.At.UnixMicro(), se.AlertID, se.Until.UnixMicro()); err != nil {
			return 0, fmt.Errorf("alert %s: end of snooze: %w", se.AlertID, err)
		}
	}
	for _, d := range r.Outbox {
		if err := exec(`INSERT INTO plumb_outbox (event_id, alert_id, notifier, event, body, created_at, attempts, next_attempt_at)
			VALUES (?, ?, ?, ?, ?, ?, 0, ?) ON CONFLICT (event_id) DO NOTHING`,
			d.EventID, d.AlertID, d.Notifier, d.Event, string(d.Body), d.CreatedAt.UnixMicro(), d.NextAttemptAt.UnixMicro()); err != nil {
			return 0, fmt.Errorf("outbox %s: %w", d.EventID, err)
		}
	}
	return id, nil
}

// outboxColumns are the columns readDeliveries scans, in order.
const outboxColumns = `id, event_id, alert_id, notifier, event, body, created_at, attempts, next_attempt_at,
		last_error, delivered_at, given_up_at`

// Due returns outbox entries to attempt at now.
func (s *Store) Due(ctx context.Context, now time.Time, limit int) ([]agent.Delivery, error) {
	if limit <= 0 {
		limit = 100
	}
	if err := s.lockGone(); err != nil {
		return nil, s.wrap("the outbox waits", err)
	}
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT `+outboxColumns+` FROM plumb_outbox
		WHERE delivered_at IS NULL AND given_up_at IS NULL AND next_attempt_at <= ?
		ORDER BY id LIMIT ?`), now.UnixMicro(), limit)
	if err != nil {
		return nil, s.wrap("reading the outbox", err)
	}
	return s.readDeliveries(rows)
}

// Outbox returns every outbox entry of an alert ("" for all), oldest first.
func (s *Store) Outbox(ctx context.Context, alertID string) ([]agent.Delivery, error) {
	query := `SELECT ` + outboxColumns + ` FROM plumb_outbox`
	var args []any
	if alertID != "" {
		query += ` WHERE alert_id = ?`
		args = append(args, alertID)
	}
	rows, err := s.db.QueryContext(ctx, s.q(query+` ORDER BY id`), args...)
	if err != nil {
		return nil, s.wrap("reading the outbox", err)
	}
	return s.readDeliveries(rows)
}

// readDeliveries scans and closes rows of outboxColumns.
func (s *Store) readDeliveries(rows *sql.Rows) ([]agent.Delivery, error) {
	defer rows.Close()
	var out []agent.Delivery
	for rows.Next() {
		var (
			d                agent.Delivery
			body             string
			created, next    int64
			last             sql.NullString
			delivered, given sql.NullInt64
		)
		if err := rows.Scan(&d.ID, &d.EventID, &d.AlertID, &d.Notifier, &d.Event, &body, &created, &d.Attempts, &next,
			&last, &delivered, &given); err != nil {
			return nil, s.wrap("reading the outbox", err)
		}
		d.Body = []byte(body)
		d.CreatedAt, d.NextAttemptAt, d.LastError = fromMicro(created), fromMicro(next), last.String
		d.DeliveredAt, d.GivenUpAt = fromNullMicro(delivered), fromNullMicro(given)
		out = append(out, d)
	}
	return out, s.wrap("reading the outbox", rows.Err())
}

// Delivered marks an outbox entry done.
func (s *Store) Delivered(ctx context.Context, id int64, at time.Time) error {
	return s.write(ctx, "updating the outbox", `UPDATE plumb_outbox SET delivered_at = ?, attempts = attempts + 1, last_error = NULL WHERE id = ?`, at.UnixMicro(), id)
}

// Failed records a failed delivery attempt.
func (s *Store) Failed(ctx context.Context, id int64, attempts int, next time.Time, lastErr string, giveUp bool) error {
	var given any
	if giveUp {
		given = time.Now().UnixMicro()
	}
	return s.write(ctx, "updating the outbox", `UPDATE plumb_outbox SET attempts = ?, next_attempt_at = ?, last_error = ?, given_up_at = ? WHERE id = ?`,
		attempts, next.UnixMicro(), lastErr, given, id)
}

// write runs one statement in a transaction behind the lock's fence.
func (s *Store) write(ctx context.Context, what, query string, args ...any) error {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return s.wrap(what, err)
	}
	defer tx.Rollback()
	if err := s.fence(ctx, tx); err != nil {
		return s.wrap(what, err)
	}
	if _, err := tx.ExecContext(ctx, s.q(query), args...); err != nil {
		return s.wrap(what, err)
	}
	return s.wrap(what, tx.Commit())
}
