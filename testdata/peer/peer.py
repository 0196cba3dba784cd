#!/usr/bin/python3
"""The pipeline a data scientist would run instead of plumb, for plumb's benchmark.

Reads a PostgreSQL table into pandas with read_sql and computes every column's
variance inflation factor with statsmodels (design with a constant). Before
that it measures the floor in the same run: COPY (SELECT the columns) TO
STDOUT (FORMAT binary) read to /dev/null. It prints both times, the ratio and
the peak resident memory.

Uses Debian's python3-pandas, python3-psycopg2 and python3-statsmodels:
    /usr/bin/python3 testdata/peer/peer.py --url postgres://… --table district_sensors
The Go benchmark BenchmarkScan1M (connectors/postgres) runs it with --json
when PLUMB_BENCH_PEER=1 and reports it beside plumb's own times.
"""
import argparse
import json
import math
import os
import resource
import sys
import time
import warnings

import psycopg2
from psycopg2 import sql
import pandas as pd
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.tools.tools import add_constant


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--url", required=True, help="postgres://… (the password may come from PGPASSWORD)")
    ap.add_argument("--table", required=True)
    ap.add_argument("--columns", help="comma-separated; default: every double precision column")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    a = ap.parse_args()

    conn = psycopg2.connect(a.url)
    conn.set_session(readonly=True)
    cur = conn.cursor()
    if a.columns:
        cols = a.columns.split(",")
    else:
        cur.execute(
            "SELECT attname FROM pg_attribute WHERE attrelid = to_regclass(%s) AND attnum > 0"
            " AND NOT attisdropped AND atttypid = 'float8'::regtype ORDER BY attnum",
            (a.table,),
        )
        cols = [r[0] for r in cur.fetchall()]
    if not cols:
        sys.exit(f"{a.table}: no double precision columns")
    select = sql.SQL("SELECT {} FROM {}").format(
        sql.SQL(", ").join(map(sql.Identifier, cols)), sql.Identifier(*a.table.split(".")))

    t0 = time.perf_counter()
    with open(os.devnull, "wb") as devnull:
        cur.copy_expert(sql.SQL("COPY ({}) TO STDOUT (FORMAT binary)").format(select).as_string(conn), devnull)
    floor = time.perf_counter() - t0

    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pandas asks for SQLAlchemy
        df = pd.read_sql(select.as_string(conn), conn)
    x = add_constant(df).to_numpy()
    vifs = [variance_inflation_factor(x, i) for i in range(1, x.shape[1])]
    peer = time.perf_counter() - t0
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    out = {
        "rows": len(df),
        "columns": len(cols),
        "floor_s": floor,
        "peer_s": peer,
        "peer_vs_floor": peer / floor,
        "peer_peak_rss_MB": rss,
        # An exact dependency (a total column) makes some VIFs infinite,
        # which JSON cannot carry.
        "infinite_vifs": sum(1 for v in vifs if math.isinf(v)),
        "max_finite_vif": max((v for v in vifs if math.isfinite(v)), default=None),
    }
    if a.json:
        print(json.dumps(out))
    else:
        print(f"{out['rows']} rows × {out['columns']} columns")
        print(f"floor (COPY binary to /dev/null): {floor:8.2f} s")
        print(f"pandas.read_sql + statsmodels VIF: {peer:8.2f} s  = {peer / floor:.1f} × floor")
        print(f"peak RSS: {rss:.0f} MB; {out['infinite_vifs']} infinite VIFs, largest finite {out['max_finite_vif']:.3g}")


if __name__ == "__main__":
    main()
