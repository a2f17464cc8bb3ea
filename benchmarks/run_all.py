"""Run every benchmark of pscore_strata and write benchmarks/RESULTS.md.

Usage::

    python benchmarks/run_all.py            # full: 200 replicates per cell (about 15 min)
    python benchmarks/run_all.py --quick    # smoke run: 20 replicates per cell (a few minutes)

Part 1, the statistical benchmark, runs every named scenario of ``ps.datasets`` against the
three estimators with their default models at n = 500, 2000 and 10000 and tabulates bias, SD,
RMSE, SE/SD, coverage and interval width against the known SACE. Part 2 runs every other
script beside this file (the speed, memory and coverage benchmarks of the other parts of the
library) as a subprocess and records the tables it prints; with --quick a script gets its own
--quick option, or the smaller settings in QUICK_ARGS. The statistical part checkpoints to
``--checkpoint`` if given, so an interrupted full run resumes with the same command.
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import sklearn

import pscore_strata as ps

HERE = Path(__file__).resolve().parent
SIZES = (500, 2000, 10_000)
FULL_REPS, QUICK_REPS = 200, 20
# Smaller settings for --quick, used only when a script has no --quick option of its own.
QUICK_ARGS = {
    "bench_fit.py": ["--sizes", "10000", "100000", "--repeats", "1"],
    "bench_efficiency.py": [
        "--replicates",
        "100",
        "--n-large",
        "200000",
        "--n-linear",
        "100000",
        "--n-boosted",
        "20000",
    ],
}
SEED = 20_240_611


def markdown_table(frame, formats=None):
    """A GitHub-style table; ``formats`` maps column names to format strings."""
    formats = formats or {}
    header = "| " + " | ".join(frame.columns) + " |"
    rule = "| " + " | ".join("---" for _ in frame.columns) + " |"
    lines = [header, rule]
    for row in frame.itertuples(index=False):
        cells = []
        for column, value in zip(frame.columns, row, strict=True):
            fmt = formats.get(column)
            if fmt and isinstance(value, float | np.floating):
                cells.append("–" if np.isnan(value) else format(value, fmt))
            else:
                cells.append(str(value))
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def statistical_benchmark(n_reps, n_jobs, checkpoint, figure):
    # missing="at_random" is today's analysis exactly where nothing is missing, and models the
    # missing statuses and outcomes of the "lost_to_follow_up" and "missing_outcomes" scenarios.
    estimators = {
        "weighting": ps.PrincipalScoreWeighting(missing="at_random"),
        "regression": ps.OutcomeRegression(missing="at_random"),
        "multiply_robust": ps.MultiplyRobust(missing="at_random"),
    }
    # The intermediate_* family targets other strata than the always-survivors: it has its own
    # benchmark (strata_coverage.py), whose estimators target each scenario's stratum.
    scenarios = [s for s, r in ps.datasets.SCENARIOS.items() if r.family == "truncation"]
    resumed = checkpoint is not None and any(Path(checkpoint).glob("part-*.parquet"))
    start = time.perf_counter()
    results = ps.simulation.run_study(
        estimators,
        scenarios,
        list(SIZES),
        n_reps,
        n_jobs=n_jobs,
        random_state=SEED,
        checkpoint=checkpoint,
        progress=sys.stderr.isatty(),
    )
    seconds = time.perf_counter() - start
    summary = ps.simulation.summarize(results)
    if figure:
        fig = ps.simulation.plot_summary(summary)
        fig.savefig(figure, dpi=90)

    table = summary.assign(
        bias=[f"{b:+.3f} ({m:.3f})" for b, m in zip(summary.bias, summary.bias_mcse, strict=True)],
        coverage=[
            f"{c:.3f} ({m:.3f})"
            for c, m in zip(summary.coverage, summary.coverage_mcse, strict=True)
        ],
    )[
        [
            "scenario",
            "estimator",
            "n_samples",
            "truth",
            "bias",
            "sd",
            "rmse",
            "se_sd_ratio",
            "coverage",
            "mean_width",
            "n_failed",
        ]
    ]
    table = table.rename(
        columns={
            "n_samples": "n",
            "bias": "bias (MC s.e.)",
            "se_sd_ratio": "mean SE / SD",
            "coverage": "coverage (MC s.e.)",
            "mean_width": "CI width",
            "n_failed": "failed",
        }
    )
    floats = {"truth": ".3f", "sd": ".3f", "rmse": ".3f", "mean SE / SD": ".2f", "CI width": ".3f"}

    timing = (
        results.groupby(["estimator", "n_samples"], sort=False)["fit_seconds"]
        .median()
        .unstack("n_samples")
        .reindex(list(estimators))
    )
    timing.columns = [f"n = {n}" for n in timing.columns]
    timing = timing.reset_index()
    described = ps.datasets.list_scenarios()
    described = described[described["family"] == "truncation"]

    lines = [
        "## 1. Statistical benchmark: estimators against the known SACE",
        "",
        f"Every scenario of `ps.datasets.list_scenarios()` x the three estimators with their "
        f"default models (unpenalized logistic survival and treatment models, linear outcome "
        f"model) x n = {', '.join(map(str, SIZES))}, **{n_reps} replicates per cell** "
        f"(seed {SEED}; `n_jobs={n_jobs}`): {len(results)} fits taking "
        f"{results['fit_seconds'].sum() / 60:.1f} min of fitting in all; wall time "
        f"{seconds / 60:.1f} min{' (resumed from a checkpoint: this run only)' if resumed else ''}"
        ". Confidence intervals are 95% Wald intervals with each "
        "estimator's own standard error (sandwich for weighting and regression, influence "
        "function for multiply robust); `clustered` passes the cluster labels, so its standard "
        "errors are cluster-robust.",
        "",
        "Read: bias should be within about 2 MC s.e. of 0 and coverage near 0.95 (within about 2 "
        "MC s.e.) where the assumptions hold and the models are right (`linear`, `binary`, "
        "`clustered`, `weak_overlap` at large n); `nonlinear` misspecifies every working model "
        "and the `*_misspecified` scenarios one model family each (so only the estimators that "
        "rely on that model are biased), `pi_violated` and `monotonicity_violated` break an "
        "identifying assumption, so bias there shows what the violation costs. Each "
        "scenario's stated bias directions are in `list_scenarios()` (and checked by "
        "`scenario_bias.py`). 'failed' counts fits that raised or returned a non-finite "
        "estimate.",
        "",
        markdown_table(described[["name", "truth", "bias", "description"]]),
        "",
        markdown_table(table, floats),
        "",
        "Median seconds per fit (including the standard error), over all scenarios:",
        "",
        markdown_table(timing, {c: ".3f" for c in timing.columns}),
    ]
    return "\n".join(lines), summary


def script_benchmarks(quick, timeout):
    lines = ["## 2. Speed and memory benchmarks", ""]
    scripts = sorted(
        p for p in HERE.glob("*.py") if p.name != Path(__file__).name and not p.name.startswith("_")
    )
    if not scripts:
        lines += ["No benchmark scripts beside run_all.py in this checkout.", ""]
    for path in scripts:
        lines.append(f"### {path.name}")
        lines.append("")
        command = [sys.executable, str(path)]
        if quick and "--quick" in path.read_text(encoding="utf-8"):
            command.append("--quick")
        elif quick:
            command += QUICK_ARGS.get(path.name, [])
        env = {**os.environ, "PSCORE_STRATA_BENCH_QUICK": "1" if quick else "0"}
        start = time.perf_counter()
        try:
            done = subprocess.run(
                command, capture_output=True, text=True, timeout=timeout, env=env, cwd=HERE.parent
            )
            status = f"exit code {done.returncode}"
            output = done.stdout.strip()
            if done.returncode != 0:
                output += "\n--- stderr (last lines) ---\n" + "\n".join(
                    done.stderr.strip().splitlines()[-15:]
                )
        except subprocess.TimeoutExpired as exc:
            status = f"stopped after the {timeout} s limit"
            output = (
                (exc.stdout or b"").decode()
                if isinstance(exc.stdout, bytes)
                else (exc.stdout or "")
            )
        seconds = time.perf_counter() - start
        shown = " ".join(
            ["python", *(Path(c).name if c.endswith(".py") else c for c in command[1:])]
        )
        lines += [
            f"`{shown}`: {status}, {seconds:.0f} s.",
            "",
            "```",
            output or "(no output)",
            "```",
            "",
        ]
    return "\n".join(lines)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--quick",
        action="store_true",
        help=f"{QUICK_REPS} replicates per cell instead of {FULL_REPS}",
    )
    parser.add_argument("--n-reps", type=int, default=None, help="override the replicates")
    parser.add_argument("--n-jobs", type=int, default=2, help="joblib workers (default 2)")
    parser.add_argument(
        "--checkpoint",
        default=None,
        help="directory for resumable Parquet checkpoints of the study",
    )
    parser.add_argument("--figure", default=None, help="also save the summary figure (PNG)")
    parser.add_argument("--output", default=str(HERE / "RESULTS.md"))
    parser.add_argument(
        "--script-timeout",
        type=int,
        default=None,
        help="seconds allowed per bench_*.py (default 600 quick, 3600 full)",
    )
    parser.add_argument(
        "--skip-scripts", action="store_true", help="run only the statistical benchmark"
    )
    args = parser.parse_args(argv)
    n_reps = args.n_reps or (QUICK_REPS if args.quick else FULL_REPS)
    timeout = args.script_timeout or (600 if args.quick else 3600)

    statistical, _ = statistical_benchmark(n_reps, args.n_jobs, args.checkpoint, args.figure)
    scripts = "" if args.skip_scripts else script_benchmarks(args.quick, timeout)
    mode = "quick" if args.quick else "full"
    command = "python benchmarks/run_all.py" + (" --quick" if args.quick else "")
    header = [
        "# Benchmark results",
        "",
        f"Written by `{command}` ({mode} run, {n_reps} replicates per cell) on "
        f"{datetime.now(timezone.utc).strftime('%Y-%m-%d %H:%M UTC')}: {os.cpu_count()} cores, "
        f"Python {platform.python_version()}, numpy {np.__version__}, scikit-learn "
        f"{sklearn.__version__}, pscore_strata {ps.__version__}. The machine is shared, so "
        "timings are indicative.",
        "",
        "These are simulations in which the truth and the assumptions are known by "
        "construction. With real patients the always-survivor stratum is latent, monotonicity "
        "and principal ignorability cannot be tested, and no individual decision should rest on "
        "an estimate; analyses follow the study protocol and local regulation, with a qualified "
        "statistician.",
        "",
    ]
    text = "\n".join(header) + "\n" + statistical + "\n\n" + scripts
    Path(args.output).write_text(text.rstrip() + "\n", encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()
