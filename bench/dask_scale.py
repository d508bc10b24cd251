"""Throughput and peak memory of fits on Dask frames read from Parquet partitions.

Run: ``nice .venv/bin/python bench/dask_scale.py`` (``--sizes 1e6,2e6 --cache-sizes 1e6``
for a quick run).

Data: files of ``--part-rows`` rows each (default 1,000,000) under ``--dir`` (default
``/tmp/ordwidgets_dask_bench``, written once): a five-level response from a logistic
latent model, two numeric predictors and a four-level text factor; the formula
``y ~ x1 + x2 + g`` has 5 effects and 4 thresholds.  For each n the first n / part-rows
files are read with ``dask.dataframe.read_parquet`` and fitted with ``ow.fit_dask`` on the local
threaded scheduler, in a fresh process so that its peak resident memory (``ru_maxrss``)
belongs to that n alone.

Printed per n: partitions, Newton steps, likelihood evaluations, passes over the data (two
set-up passes plus one per evaluation; three with ``cache=True``), median seconds, rows per
second (n / seconds, end to end), row-passes per second, peak RSS and its ratio to the
smallest n.  Memory should follow the partition size, not n.  A second table repeats some sizes with ``cache=True`` (the
prepared design kept in memory between Newton steps: faster, memory grows with n).  For
comparison the in-memory ``ow.fit`` on one partition read into pandas.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
FORMULA = "y ~ x1 + x2 + g"


def write_parts(folder, n_parts, part_rows):
    """Write (or reuse) ``n_parts`` Parquet files with a known model."""
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n_parts):
        path = folder / f"part-{i:04d}-{part_rows}.parquet"
        if path.exists():
            continue
        rng = np.random.default_rng(i)
        x1, x2 = rng.normal(size=part_rows), rng.uniform(-2, 2, part_rows)
        g = rng.choice(np.array(["north", "south", "east", "west"]), part_rows)
        eta = 0.8 * x1 - 0.5 * x2 + np.where(g == "east", 0.4, 0.0)
        y = np.searchsorted([-1.5, -0.3, 0.6, 1.8], eta + rng.logistic(size=part_rows)).astype(np.int8)
        pd.DataFrame({"y": y, "x1": x1, "x2": x2, "g": g}).to_parquet(path, index=False)
    return [folder / f"part-{i:04d}-{part_rows}.parquet" for i in range(n_parts)]


def peak_rss_mib():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def child(files, in_memory, cache):
    """Fit once in this process; print one JSON line."""
    import dask
    import dask.dataframe as dd

    import ordwidgets as ow
    from ordwidgets.core import dask_fit

    evaluations = []
    sums = dask_fit.PartitionedDesign.sums

    def counted(self, *args, **kwargs):
        evaluations.append(1)
        return sums(self, *args, **kwargs)

    dask_fit.PartitionedDesign.sums = counted
    start = time.perf_counter()
    if in_memory:
        res = ow.fit(FORMULA, pd.read_parquet(files[0]))
    else:
        with dask.config.set(scheduler="threads"):
            res = ow.fit_dask(FORMULA, dd.read_parquet([str(f) for f in files]), cache=cache)
    seconds = time.perf_counter() - start
    print(json.dumps({"seconds": seconds, "rss": peak_rss_mib(), "steps": res.iterations,
                      "evals": len(evaluations), "passes": 3 if cache else 2 + len(evaluations),
                      "loglik": res.loglik, "rows": res.n_rows, "converged": bool(res.converged)}))


def run_child(files, in_memory=False, cache=False):
    cmd = [sys.executable, __file__, "--child", *map(str, files)] + (["--in-memory"] if in_memory else []) \
        + (["--cache"] if cache else [])
    out = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def measure(files, repeats, in_memory=False, cache=False):
    runs = [run_child(files, in_memory, cache) for _ in range(repeats)]
    best = dict(runs[0])
    best["seconds"] = statistics.median(r["seconds"] for r in runs)
    best["rss"] = statistics.median(r["rss"] for r in runs)
    best["repeats"] = repeats
    return best


def table(title, rows, part_rows):
    print(f"\n{title}; partition size {part_rows:,} rows; local threaded scheduler, {os.cpu_count()} cores")
    head = f"{'n':>12} {'parts':>5} {'steps':>5} {'evals':>5} {'passes':>6} {'reps':>4} {'seconds':>8} " \
           f"{'rows/s':>11} {'row-passes/s':>13} {'peak RSS MiB':>12} {'RSS ratio':>9}"
    print(head)
    rss0 = rows[0][1]["rss"]
    for n, r in rows:
        print(f"{n:>12,} {n // part_rows:>5} {r['steps']:>5} {r['evals']:>5} {r['passes']:>6} {r['repeats']:>4} "
              f"{r['seconds']:>8.1f} {n / r['seconds']:>11,.0f} {n * r['passes'] / r['seconds']:>13,.0f} "
              f"{r['rss']:>12.0f} {r['rss'] / rss0:>9.2f}")


def report(rows, cached, part_rows, baseline):
    table("rows read again at every pass (default)", rows, part_rows)
    if cached:
        table("cache=True (prepared design kept in memory)", cached, part_rows)
        plain = dict(rows)
        for n, r in cached:
            if n in plain:
                print(f"n={n:,}: cache=True is {plain[n]['seconds'] / r['seconds']:.2f} times as fast, "
                      f"peak RSS {r['rss'] / plain[n]['rss']:.2f} times")
    one = rows[0][1]
    print(f"\nin-memory ow.fit on one partition ({part_rows:,} rows, pandas): {baseline['seconds']:.1f} s, "
          f"peak RSS {baseline['rss']:.0f} MiB; Dask on the same rows: {one['seconds']:.1f} s "
          f"(ratio {one['seconds'] / baseline['seconds']:.2f}), log-likelihood difference "
          f"{abs(one['loglik'] - baseline['loglik']):.2e}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1e6,2e6,5e6,1e7,2e7")
    ap.add_argument("--cache-sizes", default="1e6,5e6,2e7", help="sizes also run with cache=True ('' for none)")
    ap.add_argument("--cache", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--part-rows", type=float, default=1e6)
    ap.add_argument("--dir", default="/tmp/ordwidgets_dask_bench")
    ap.add_argument("--repeats", type=int, default=3, help="repeats for n up to 2e6 (larger n: one run)")
    ap.add_argument("--child", nargs="+")
    ap.add_argument("--in-memory", action="store_true")
    args = ap.parse_args()
    if args.child:
        return child(args.child, args.in_memory, args.cache)
    part_rows = int(args.part_rows)
    sizes = sorted(int(float(s)) for s in args.sizes.split(","))
    cache_sizes = sorted(int(float(s)) for s in args.cache_sizes.split(",") if s)
    files = write_parts(Path(args.dir), max(sizes + cache_sizes) // part_rows, part_rows)
    baseline = measure(files[:1], args.repeats, in_memory=True)
    rows = []
    for n in sizes:
        rows.append((n, measure(files[: n // part_rows], args.repeats if n <= 2_000_000 else 1)))
        print(f"n={n:,}: {rows[-1][1]}", flush=True)
    cached = []
    for n in cache_sizes:
        cached.append((n, measure(files[: n // part_rows], args.repeats if n <= 2_000_000 else 1, cache=True)))
        print(f"n={n:,}, cache=True: {cached[-1][1]}", flush=True)
    report(rows, cached, part_rows, baseline)


if __name__ == "__main__":
    main()
