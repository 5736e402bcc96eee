"""Ingest throughput and memory against two baselines on the same CSV files.

    .venv/bin/python benchmarks/bench_ingest.py [--rows 10000000] [--rows-per-file 36000] [--workdir DIR]

Baselines, each in its own subprocess so peak RSS (resource.getrusage) is its own:
  duckdb  DuckDB's bare read_csv of all files -> COPY ... TO one Parquet file
  pandas  a naive loop: pandas.read_csv + DataFrame.to_parquet per file
  ingest  tracktrue's run_ingest, with all recognition, validation, trips and the catalog

Targets (issue 3): ingest >= 0.5 x DuckDB's rows/s, faster than the pandas loop, peak RSS < 2 GB
for a 10-million-row ingest. The CSV files are written here by a vectorised writer (pyarrow),
one file per hour-long 10 Hz trip, in a comma/ISO-8601/km/h style.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

HEADER = ["Vehicle ID", "Timestamp", "Wheel Speed FL [km/h]", "Wheel Speed FR [km/h]", "Wheel Speed RL [km/h]",
          "Wheel Speed RR [km/h]", "Vehicle Speed [km/h]", "Yaw Rate [deg/s]", "Steering Wheel Angle [deg]",
          "Long Accel [g]", "Lat Accel [g]", "Brake Switch"]


def write_files(folder: Path, total_rows: int, rows_per_file: int, seed: int = 1) -> tuple[int, int]:
    """Write CSV logs with plausible, smoothly varying signals; return (files, bytes)."""
    rng = np.random.default_rng(seed)
    n_files = max(1, total_rows // rows_per_file)
    size = 0
    start = np.datetime64("2026-03-02T06:00:00", "ms")
    for i in range(n_files):
        n = rows_per_file
        t = start + np.timedelta64(i * 4, "h") + np.arange(n) * np.timedelta64(100, "ms")
        speed = 15 + 10 * np.sin(np.arange(n) / 600.0 + i) + rng.normal(0, 0.05, n)
        cols = {
            "v": pa.array(np.full(n, f"V{i % 50:03d}")),
            "t": pc.strftime(pa.array(t, pa.timestamp("ms", tz="UTC")), format="%Y-%m-%dT%H:%M:%SZ"),
        }
        for k in range(4):
            cols[f"w{k}"] = pa.array(np.round(3.6 * speed * (1 + rng.normal(0, 0.002)), 2))
        cols["vs"] = pa.array(np.round(3.6 * speed, 1))
        cols["yaw"] = pa.array(np.round(rng.normal(0, 3, n), 2))
        cols["swa"] = pa.array(np.round(rng.normal(0, 30, n), 1))
        cols["ax"] = pa.array(np.round(rng.normal(0, 0.1, n), 3))
        cols["ay"] = pa.array(np.round(rng.normal(0, 0.1, n), 3))
        cols["b"] = pa.array((rng.random(n) < 0.1).astype(np.int8))
        path = folder / f"V{i % 50:03d}" / f"log_{i:05d}.csv"
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(path, "wb") as fh:
            fh.write((",".join(HEADER) + "\n").encode())
            pacsv.write_csv(pa.table(cols), fh, pacsv.WriteOptions(include_header=False, quoting_style="none"))
        size += path.stat().st_size
    return n_files, size


_CHILD = {
    "duckdb": """
        import duckdb
        con = duckdb.connect()
        con.execute(f"COPY (SELECT * FROM read_csv('{data}/**/*.csv', header=true)) TO '{out}/duck.parquet' (FORMAT parquet)")
        rows = con.execute(f"SELECT count(*) FROM '{out}/duck.parquet'").fetchone()[0]
    """,
    "pandas": """
        import pandas as pd, pathlib
        rows = 0
        for i, f in enumerate(sorted(pathlib.Path('{data}').rglob('*.csv'))):
            df = pd.read_csv(f)
            df.to_parquet(f'{out}/p{{i}}.parquet')
            rows += len(df)
    """,
    "ingest": """
        from ingest import run_ingest
        from tracktrue.store import Store
        s = run_ingest(['{data}'], Store.open('{out}/store'))
        rows = s.rows
        assert s.rows_rejected == 0 and not s.rejected_files, s.describe()
    """,
}


def measure(name: str, data: Path, out: Path) -> dict:
    body = textwrap.dedent(_CHILD[name]).format(data=data, out=out)
    code = ("import time, resource, json\nt0 = time.perf_counter()\n" + body +
            "\nprint(json.dumps({'seconds': time.perf_counter() - t0, 'rows': int(rows), "
            "'peak_rss_mb': resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                          cwd=Path(__file__).parents[1])
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--rows-per-file", type=int, default=36_000)
    ap.add_argument("--workdir", type=Path, default=None)
    ap.add_argument("--skip", action="append", default=[], choices=sorted(_CHILD), help="skip a contender")
    args = ap.parse_args()
    work = Path(args.workdir or tempfile.mkdtemp(prefix="bench_ingest_"))
    data = work / "logs"
    if data.exists():
        shutil.rmtree(data)
    n_files, n_bytes = write_files(data, args.rows, args.rows_per_file)
    print(f"{n_files} files, {n_bytes / 1e6:.0f} MB, {n_files * args.rows_per_file:,} rows in {data}")
    results = {}
    for name in ("duckdb", "pandas", "ingest"):
        if name in args.skip:
            continue
        out = work / f"out_{name}"
        shutil.rmtree(out, ignore_errors=True)
        out.mkdir(parents=True)
        r = measure(name, data, out)
        results[name] = r
        print(f"{name:7s} {r['seconds']:7.1f} s  {r['rows'] / r['seconds']:>12,.0f} rows/s  "
              f"{n_bytes / 1e6 / r['seconds']:7.1f} MB/s  peak RSS {r['peak_rss_mb']:7.0f} MB  ({r['rows']:,} rows)")
        shutil.rmtree(out, ignore_errors=True)
    if "ingest" in results:
        speed = {k: v["rows"] / v["seconds"] for k, v in results.items()}
        for base, target in (("duckdb", 0.5), ("pandas", 1.0)):
            if base in speed:
                ratio = speed["ingest"] / speed[base]
                print(f"ingest / {base}: {ratio:.2f} x  (target >= {target}: {'met' if ratio >= target else 'NOT met'})")
        rss = results["ingest"]["peak_rss_mb"]
        print(f"ingest peak RSS {rss:.0f} MB (target < 2048 MB: {'met' if rss < 2048 else 'NOT met'})")
    if args.workdir is None:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
