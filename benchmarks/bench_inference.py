"""Speed and memory of ps.bootstrap: multiplier draws at scale, refits on two workers.

Targets: at 1e6 rows, 1000 multiplier draws within 2x the time of the point estimate (weighting
estimator with its default models); the resample bootstrap at least 1.6x faster on 2 workers than
on 1; peak memory of the multiplier bootstrap O(n + B), far below the n x B multiplier matrix.

Usage: python benchmarks/bench_inference.py [--rows 1000000] [--draws 1000]
       [--refit-rows 10000] [--refits 100] [--quick]
"""

from __future__ import annotations

import argparse
import os
import resource
import time
import tracemalloc
import warnings

import pandas as pd
from joblib import Parallel, delayed
from threadpoolctl import threadpool_limits

import pscore_strata as ps
from pscore_strata.inference._resampling import (
    multiplier_contributions,
    multiplier_draws,
    spawn_seeds,
)
from pscore_strata.inference._tasks import run_tasks

BLOCK = 250  # replicates per task, as in ps.bootstrap


def point_estimate(data):
    return ps.PrincipalScoreWeighting(n_bootstrap=0).fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival
    )


def draws(influence, n_draws, kind, n_jobs):
    """The multiplier step of ps.bootstrap alone (the point fit is timed separately)."""
    contributions = multiplier_contributions(influence)
    seeds = spawn_seeds(0, n_draws)
    blocks = [seeds[i : i + BLOCK] for i in range(0, n_draws, BLOCK)]
    return run_tasks(
        (delayed(multiplier_draws)(contributions, b, kind) for b in blocks),
        [len(b) for b in blocks],
        n_jobs,
        False,
        "",
    )


def markdown(frame, digits=2):
    """A GitHub-style table (no dependency beyond pandas)."""
    cells = frame.map(lambda v: f"{v:,.{digits}f}" if isinstance(v, float) else str(v))
    lines = ["| " + " | ".join(frame.columns) + " |", "|" + "---|" * frame.shape[1]]
    lines += ["| " + " | ".join(row) + " |" for row in cells.itertuples(index=False)]
    return "\n".join(lines)


def timed(function, repeats=1):
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


def traced_peak(function):
    tracemalloc.start()
    function()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak / 2**20


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--draws", type=int, default=1000)
    parser.add_argument("--refit-rows", type=int, default=10_000)
    parser.add_argument("--refits", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--quick", action="store_true", help="1e5 rows, 40 refits, 1 repeat")
    args = parser.parse_args()
    if args.quick:
        args.rows, args.refits, args.repeats = 100_000, 40, 1
    warnings.simplefilter("ignore")
    Parallel(n_jobs=2)(delayed(abs)(i) for i in range(4))  # start loky's workers before timing
    print(f"cores: {os.cpu_count()}, load average at start: {os.getloadavg()[0]:.1f}")

    data = ps.datasets.make_truncation(args.rows, random_state=0)
    fit_time = timed(lambda: point_estimate(data), args.repeats)
    influence = point_estimate(data).influence_
    rows = [("point estimate (weighting, sandwich SE)", 1, fit_time)]
    for kind in ("rademacher", "gaussian"):
        for n_jobs in (1, 2):
            seconds = timed(
                lambda k=kind, j=n_jobs: draws(influence, args.draws, k, j), args.repeats
            )
            rows.append((f"{args.draws} multiplier draws ({kind})", n_jobs, seconds))
    table = pd.DataFrame(rows, columns=["step", "n_jobs", "seconds"])
    table["x point estimate"] = table["seconds"] / fit_time
    print(f"\nMultiplier bootstrap at n = {args.rows:,} rows (best of {args.repeats})")
    print(markdown(table))

    refit_data = ps.datasets.make_truncation(args.refit_rows, random_state=1)

    def resample(n_jobs):
        return ps.bootstrap(
            ps.PrincipalScoreWeighting(),
            refit_data.X,
            refit_data.y,
            treatment=refit_data.treatment,
            survival=refit_data.survival,
            n_resamples=args.refits,
            n_jobs=n_jobs,
            random_state=0,
            progress=False,
        )

    resample(2)  # start the worker processes once, as a long session would
    serial = timed(lambda: resample(1), args.repeats)
    with threadpool_limits(1):  # what each of the two loky workers gets
        single_thread = timed(lambda: resample(1), args.repeats)
    parallel = timed(lambda: resample(2), args.repeats)
    speed = pd.DataFrame(
        [
            ("1 (sequential, default BLAS threads)", serial, 1.0),
            ("1 (sequential, 1 BLAS thread)", single_thread, serial / single_thread),
            ("2 (loky processes, 1 BLAS thread each)", parallel, serial / parallel),
        ],
        columns=["workers", "seconds", "speed-up"],
    )
    print(
        f"\nResample bootstrap, {args.refits} refits of the weighting estimator at "
        f"n = {args.refit_rows:,} (best of {args.repeats})"
    )
    print(markdown(speed))

    dense = args.rows * args.draws * 8 / 2**20
    memory = pd.DataFrame(
        [
            ("point estimate", traced_peak(lambda: point_estimate(data))),
            (
                f"{args.draws} draws, rademacher",
                traced_peak(lambda: draws(influence, args.draws, "rademacher", 1)),
            ),
            (
                f"{args.draws} draws, gaussian",
                traced_peak(lambda: draws(influence, args.draws, "gaussian", 1)),
            ),
            ("dense n x B multiplier matrix (not built)", dense),
            (
                f"{args.refits} refits at n = {args.refit_rows:,}, 1 worker",
                traced_peak(lambda: resample(1)),
            ),
        ],
        columns=["step", "peak traced MiB"],
    )
    print(
        f"\nPeak memory at n = {args.rows:,} (tracemalloc; X itself is "
        f"{data.X.nbytes / 2**20:.0f} MiB)"
    )
    print(markdown(memory, 1))
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"\nmax resident set size of this process: {rss:.0f} MiB")
    print(f"load average at end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
