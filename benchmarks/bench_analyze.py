"""End-to-end time and memory of ``pscore-strata analyze`` beside the bare work it needs.

For each size, a CSV of ``make_truncation(n, n_features=5)`` is written once; then, in one run:

- ``analyze``: the command line (``python -m pscore_strata analyze ... --quiet``) in a fresh
  process, wall time and peak resident memory (``ru_maxrss`` of the child);
- ``bare``: ``pandas.read_csv`` of the same file plus the bare scikit-learn fits of the five
  models the analysis needs (treatment, survival per arm, outcome per arm; the default
  unpenalized logistic and linear models), in a fresh process;
- ``explicit``: ``PrincipalScoreWeighting`` with an explicit ``LogisticRegression(C=np.inf)``
  (lbfgs, the scikit-learn default solver) for both models, against the default models.

Peak memory is compared with the float64 covariate matrix X (n x 5 x 8 bytes). The ratio
``analyze / bare`` is the target of issue 12 (<= 5x at 1e6 rows, linear learner); memory under
8x X for the whole run; the explicit model within 1.5x of the default's time.

Timings are wall-clock on a 2-core machine shared with other work: read them as indicative.

Usage: python benchmarks/bench_analyze.py [--sizes 100000 1000000] [--learner linear]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

_BARE = textwrap.dedent(
    """
    import resource, sys, time
    import numpy as np, pandas as pd
    from sklearn.linear_model import LinearRegression, LogisticRegression
    start = time.perf_counter()
    frame = pd.read_csv(sys.argv[1])
    X = frame[[f"x{j}" for j in range(5)]].to_numpy(float)
    T, S, Y = (frame[c].to_numpy() for c in ("treatment", "survival", "outcome"))
    def logit():
        return LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-10, max_iter=200)
    logit().fit(X, T)
    for arm in (0, 1):
        rows = T == arm
        logit().fit(X[rows], S[rows])
        alive = rows & (S == 1)
        LinearRegression().fit(X[alive], Y[alive])
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(seconds, peak)
    """
)

_EXPLICIT = textwrap.dedent(
    """
    import sys, time, warnings
    import numpy as np
    from sklearn.linear_model import LogisticRegression
    import pscore_strata as ps
    data = ps.datasets.make_truncation(int(sys.argv[1]), n_features=5, random_state=0)
    out = {}
    explicit = LogisticRegression(C=np.inf)
    best = np.inf
    for _ in range(2):
        start = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            T, S = data.treatment, data.survival
            LogisticRegression(C=np.inf).fit(data.X, T)
            for arm in (0, 1):
                LogisticRegression(C=np.inf).fit(data.X[T == arm], S[T == arm])
        best = min(best, time.perf_counter() - start)
    out["bare_explicit"] = best
    for name, model in (("default", None), ("explicit", explicit)):
        best = np.inf
        for _ in range(2):
            start = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                est = ps.PrincipalScoreWeighting(treatment_model=model, survival_model=model)
                est.fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
            best = min(best, time.perf_counter() - start)
        out[name] = (best, est.std_error_method_, est.effect_, est.std_error_)
    print(repr(out))
    """
)


def _write_csv(n, path):
    import pandas as pd

    import pscore_strata as ps

    data = ps.datasets.make_truncation(n, n_features=5, random_state=0)
    frame = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(5)])
    frame["treatment"] = data.treatment
    frame["survival"] = data.survival
    frame["outcome"] = data.y
    frame.to_csv(path, index=False)


def _child(args, env):
    start = time.perf_counter()
    process = subprocess.Popen(args, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True)  # fmt: skip
    _, status, usage = os.wait4(process.pid, 0)
    seconds = time.perf_counter() - start
    stdout, stderr = process.stdout.read(), process.stderr.read()
    if os.waitstatus_to_exitcode(status) != 0:
        raise RuntimeError(f"{args[:4]} failed:\n{stderr[-2000:]}")
    return seconds, usage.ru_maxrss / 1024, stdout


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument("--learner", default="linear", choices=("linear", "boosting"))
    parser.add_argument("--explicit-sizes", type=int, nargs="*", default=None,
                        help="sizes for the explicit-model comparison (default: --sizes)")
    args = parser.parse_args(argv)
    env = dict(os.environ)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            csv = Path(tmp) / f"data_{n}.csv"
            _write_csv(n, csv)
            x_mb = n * 5 * 8 / 2**20
            command = [sys.executable, "-m", "pscore_strata", "analyze", str(csv), "--outcome",
                       "outcome", "--treatment", "treatment", "--survival", "survival",
                       "--covariates", *[f"x{j}" for j in range(5)], "--learner", args.learner,
                       "--out", str(Path(tmp) / f"report_{n}"), "--quiet"]  # fmt: skip
            analyze_s, analyze_mb, _ = _child(command, env)
            bare_s, bare_mb, out = _child([sys.executable, "-c", _BARE, str(csv)], env)
            bare_inner = float(out.split()[0])
            results = json.loads((Path(tmp) / f"report_{n}" / "results.json").read_text())
            primary = next(e for e in results["estimates"] if e["primary"])
            rows.append((n, args.learner, analyze_s, bare_s, bare_inner, analyze_mb, bare_mb, x_mb,
                         primary["effect"]))  # fmt: skip
    print(f"analyze end to end ({args.learner} learner; 2 shared cores, wall clock)\n")
    print("| rows | learner | analyze (s) | bare: read + 5 fits, process (s) | bare in-process (s) "
          "| analyze / bare process | peak RSS MB | bare peak RSS MB | X MB | peak / X | "
          "(peak - bare peak) / X | primary effect |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|")
    for n, learner, a, b, bi, mb, bare_mb, x_mb, effect in rows:
        print(f"| {n:,} | {learner} | {a:.1f} | {b:.1f} | {bi:.1f} | {a / b:.2f} | {mb:.0f} | "
              f"{bare_mb:.0f} | {x_mb:.0f} | {mb / x_mb:.1f} | {(mb - bare_mb) / x_mb:.1f} | "
              f"{effect:.4f} |")  # fmt: skip
    explicit_sizes = args.sizes if args.explicit_sizes is None else args.explicit_sizes
    if not explicit_sizes:
        return
    print("\nexplicit LogisticRegression(C=np.inf) (lbfgs) against the default models, "
          "PrincipalScoreWeighting.fit, best of 2\n")  # fmt: skip
    print("| rows | default (s) | explicit (s) | explicit / default | bare explicit fits (s) | "
          "SE method default | SE method explicit | |effect diff| | |SE diff| |")
    print("|---|---|---|---|---|---|---|---|---|")
    for n in explicit_sizes:
        _, _, out = _child([sys.executable, "-c", _EXPLICIT, str(n)], env)
        res = eval(out)  # noqa: S307 (our own child's repr of floats and strings)
        (d, dm, de, ds), (e, em, ee, es) = res["default"], res["explicit"]
        print(f"| {n:,} | {d:.3f} | {e:.3f} | {e / d:.2f} | {res['bare_explicit']:.3f} | {dm} | "
              f"{em} | {abs(de - ee):.1e} | {abs(ds - es):.1e} |")


if __name__ == "__main__":
    main()
