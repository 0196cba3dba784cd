#!/usr/bin/python3
"""Write the reference datasets of testdata/ref.

set_a.csv  400 days of one supply district with a strong near-dependency:
           billed_volume = 0.97 * metered_volume + small noise, beside a
           population / connections block and a designated response demand_m3.
set_b.csv  250 district-days with a moderate collinearity structure and the
           response demand_m3.
longley.csv  Longley's data copied verbatim (same decimal text) from the NIST
           StRD file Longley.dat (public domain), columns y, x1..x6.

Deterministic: numpy's default_rng (PCG64) with fixed seeds. Floats are
written with repr(), the shortest text that round-trips to the same double,
so every reader (R, numpy, Go's strconv) sees bit-identical values.

    /usr/bin/python3 generate_sets.py [path/to/Longley.dat]
"""

import csv
import math
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
LONGLEY_DAT = "/work/shared/reference/nist-strd/Longley.dat"

SEED_A = 20240611
SEED_B = 20240612


def write_csv(name, header, columns):
    n = len(columns[0])
    with open(os.path.join(HERE, name), "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(header)
        for i in range(n):
            w.writerow([fmt(c[i]) for c in columns])


def fmt(v):
    v = float(v)
    if not math.isfinite(v):
        raise ValueError("non-finite value in reference data")
    if v == int(v) and abs(v) < 2**53:
        return str(int(v))
    return repr(v)


def seasonal_temperature(rng, day):
    # Daily mean air temperature, deg C: annual cycle plus weather noise.
    return 14.0 + 9.0 * np.sin(2 * np.pi * (day - 110) / 365.25) + rng.normal(0, 2.4, day.size)


def rainfall(rng, n):
    # Daily rainfall, mm: about 45% wet days with gamma-distributed amounts.
    wet = rng.random(n) < 0.45
    return np.where(wet, rng.gamma(0.7, 7.5, n), 0.0)


def set_a():
    rng = np.random.default_rng(SEED_A)
    n = 400
    day = np.arange(n, dtype=float)
    temperature = seasonal_temperature(rng, day)
    rain = rainfall(rng, n)
    # Slowly growing district, residents per home about 2.55.
    population = np.round(41800 + 9.5 * day + rng.normal(0, 650, n))
    residential = np.round(population / 2.55 + rng.normal(0, 140, n))
    commercial = np.round(1350 + 0.011 * population + rng.normal(0, 40, n))
    # Mean pipe age in years: ages one year per year, a renewal programme
    # lowers it in steps, survey noise on top.
    renewals = np.cumsum(rng.random(n) < 0.02) * 0.35
    pipe_age = 33.0 + day / 365.25 - renewals + rng.normal(0, 0.25, n)
    metered = (
        0.19 * population
        + 1.6 * commercial
        + 210.0 * temperature
        - 38.0 * rain
        + 45.0 * pipe_age
        + rng.normal(0, 420, n)
    )
    # Billing follows the meters closely (strong near-dependency).
    billed = 0.97 * metered + rng.normal(0, 22, n)
    # Designated response: district demand, m3/day (production into the district).
    demand = 1.06 * metered + 4.0 * pipe_age ** 2 + rng.normal(0, 300, n)
    header = [
        "temperature", "rainfall", "population_served", "residential_connections",
        "commercial_connections", "pipe_age", "metered_volume", "billed_volume", "demand_m3",
    ]
    cols = [temperature, rain, population, residential, commercial, pipe_age, metered, billed, demand]
    write_csv("set_a.csv", header, cols)


def set_b():
    rng = np.random.default_rng(SEED_B)
    n = 250
    day = rng.integers(0, 730, n).astype(float)
    temperature = seasonal_temperature(rng, day)
    rain = rainfall(rng, n)
    # Several districts of different size: population varies widely, the
    # connection counts follow it only loosely (moderate collinearity).
    population = np.round(rng.uniform(8000, 60000, n))
    residential = np.round(population / 2.6 * rng.lognormal(0, 0.22, n))
    commercial = np.round(60 + 0.02 * population + rng.normal(0, 260, n))
    pipe_age = rng.uniform(8, 55, n)
    # Older networks run at lower pressure (bar), with gauge noise.
    pressure_mean = 5.2 - 0.035 * pipe_age + 0.18 * np.sin(day / 58.0) + rng.normal(0, 0.45, n)
    demand = (
        0.16 * population
        + 0.12 * residential
        + 1.9 * commercial
        + 95.0 * temperature
        - 22.0 * rain
        + 11.0 * pipe_age
        + 240.0 * pressure_mean
        + rng.normal(0, 650, n)
    )
    header = [
        "temperature", "rainfall", "population_served", "residential_connections",
        "commercial_connections", "pipe_age", "pressure_mean", "demand_m3",
    ]
    cols = [temperature, rain, population, residential, commercial, pipe_age, pressure_mean, demand]
    write_csv("set_b.csv", header, cols)


def longley(path):
    # Data lines follow the line that starts with "Data:" and lists y x1..x6.
    rows = []
    with open(path) as f:
        lines = f.read().splitlines()
    start = None
    for i, line in enumerate(lines):
        if line.strip().startswith("Data:") and "x6" in line:
            start = i + 1
    if start is None:
        raise SystemExit(path + ": no data header line")
    for line in lines[start:]:
        tok = line.split()
        if not tok:
            continue
        if len(tok) != 7:
            raise SystemExit(path + ": bad data line: " + line)
        for t in tok:
            float(t)  # every token must be a number; written unchanged
        rows.append(tok)
    if len(rows) != 16:
        raise SystemExit("%s: want 16 observations, got %d" % (path, len(rows)))
    with open(os.path.join(HERE, "longley.csv"), "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["y", "x1", "x2", "x3", "x4", "x5", "x6"])
        w.writerows(rows)


if __name__ == "__main__":
    set_a()
    set_b()
    longley(sys.argv[1] if len(sys.argv) > 1 else LONGLEY_DAT)
