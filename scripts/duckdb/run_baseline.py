#!/usr/bin/env python3
"""Runs scripts/duckdb/baseline.sql over a hexvigil export with DuckDB and prints JSON.

Usage (needs `pip install duckdb`; scripts/setup-test-deps.sh installs the pinned version):

    python3 scripts/duckdb/run_baseline.py EXPORT_DIR [--week 2026-W48] [--baseline-weeks 12]
        [--fdr 0.05] [--no-offshore]

The report week defaults to the export's default week (export.json), and the history to
--baseline-weeks before it, fewer when the data starts later: the same window `hexvigil report`
reads. The JSON holds the DuckDB version, the week, the history weeks, per region the report
week's counts (`counts`) and a usual week (`baseline_counts`), and every tested cell and kind
(`tests`: region, kind, cell, observed, expected, p_value, q_value, own_history, outlier).
tests/export.rs compares it with hexvigil's own numbers.
"""

import argparse
import datetime
import json
import math
import os
import sys

import duckdb

HERE = os.path.dirname(os.path.abspath(__file__))

# The defaults of src/detect.rs (DetectConfig) and src/baseline.rs (PriorBounds,
# MIN_DISPERSION).
DEFAULTS = {
    "min_ratio": 2.0,
    "floor_mean": 0.05,
    "min_beta": 0.25,
    "max_beta": 24.0,
    "min_dispersion": 0.5,
}


def monday(week):
    year, w = week.split("-W")
    return datetime.date.fromisocalendar(int(year), int(w), 1)


def literal(value):
    """A SQL literal (views cannot take prepared parameters)."""
    if value is None:
        return "NULL"
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, datetime.date):
        return f"DATE '{value.isoformat()}'"
    return "'" + str(value).replace("'", "''") + "'"


def table(con, export, name, partitions):
    glob = os.path.join(export, name, *(["*"] * partitions), "*.parquet")
    con.execute(
        f"CREATE OR REPLACE TEMPORARY VIEW {name} AS SELECT * FROM "
        f"read_parquet({literal(glob)}, hive_partitioning = true, union_by_name = true)"
    )


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("export")
    ap.add_argument("--week")
    ap.add_argument("--baseline-weeks", type=int, default=12)
    ap.add_argument("--fdr", type=float, default=0.05)
    ap.add_argument("--no-offshore", action="store_true")
    args = ap.parse_args()

    with open(os.path.join(args.export, "export.json"), encoding="utf-8") as f:
        manifest = json.load(f)
    week = args.week or manifest["default_week"]
    report_start = monday(week)
    known = max(0, (report_start - monday(manifest["data_first_week"])).days // 7)
    history = min(args.baseline_weeks, known)
    window_start = report_start - datetime.timedelta(weeks=history)

    con = duckdb.connect()
    table(con, args.export, "cell_weeks", 2)
    table(con, args.export, "cell_week_changesets", 2)
    table(con, args.export, "changesets", 1)
    table(con, args.export, "cell_neighbours", 1)
    params = {
        "report_start": report_start,
        "window_start": window_start,
        "history_weeks": history,
        "first_region": (manifest["regions"] or [None])[0],
        "offshore": not args.no_offshore and manifest["land"] != "none",
        "fdr": float(args.fdr),
        **DEFAULTS,
    }
    con.execute(
        "CREATE OR REPLACE TEMPORARY VIEW params AS SELECT "
        + ", ".join(f"{literal(v)} AS {k}" for k, v in params.items())
    )
    with open(os.path.join(HERE, "baseline.sql"), encoding="utf-8") as f:
        con.execute(f.read())

    def rows(sql):
        cur = con.execute(sql)
        names = [d[0] for d in cur.description]
        return [dict(zip(names, r)) for r in cur.fetchall()]

    def number(x):
        if isinstance(x, float) and not math.isfinite(x):
            return None
        return x

    out = {
        "caution": manifest.get("caution", ""),
        "duckdb": duckdb.__version__,
        "week": week,
        "history_weeks": history,
        "counts": {
            r.pop("region"): {k: int(v) for k, v in r.items()}
            for r in rows("SELECT * FROM region_counts ORDER BY region")
        },
        "baseline_counts": {
            r.pop("region"): {k: float(v) for k, v in r.items()}
            for r in rows("SELECT * FROM region_baseline ORDER BY region")
        },
        "tests": [
            {
                "region": r["region"],
                "kind": r["kind"],
                "cell": r["cell_hex"],
                "observed": int(r["observed"]),
                "expected": number(r["expected"]),
                "p_value": number(r["p_value"]),
                "q_value": number(r["q_value"]),
                "own_history": bool(r["own_history"]),
                "outlier": bool(r["outlier"]),
            }
            for r in rows("SELECT * FROM tests ORDER BY region, kind, cell_hex")
        ],
    }
    json.dump(out, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
