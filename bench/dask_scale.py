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

``--extended`` also fits every n with ``nonparallel=["x1"]`` (per-threshold effects of x1)
and ``scale_by=["x2"]`` (a scale effect of x2), 4 + 3 = 7 more parameters (16 in all),
printing the same table, the ratio of seconds and peak RSS to the plain Dask fit of the
same n (each n alternates plain and extended fits in fresh processes) and the
log-likelihood difference from the in-memory extended fit on one partition.
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
EXTENDED = {"nonparallel": ["x1"], "scale_by": ["x2"]}


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


def child(files, in_memory, cache, extended=False):
    """Fit once in this process (``extended``: with :data:`EXTENDED`); print one JSON line."""
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
    model = EXTENDED if extended else {}
    start = time.perf_counter()
    if in_memory:
        res = ow.fit(FORMULA, pd.read_parquet(files[0]), **model)
    else:
        with dask.config.set(scheduler="threads"):
            res = ow.fit_dask(FORMULA, dd.read_parquet([str(f) for f in files]), cache=cache, **model)
    seconds = time.perf_counter() - start
    print(json.dumps({"seconds": seconds, "rss": peak_rss_mib(), "steps": res.iterations,
                      "evals": len(evaluations), "passes": 3 if cache else 2 + len(evaluations),
                      "loglik": res.loglik, "rows": res.n_rows, "converged": bool(res.converged)}))


def run_child(files, in_memory=False, cache=False, extended=False):
    flags = {"--in-memory": in_memory, "--cache": cache, "--extended": extended}
    cmd = [sys.executable, __file__, "--child", *map(str, files)] + [f for f, on in flags.items() if on]
    out = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def measure(files, repeats, in_memory=False, cache=False, extended=False):
    runs = [run_child(files, in_memory, cache, extended) for _ in range(repeats)]
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


def compare(label, pairs):
    """Print the seconds and peak-RSS ratios of ``label`` fits to the plain fits of the same n."""
    for n, (plain, other) in pairs:
        print(f"n={n:,}: {label} takes {other['seconds'] / plain['seconds']:.2f} times as long, "
              f"peak RSS {other['rss'] / plain['rss']:.2f} times")


def agreement(label, one, baseline, part_rows):
    """The in-memory fit on one partition against the Dask fit of the same rows."""
    print(f"in-memory ow.fit{label} on one partition ({part_rows:,} rows, pandas): {baseline['seconds']:.1f} s, "
          f"peak RSS {baseline['rss']:.0f} MiB; Dask on the same rows: {one['seconds']:.1f} s "
          f"(ratio {one['seconds'] / baseline['seconds']:.2f}), log-likelihood difference "
          f"{abs(one['loglik'] - baseline['loglik']):.2e}")


def report(rows, cached, part_rows, baselines, extended=()):
    table("rows read again at every pass (default)", rows, part_rows)
    plain = dict(rows)
    if cached:
        table("cache=True (prepared design kept in memory)", cached, part_rows)
        compare("cache=True", [(n, (plain[n], r)) for n, r in cached if n in plain])
    if extended:
        table(f"extended: {EXTENDED}, rows read again at every pass", extended, part_rows)
        compare("the extended fit", [(n, (plain[n], r)) for n, r in extended])
    print()
    agreement("", rows[0][1], baselines[0], part_rows)
    if extended:
        agreement(f" {EXTENDED}", extended[0][1], baselines[1], part_rows)


def load_average():
    return "load average " + " ".join(f"{x:.2f}" for x in os.getloadavg())


def sized(files, sizes, part_rows, repeats, **kind):
    """``(n, measure(...))`` for each n (``repeats`` up to 2e6 rows, else one run)."""
    out = []
    for n in sizes:
        out.append((n, measure(files[: n // part_rows], repeats if n <= 2_000_000 else 1, **kind)))
        print(f"n={n:,}{' ' + str(kind) if kind else ''}: {out[-1][1]}; {load_average()}", flush=True)
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1e6,2e6,5e6,1e7,2e7")
    ap.add_argument("--cache-sizes", default="1e6,5e6,2e7", help="sizes also run with cache=True ('' for none)")
    ap.add_argument("--cache", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--extended", action="store_true", help=f"also fit every size with {EXTENDED}")
    ap.add_argument("--part-rows", type=float, default=1e6)
    ap.add_argument("--dir", default="/tmp/ordwidgets_dask_bench")
    ap.add_argument("--repeats", type=int, default=3, help="repeats for n up to 2e6 (larger n: one run)")
    ap.add_argument("--child", nargs="+")
    ap.add_argument("--in-memory", action="store_true")
    args = ap.parse_args()
    if args.child:
        return child(args.child, args.in_memory, args.cache, args.extended)
    part_rows = int(args.part_rows)
    sizes = sorted(int(float(s)) for s in args.sizes.split(","))
    cache_sizes = sorted(int(float(s)) for s in args.cache_sizes.split(",") if s)
    files = write_parts(Path(args.dir), max(sizes + cache_sizes) // part_rows, part_rows)
    print(f"start: {load_average()}", flush=True)
    kinds = [{}] + ([{"extended": True}] if args.extended else [])
    baselines = [measure(files[:1], args.repeats, in_memory=True, **kind) for kind in kinds]
    runs = {i: [] for i in range(len(kinds))}
    for n in sizes:  # plain and extended fits of one n run next to each other (same load)
        for i, kind in enumerate(kinds):
            runs[i] += sized(files, [n], part_rows, args.repeats, **kind)
    cached = sized(files, cache_sizes, part_rows, args.repeats, cache=True)
    report(runs[0], cached, part_rows, baselines, runs.get(1, ()))
    print(f"end: {load_average()}")


if __name__ == "__main__":
    main()
