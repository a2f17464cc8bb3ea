"""Monte Carlo studies: estimators against the known SACE of simulated scenarios.

``run_study`` fits every estimator on every simulated replicate and returns one tidy row per
replicate x estimator x scenario x sample size; ``summarize`` turns those rows into bias, RMSE,
coverage and the other operating characteristics; ``plot_summary`` draws them.

Every (scenario, sample size, replicate) cell draws its data from its own
:class:`numpy.random.SeedSequence`, keyed by the scenario name, the sample size and the
replicate number, so a cell's result depends on neither the number of workers, the order in
which cells finish, nor which other cells are in the study.
"""

from __future__ import annotations

import time
import warnings
import zlib

import numpy as np
import pandas as pd
from joblib import Parallel, delayed, effective_n_jobs
from sklearn.base import clone

from ..datasets import make_scenario
from ._checks import (
    check_count,
    check_estimators,
    check_level,
    check_scenarios,
    check_sizes,
    root_seed,
)
from ._store import CheckpointStore, tidy

__all__ = ["run_study"]



def _key(text):
    return zlib.crc32(text.encode("utf-8"))


def _cell_seed(entropy, scenario, n, replicate, *more):
    # Keyed spawning: the same (entropy, key) always gives the same stream, independently of the
    # other cells (numpy SeedSequence spawn_key semantics).
    return np.random.SeedSequence(entropy, spawn_key=(_key(scenario), n, replicate, *more))


# -- one cell ----------------------------------------------------------------------------------
def _simulate(spec, n, seed):
    rng = np.random.default_rng(seed)
    data = make_scenario(spec, n, random_state=rng) if isinstance(spec, str) else spec(n, rng)
    missing = [f for f in ("X", "y", "treatment", "survival", "true_effect") if f not in data]
    if missing:
        raise ValueError(
            f"A scenario callable returned an object without {', '.join(missing)}; it must "
            "return a Bunch with X, y, treatment, survival and true_effect (groups optional)."
        )
    return data


def _seeded_clone(estimator, seed):
    """Clone and fix every unset ``random_state`` (also in nested models) from ``seed``.

    Without this, folds and bootstrap resamples would come from global state and differ
    between workers.
    """
    est = clone(estimator)
    unset = [
        k for k, v in est.get_params(deep=True).items() if k.endswith("random_state") and v is None
    ]
    if unset:
        value = int(seed.generate_state(1)[0])
        est.set_params(**dict.fromkeys(unset, value))
    return est


def _fit_one(estimator, data, level):
    fit_kwargs = {"treatment": data.treatment, "survival": data.survival}
    if data.get("groups") is not None:
        fit_kwargs["groups"] = data.groups
    row = {
        "estimate": np.nan,
        "std_error": np.nan,
        "ci_low": np.nan,
        "ci_high": np.nan,
        "failed": False,
        "error": "",
        "warnings": "",
    }
    start = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            estimator.fit(data.X, data.y, **fit_kwargs)
            row["estimate"] = float(estimator.effect_)
            row["std_error"] = float(estimator.std_error_)
            row["ci_low"], row["ci_high"] = map(float, estimator.conf_int(level))
        except Exception as exc:  # a failed fit is a result of the study, not a crash
            row["failed"] = True
            row["error"] = f"{type(exc).__name__}: {exc}"
    row["fit_seconds"] = time.perf_counter() - start
    if not row["failed"] and not np.isfinite(row["estimate"]):
        row["failed"] = True
        row["error"] = "non-finite estimate"
    row["warnings"] = "; ".join(sorted({w.category.__name__ for w in caught}))
    return row


def _run_cell(estimators, scenario, spec, n, replicate, entropy, level):
    data = _simulate(spec, n, _cell_seed(entropy, scenario, n, replicate, 0))
    rows = []
    for name, estimator in estimators.items():
        est = _seeded_clone(estimator, _cell_seed(entropy, scenario, n, replicate, 1, _key(name)))
        row = {
            "scenario": scenario,
            "n_samples": n,
            "replicate": replicate,
            "estimator": name,
            "truth": float(data.true_effect),
        }
        row.update(_fit_one(est, data, level))
        rows.append(row)
    return rows


# -- the study ---------------------------------------------------------------------------------
def run_study(
    estimators,
    scenarios,
    n_samples,
    n_reps,
    n_jobs=None,
    random_state=None,
    checkpoint=None,
    *,
    level=0.95,
    batch_size=None,
    progress=False,
):
    """Fit estimators on simulated replicates of scenarios with a known SACE.

    Parameters
    ----------
    estimators : dict of str -> estimator, or list of estimators
        Unfitted estimators, cloned for every replicate; a list is named by class. Any
        ``random_state`` parameter left at ``None`` (also in nested models) is set per replicate
        from the study's seed, so the study is reproducible.
    scenarios : str, callable, list of them, or dict of str -> str or callable
        Names from :data:`pscore_strata.datasets.SCENARIOS`, or callables
        ``f(n_samples, random_state)`` returning a Bunch with ``X``, ``y``, ``treatment``,
        ``survival``, ``true_effect`` and optionally ``groups`` (then passed to ``fit``, so
        standard errors are cluster-robust).
    n_samples : int or list of int
        Sample size(s) to simulate.
    n_reps : int
        Replicates per scenario and sample size.
    n_jobs : int or None, default=None
        joblib workers; ``None`` follows the active ``joblib.parallel_config`` (so
        ``parallel_config(backend="dask")`` runs the study on a dask cluster). Results do not
        depend on it.
    random_state : None, int or numpy.random.SeedSequence, default=None
        Root seed. Cell (scenario, n, replicate) draws from a child sequence keyed by all three.
    checkpoint : str or path-like, optional
        Directory in which finished replicates are saved as Parquet part files (one per batch,
        written atomically). A rerun with the same directory skips those replicates and returns
        the same table as an uninterrupted run (timing columns aside). With ``random_state=None``
        the seed stored in the directory is reused. Each part file records the study's settings,
        its cells and a checksum of its rows; a rerun checks them all first and raises
        ``ValueError``, naming the file to delete, for a part of another study (another seed,
        estimators or level), a mixture of studies, a part missing rows, a changed checksum and
        a truncated, empty or foreign file.
    level : float, default=0.95
        Confidence level of the intervals.
    batch_size : int, optional
        Cells per batch (and per part file); default four per worker.
    progress : bool, default=False
        Show a tqdm progress bar over cells.

    Returns
    -------
    results : pandas.DataFrame
        One row per scenario x n_samples x replicate x estimator: ``estimate``, ``std_error``,
        ``ci_low``, ``ci_high``, ``truth``, ``failed`` (an exception or a non-finite estimate),
        ``error``, ``warnings`` (categories raised during the fit) and ``fit_seconds``.
        Python's warning filters are process-wide, so under a thread-based backend
        (``"threading"``, dask workers with several threads) the ``warnings`` column may miss
        or misplace warnings; every other column is unaffected.

    See Also
    --------
    summarize : bias, RMSE, coverage and more per scenario x estimator x n.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> results = ps.simulation.run_study(
    ...     [ps.PrincipalScoreWeighting(), ps.MultiplyRobust()], ["linear"], 500, n_reps=2,
    ...     random_state=0)
    >>> results.shape[0]
    4
    """
    named_estimators = check_estimators(estimators)
    named_scenarios = check_scenarios(scenarios)
    sizes = check_sizes(n_samples)
    n_reps = check_count(n_reps, "n_reps")
    level = check_level(level)
    root = root_seed(random_state)
    if batch_size is None:
        batch_size = 4 * max(1, effective_n_jobs(n_jobs))
    batch_size = check_count(batch_size, "batch_size")
    store = None
    if checkpoint is not None:
        store = CheckpointStore(checkpoint)
        root = store.open(root, random_state is None, named_estimators, level, named_scenarios)
    entropy = root.entropy

    cells = [(s, n, r) for s in named_scenarios for n in sizes for r in range(n_reps)]
    done = store.load() if store is not None else tidy([])
    finished = set(zip(done["scenario"], done["n_samples"], done["replicate"], strict=True))
    pending = [c for c in cells if c not in finished]

    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=len(cells), initial=len(cells) - len(pending), unit="cell")
    new_parts = []
    with Parallel(n_jobs=n_jobs) as parallel:
        for start in range(0, len(pending), batch_size):
            batch = pending[start : start + batch_size]
            rows = parallel(
                delayed(_run_cell)(named_estimators, s, named_scenarios[s], n, r, entropy, level)
                for s, n, r in batch
            )
            part = tidy([row for cell_rows in rows for row in cell_rows])
            if store is not None:
                store.save(part, batch)
            new_parts.append(part)
            if bar is not None:
                bar.update(len(batch))
    if bar is not None:
        bar.close()

    results = pd.concat([done, *new_parts], ignore_index=True)
    return _in_study_order(results, cells, list(named_estimators))


def _in_study_order(results, cells, estimator_names):
    """Keep the study's cells and estimators; sort as the arguments listed them."""
    wanted = pd.MultiIndex.from_tuples(cells, names=["scenario", "n_samples", "replicate"])
    keys = pd.MultiIndex.from_frame(results[["scenario", "n_samples", "replicate"]])
    results = results[keys.isin(wanted) & results["estimator"].isin(estimator_names)]
    categories = {
        "scenario": list(dict.fromkeys(c[0] for c in cells)),
        "n_samples": list(dict.fromkeys(c[1] for c in cells)),
        "estimator": estimator_names,
    }
    sort_keys = results.assign(
        **{
            col: pd.Categorical(results[col], categories=cats, ordered=True)
            for col, cats in categories.items()
        }
    )
    index = sort_keys.sort_values(["scenario", "n_samples", "replicate", "estimator"]).index
    return tidy(results.loc[index].to_dict("records"))
