"""Distributions at registry scale: the whole ``analyze`` run, and the library calls.

Two tables, each measured within one run so that the ratios compare work done under the same
machine load:

1. ``analyze`` (``--analyze-sizes``, default 2,000 / 100,000 / 250,000 / 500,000 rows of
   ``make_truncation(n, n_features=5)`` as CSV; default settings, so the distributions and
   quantile bounds are included) in a fresh process, against a fresh process doing the CSV read
   and the bare scikit-learn fits of the five nuisance models (``bench_analyze.py``'s ``bare``).
   Peak memory is the child's peak resident set size. The row-proportional ratio subtracts the
   smallest run from both (start-up, imports, figures). Bytes per row: the least-squares slope
   of the analyze run's peak RSS over the sizes.
2. The library at ``--library-size`` rows (default 1,000,000): for each estimator, ``fit``,
   then ``quantile_effects`` and ``survivor_distribution`` on the fitted estimator, each in a
   fresh process (the first call fits the conditional CDF models, which the later calls reuse:
   the "cold" and "warm" columns).

With ``--repeats R`` every fresh process runs R times (analyze and bare alternating) and the
tables show the medians (ratios: the median of the per-process ratios), which steadies the
numbers on a shared machine.

Usage: ``nice -n 5 env OMP_NUM_THREADS=1 python benchmarks/bench_distributions.py``
       ``[--analyze-sizes 2000 500000] [--library-size 1000000] [--repeats 3]``
       ``[--skip-analyze] [--skip-library] [--skip-grid]``
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path
from statistics import median

sys.path.insert(0, str(Path(__file__).parent))
from bench_analyze import _BARE, _child  # noqa: E402

_WRITE = (f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); "
          "from bench_analyze import _write_csv; _write_csv(int(sys.argv[1]), sys.argv[2])")

_LIBRARY = textwrap.dedent(
    """
    import resource, sys, time, warnings
    import numpy as np
    import pscore_strata as ps
    warnings.simplefilter("ignore")
    n, name, first = int(sys.argv[1]), sys.argv[2], sys.argv[3]
    data = ps.datasets.make_truncation(n, n_features=5, random_state=0)
    cls = {"weighting": ps.PrincipalScoreWeighting, "regression": ps.OutcomeRegression,
           "robust": ps.MultiplyRobust}[name]
    X = None if name == "weighting" else data.X
    start, cpu = time.perf_counter(), time.process_time()
    est = cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
    fit, fit_cpu = time.perf_counter() - start, time.process_time() - cpu
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    calls = {"quantiles": lambda: ps.quantile_effects(est, X=X),
             "distribution": lambda: ps.survivor_distribution(est, X=X)}
    order = [first] + [k for k in calls if k != first]
    times, cpus = {}, {}
    for key in order:
        start, cpu = time.perf_counter(), time.process_time()
        calls[key]()
        times[key], cpus[key] = time.perf_counter() - start, time.process_time() - cpu
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(fit, times["quantiles"], times["distribution"], before, peak, fit_cpu,
          cpus["quantiles"], cpus["distribution"])
    """
)


_GRID = textwrap.dedent(
    """
    import sys, warnings
    import numpy as np
    import pscore_strata as ps
    from pscore_strata.distributions._cdf import default_values
    from pscore_strata.distributions._paths import cdf_path, prepare
    from pscore_strata.distributions._quantiles import interpolated_quantiles, quantiles_of
    warnings.simplefilter("ignore")
    n = int(sys.argv[1])
    u = np.array([0.1, 0.25, 0.5, 0.75, 0.9])
    data = ps.datasets.make_truncation(n, n_features=5, random_state=1)
    for name, cls in (("weighting", ps.PrincipalScoreWeighting), ("robust", ps.MultiplyRobust)):
        est = cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
        X = None if name == "weighting" else data.X
        prepared = prepare(est, X)
        se = ps.quantile_effects(est, u, X=X)["std_error_treated"].to_numpy()
        fine = default_values(prepared.data, limit=20000)
        path = cdf_path(prepared, fine, with_influence=False)
        reference = interpolated_quantiles(fine, path.treated, u)
        coarse = default_values(prepared.data, limit=4000)
        path = cdf_path(prepared, coarse, with_influence=False)
        step = quantiles_of(coarse, path.treated, u)
        line = interpolated_quantiles(coarse, path.treated, u)
        for label, q in (("step, 4000 ranks", step), ("interpolated, 4000 ranks", line)):
            error = np.max(np.abs(q - reference))
            print(name, label, error, np.max(np.abs(q - reference) / se))
    """
)


def grid_table(n, env):
    print(f"\nquantiles from a 4,000-value grid against a 20,000-value grid, {n:,} rows (treated "
          "arm, quantiles 0.1 ... 0.9; max over the quantiles)\n")
    print("| estimator | inverse | max abs error | max error / SE |")
    print("|---|---|---|---|")
    _, _, stdout = _child([sys.executable, "-c", _GRID, str(n)], env)
    for line in stdout.strip().splitlines():
        name, *label, error, ratio = line.split()
        print(f"| {name} | {' '.join(label)} | {float(error):.2e} | {float(ratio):.3f} |")


def _analyze_child(args, env):
    """``_child`` with the CPU seconds and ``analyze``'s progress lines: (seconds, CPU seconds,
    peak MB, {section: s}, stdout)."""
    start = time.perf_counter()
    process = subprocess.Popen(args, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True)  # fmt: skip
    _, status, usage = os.wait4(process.pid, 0)  # the output is small: no pipe fills up
    seconds = time.perf_counter() - start
    stdout, stderr = process.stdout.read(), process.stderr.read()
    if os.waitstatus_to_exitcode(status) != 0:
        raise RuntimeError(f"{args[:4]} failed:\n{stderr[-2000:]}")
    stamps = [(float(m.group(1)), m.group(2)) for m in
              re.finditer(r"^\[\s*([0-9.]+)s\] (.*?) \.\.\.$", stderr, re.M)]  # fmt: skip
    # Each section lasts until the next one starts; the last until the process ends (it
    # includes the interpreter's start-up and shutdown, which the progress clock does not see).
    ends = [t for t, _ in stamps[1:]] + [seconds] if stamps else []
    sections = {}
    for (t, label), end in zip(stamps, ends, strict=True):
        label = re.sub(r"^reading .*", "reading the data", label)
        sections[label] = sections.get(label, 0.0) + end - t
    return seconds, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024, sections, stdout


def analyze_table(sizes, tmp, env, repeats=1):
    rows, by_section = [], {}
    for n in sizes:
        csv = Path(tmp) / f"data_{n}.csv"
        # Written by a child: a forked child's peak RSS counts the parent's pages at the fork,
        # so the parent must stay small (no pandas or pscore_strata imported here).
        _child([sys.executable, "-c", _WRITE, str(n), str(csv)], env)
        command = [sys.executable, "-m", "pscore_strata", "analyze", str(csv), "--outcome",
                   "outcome", "--treatment", "treatment", "--survival", "survival",
                   "--covariates", *[f"x{j}" for j in range(5)],
                   "--out", str(Path(tmp) / f"report_{n}")]  # fmt: skip
        runs, section_runs = [], []
        for _ in range(repeats):  # alternating, so both see the same machine load
            analyze_s, analyze_cpu, analyze_mb, sections, _ = _analyze_child(command, env)
            section_runs.append(sections)
            bare_s, bare_cpu, bare_mb, _, out = _analyze_child(
                [sys.executable, "-c", _BARE, str(csv)], env)
            # the read and the fits, without start-up
            runs.append((analyze_s, bare_s, float(out.split()[0]), analyze_mb, bare_mb,
                         analyze_cpu, bare_cpu))
        (analyze_s, bare_s, bare_inner, analyze_mb, bare_mb, analyze_cpu,
         bare_cpu) = map(median, zip(*runs, strict=True))
        by_section[n] = {label: median(s.get(label, 0.0) for s in section_runs)
                         for label in section_runs[0]}  # fmt: skip
        results = json.loads((Path(tmp) / f"report_{n}" / "results.json").read_text())
        record = results.get("distributions") or {}
        rows.append((n, analyze_s, bare_s, bare_inner, analyze_mb, bare_mb,
                     bool(record.get("available")), analyze_cpu, bare_cpu))
        csv.unlink()
    print("analyze end to end (default settings: distributions and quantile bounds included)\n")
    print("| rows | analyze (s) | bare process (s) | bare read + fits, in process (s) | "
          "analyze / bare process | row-proportional ratio | peak RSS MB | bare peak RSS MB | "
          "distributions |")
    print("|---|---|---|---|---|---|---|---|---|")
    n0, a0, b0 = rows[0][0], rows[0][1], rows[0][3]
    for n, a, b, inner, mb, bare_mb, available, _, _ in rows:
        # (analyze - analyze at the smallest size) / (read + fits - the same at the smallest)
        proportional = "" if n == n0 else f"{(a - a0) / max(inner - b0, 1e-9):.2f}"
        print(f"| {n:,} | {a:.1f} | {b:.1f} | {inner:.2f} | {a / b:.2f} | {proportional} | "
              f"{mb:.0f} | {bare_mb:.0f} | {'yes' if available else 'NO'} |")  # fmt: skip
    # CPU seconds of the whole processes: what a shared machine's load changes least.
    print("\nthe same runs in CPU seconds (user + system of each process; the row-proportional "
          "ratio subtracts the smallest size from both)\n")
    print("| rows | analyze CPU (s) | bare CPU (s) | row-proportional CPU ratio |")
    print("|---|---|---|---|")
    c0, d0 = rows[0][7], rows[0][8]
    for n, *_, cpu, bare_cpu in rows:
        proportional = "" if n == n0 else f"{(cpu - c0) / max(bare_cpu - d0, 1e-9):.2f}"
        print(f"| {n:,} | {cpu:.1f} | {bare_cpu:.1f} | {proportional} |")
    import numpy as np  # only after the children ran (see above)

    ns = np.array([r[0] for r in rows], dtype=float)
    mbs = np.array([r[4] for r in rows])
    slope, intercept = np.polyfit(ns, mbs * 2**20, 1)
    print(f"\npeak RSS = {intercept / 2**20:.0f} MB + {slope:.0f} bytes per row "
          "(least squares over the sizes)")
    print("\nanalyze by section (seconds from its progress lines; the last size minus the first "
          "is the section's row-proportional cost)\n")
    labels = list(by_section[sizes[-1]])
    print("| section | " + " | ".join(f"{n:,} rows" for n in sizes) + " | last - first |")
    print("|---|" + "---|" * (len(sizes) + 1))
    for label in labels:
        cells = [by_section[n].get(label, 0.0) for n in sizes]
        print(f"| {label} | " + " | ".join(f"{c:.2f}" for c in cells) +
              f" | {cells[-1] - cells[0]:.2f} |")  # fmt: skip


def library_table(n, env, repeats=1):
    print(f"\nlibrary calls at {n:,} rows x 5 covariates (each row of the table: one fresh "
          "process; cold = first call after fit)\n")
    print("| estimator | fit (s) | quantile_effects cold (s) | / fit | survivor_distribution "
          "warm (s) | / fit | survivor_distribution cold (s) | / fit | quantile_effects warm "
          "(s) | peak RSS MB |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    cpu_rows = []
    for name in ("weighting", "regression", "robust"):
        out = {first: [] for first in ("quantiles", "distribution")}
        for _ in range(repeats):
            for first in out:
                _, _, stdout = _child([sys.executable, "-c", _LIBRARY, str(n), name, first], env)
                out[first].append([float(v) for v in stdout.split()])
        # Median over the repeats of each column (the ratios: of the per-process ratios).
        runs = out["quantiles"]
        fit_q, q_cold, d_warm, *_ = map(median, zip(*runs, strict=True))
        q_cold_ratio = median(r[1] / r[0] for r in runs)
        d_warm_ratio = median(r[2] / r[0] for r in runs)
        fit_d, q_warm, d_cold, *_ = map(median, zip(*out["distribution"], strict=True))
        d_cold_ratio = median(r[2] / r[0] for r in out["distribution"])
        peak = max(r[4] for r in runs)
        peak_d = max(r[4] for r in out["distribution"])
        cpu_rows.append((name, median(r[5] for r in runs),
                         median(r[6] / r[5] for r in runs), median(r[7] / r[5] for r in runs),
                         median(r[7] / r[5] for r in out["distribution"]),
                         median(r[6] / r[5] for r in out["distribution"])))  # fmt: skip
        print(f"| {name} | {fit_q:.2f} | {q_cold:.2f} | {q_cold_ratio:.2f} | {d_warm:.2f} | "
              f"{d_warm_ratio:.2f} | {d_cold:.2f} | {d_cold_ratio:.2f} | {q_warm:.2f} | "
              f"{max(peak, peak_d):.0f} |")  # fmt: skip
    print("\nthe same calls in CPU seconds (process time; ratios to the same process's fit)\n")
    print("| estimator | fit CPU (s) | quantile_effects cold / fit | survivor_distribution warm "
          "/ fit | survivor_distribution cold / fit | quantile_effects warm / fit |")
    print("|---|---|---|---|---|---|")
    for name, fit_cpu, q_cold, d_warm, d_cold, q_warm in cpu_rows:
        print(f"| {name} | {fit_cpu:.2f} | {q_cold:.2f} | {d_warm:.2f} | {d_cold:.2f} | "
              f"{q_warm:.2f} |")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--analyze-sizes", type=int, nargs="+",
                        default=[2_000, 100_000, 250_000, 500_000])
    parser.add_argument("--library-size", type=int, default=1_000_000)
    parser.add_argument("--skip-analyze", action="store_true")
    parser.add_argument("--skip-library", action="store_true")
    parser.add_argument("--skip-grid", action="store_true")
    parser.add_argument("--repeats", type=int, default=1,
                        help="fresh processes per measurement; the tables show their median")
    args = parser.parse_args(argv)
    env = dict(os.environ)
    print(f"load average at start: {os.getloadavg()[0]:.1f} (2 cores); "
          f"OMP_NUM_THREADS={env.get('OMP_NUM_THREADS', 'unset')}\n")
    with tempfile.TemporaryDirectory() as tmp:
        if not args.skip_analyze:
            analyze_table(args.analyze_sizes, tmp, env, args.repeats)
    if not args.skip_library:
        library_table(args.library_size, env, args.repeats)
    if not args.skip_grid:
        grid_table(args.library_size, env)
    print(f"\nload average at end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
