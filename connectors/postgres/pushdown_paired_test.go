package postgres

import (
	"context"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

// TestPushdownPairedWidths: the paired statement, the default for a whole
// unweighted table, for one to six columns (one column alone, even and
// odd counts, whose last column pairs with the first), among them a
// column of mean 1e9 and spread 1 and a constant one, gives the
// accumulators of streaming to 1e-12 (the bound of the other pushdown
// tests), the constant column exactly constant. The statement holds one
// regr state per pair and a shifted product for every other pair of
// columns.
func TestPushdownPairedWidths(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE district_flow AS
		SELECT i,
			1e9 + sin(i * 0.37) AS meter_reading,
			15 + 8 * cos(i * 0.11) AS temperature,
			4.25::float8 AS valve_setting,
			3.2 + (i % 17) * 0.05 + sin(i) * 0.01 AS pressure,
			(i % 29)::float8 - 14 AS tariff_band,
			2 * (15 + 8 * cos(i * 0.11)) + 0.001 * sin(i * 3.1) AS heating_load
		FROM generate_series(1, 5000) AS i`,
		`ANALYZE district_flow`)
	ctx := context.Background()
	stream := openPG(t, u, connectors.Options{})
	push := openPG(t, u, connectors.Options{Pushdown: true})
	all := []string{"meter_reading", "temperature", "valve_setting", "pressure", "tariff_band", "heating_load"}
	for p := 1; p <= len(all); p++ {
		req := connectors.Request{Table: "district_flow", Columns: all[:p]}
		t.Run(strings.Join(req.Columns, ","), func(t *testing.T) {
			tx, err := push.pool.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly})
			if err != nil {
				t.Fatal(err)
			}
			_, _, pds, err := push.preparePush(ctx, tx, req)
			tx.Rollback(ctx)
			if err != nil {
				t.Fatal(err)
			}
			pd := pds[0]
			if pd.strategy != pushPaired {
				t.Fatalf("strategy %v for a whole unweighted table, want paired", pd.strategy)
			}
			q := pd.aggSQL()
			wantSxy := p / 2
			if p%2 == 1 && p > 1 {
				wantSxy++
			}
			products := p*(p-1)/2 - wantSxy
			if n := strings.Count(q, "regr_sxy("); n != wantSxy {
				t.Errorf("%d regr_sxy, want %d: %s", n, wantSxy, q)
			}
			if n := strings.Count(q, "regr_sxx("); n != (p+1)/2 {
				t.Errorf("%d regr_sxx, want %d", n, (p+1)/2)
			}
			if n := strings.Count(q, "sum("); n != products {
				t.Errorf("%d shifted products, want %d", n, products)
			}
			want, got := scanBoth(t, stream, push, req)
			demand.SameResult(t, "paired", want, got, 1e-12)
			m := got.Merged().Moments
			if p > 2 {
				if m.Min(2) != 4.25 || m.Max(2) != 4.25 || m.Mean(2) != 4.25 || m.ScaledAt(2, 2) != 0 {
					t.Errorf("valve_setting: range [%v, %v], mean %v, co-moment %v: want exactly constant 4.25",
						m.Min(2), m.Max(2), m.Mean(2), m.ScaledAt(2, 2))
				}
			}
		})
	}
}
