"""Monte Carlo studies: estimators against the known SACE of simulated scenarios.

``run_study`` fits every estimator on every simulated replicate and returns one tidy row per
replicate x estimator x scenario x sample size x parameter setting; ``summarize`` turns those
rows into bias, RMSE, coverage and the other operating characteristics with their Monte Carlo
standard errors; ``plot_summary`` draws them. Seeds and single cells are in ``_cells.py``, the
estimator contract in ``_fit.py``.
"""

from __future__ import annotations

import pandas as pd
from joblib import Parallel, delayed, effective_n_jobs

from .. import _version
from ._cells import run_cell
from ._checks import (
    check_count,
    check_estimators,
    check_level,
    check_overwrite,
    check_params,
    check_scenarios,
    check_sizes,
    check_version,
    root_seed,
)
from ._fingerprint import estimator_fingerprint, scenario_fingerprint
from ._store import KEY, CheckpointStore, tidy

__all__ = ["run_study"]


def _fingerprints(estimators, scenarios, version):
    return {
        "library": _version.__version__,
        "version": version,
        "estimators": {name: estimator_fingerprint(est) for name, est in estimators.items()},
        "scenarios": {name: scenario_fingerprint(name, spec) for name, spec in scenarios.items()},
    }


def _stop_if_all_failed(rows, scenario):
    """Raise when an estimator failed in every replicate of a scenario, with its first error."""
    for name, group in rows.groupby("estimator", sort=False):
        if len(group) and group["failed"].all():
            first = group.iloc[0]
            setting = "" if first["params"] == "{}" else f", params {first['params']}"
            raise RuntimeError(
                f"Estimator {name!r} failed in all {len(group)} replicates of scenario "
                f"{scenario!r}; the study stops. First error (n_samples={first['n_samples']}"
                f"{setting}, replicate {first['replicate']}): {first['error']}. Fix the "
                "estimator or the scenario (a scenario with missing data needs estimators "
                "with missing=\"at_random\"), then rerun."
            )


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
    params=None,
    level=0.95,
    batch_size=None,
    progress=False,
    version=None,
    overwrite=None,
):
    """Fit estimators on simulated replicates of scenarios with a known SACE.

    Parameters
    ----------
    estimators : dict of str -> estimator, or list of estimators
        Unfitted estimators, cloned for every replicate; a list is named by class. Any
        ``random_state`` parameter left at ``None`` (also in nested models) is set per replicate
        from the study's seed, so the study is reproducible. The contract an estimator meets
        (the library's estimators and :class:`~pscore_strata.TrimmingBounds` do):

        - ``fit(X, y, *, treatment, survival)`` (with ``groups=`` when the scenario returns
          cluster labels), ``y`` NaN where ``survival == 0``;
        - a point estimator sets ``effect_`` and ``std_error_`` (NaN allowed) and may have
          ``conf_int(level)``; without it the interval is the Wald interval
          ``effect_ +/- z std_error_``, marked ``"wald"`` in the ``interval`` column;
        - a bounds estimator sets ``lower_`` and ``upper_`` instead of ``effect_``; its
          ``conf_int(level)`` covers the true effect (Imbens-Manski) and, if it accepts
          ``coverage="identified_set"``, that interval covers the identified set;
        - which of the two an estimator is, is read from its ``identification`` (``"point"``
          or ``"bounds"``, as the package's estimators declare it); an estimator without it
          counts as bounds when it has ``lower_`` and ``upper_``, else as a point estimator.
    scenarios : str, callable, list of them, or dict of str -> str or callable
        Names from :data:`pscore_strata.datasets.SCENARIOS`, or callables called as
        ``f(n_samples=n, random_state=rng, **setting)`` (so ``functools.partial`` of
        :func:`~pscore_strata.datasets.make_truncation` works) returning a Bunch with ``X``,
        ``y``, ``treatment``, ``survival``, ``true_effect`` (finite, or NaN for an unknown
        truth) and optionally ``groups`` (passed to ``fit``, so standard errors are
        cluster-robust) and ``true_bounds`` (the identified set, for bounds estimators; the
        named truncation scenarios compute theirs by a large simulation).
    n_samples : int or list of int
        Sample size(s) to simulate.
    n_reps : int
        Replicates per scenario, sample size and parameter setting.
    n_jobs : int or None, default=None
        joblib workers; ``None`` follows the active ``joblib.parallel_config`` (so
        ``parallel_config(backend="dask")`` runs the study on a dask cluster). Results do not
        depend on it.
    random_state : None, int or numpy.random.SeedSequence, default=None
        Root seed. Each cell draws from a child sequence keyed by scenario name, n, replicate
        and parameter setting; :func:`simulate_cell` redraws one.
    checkpoint : str or path-like, optional
        Directory in which finished replicates are saved as Parquet part files (one per batch,
        written atomically). A rerun with the same directory skips those replicates and returns
        the same table as an uninterrupted run (timing columns aside). With ``random_state=None``
        the seed stored in the directory is reused. Each part file records the study's settings,
        its cells, a checksum of its rows and the fingerprints of what made them (each
        scenario's callable, its arguments, defaults, closure values and source digest; each
        estimator's class, class source digests and parameters; the library version; the
        ``version`` tag). A rerun checks them all first and raises ``ValueError``, naming the
        file and what to do, for a part of another study (another seed, estimator names or
        level), a mixture of studies, a part missing rows, a changed checksum, a truncated,
        empty or foreign file, and a part whose fingerprints differ (naming what changed).
    params : dict of str -> list, or list of dict, optional
        Parameter settings, a study axis beside ``n_samples``: a dict of lists is crossed, a
        list of dicts is taken as is. Each setting is passed to every scenario as keyword
        arguments (:func:`~pscore_strata.datasets.make_scenario` accepts the scenario's
        parameters), and recorded as JSON in the ``params`` column.
    level : float, default=0.95
        Confidence level of the intervals.
    batch_size : int, optional
        Cells per batch (and per part file); default four per worker.
    progress : bool, default=False
        Show a tqdm progress bar over cells.
    version : str, optional
        A tag for what the fingerprints cannot see (a data file the scenario reads, a global
        setting); a checkpoint written under another tag is treated as changed.
    overwrite : {None, "changed"}, default=None
        ``None`` refuses a checkpoint part whose fingerprints differ from this study's;
        ``"changed"`` deletes such parts and recomputes their replicates (with the same seeds),
        keeping every unchanged part.

    Returns
    -------
    results : pandas.DataFrame
        One row per scenario x n_samples x params x replicate x estimator: ``kind``
        (``"point"`` or ``"bounds"``), ``estimate``, ``std_error``, ``ci_low``, ``ci_high``,
        ``interval`` (``"conf_int"`` or ``"wald"``), ``lower``, ``upper`` and ``set_low``,
        ``set_high`` (bounds and their identified-set interval; NaN for point estimators),
        ``truth``, ``truth_lower``, ``truth_upper`` (NaN unless the scenario returns
        ``true_bounds``), ``failed`` (an exception or a non-finite estimate), ``error``,
        ``warnings`` (categories raised during the fit) and ``fit_seconds``. Python's warning
        filters are process-wide, so under a thread-based backend (``"threading"``, dask
        workers with several threads) the ``warnings`` column may miss or misplace warnings;
        every other column is unaffected.

    Raises
    ------
    RuntimeError
        When an estimator fails in every replicate of a scenario (the study stops once that
        scenario's cells are done, with the first error).

    See Also
    --------
    summarize : bias, RMSE, coverage and more per scenario x estimator x n, with Monte Carlo
        standard errors.
    simulate_cell : the data of one replicate.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> results = ps.simulation.run_study(
    ...     [ps.PrincipalScoreWeighting(), ps.MultiplyRobust()], ["linear"], 500, n_reps=2,
    ...     random_state=0)
    >>> results.shape[0]
    4
    >>> grid = ps.simulation.run_study(
    ...     [ps.OutcomeRegression()], "monotonicity_violated", 500, n_reps=1, random_state=0,
    ...     params={"harmed_difference": [0.0, 1.5]})
    >>> grid["params"].tolist()
    ['{"harmed_difference": 0.0}', '{"harmed_difference": 1.5}']
    """
    named_estimators = check_estimators(estimators)
    named_scenarios = check_scenarios(scenarios)
    sizes = check_sizes(n_samples)
    settings = check_params(params)
    n_reps = check_count(n_reps, "n_reps")
    level = check_level(level)
    version = check_version(version)
    overwrite = check_overwrite(overwrite)
    root = root_seed(random_state)
    if batch_size is None:
        batch_size = 4 * max(1, effective_n_jobs(n_jobs))
    batch_size = check_count(batch_size, "batch_size")
    store = None
    if checkpoint is not None:
        store = CheckpointStore(checkpoint)
        fingerprints = _fingerprints(named_estimators, named_scenarios, version)
        root = store.open(root, random_state is None, named_estimators, level, named_scenarios,
                          fingerprints, overwrite)  # fmt: skip
    entropy = root.entropy

    cells = [
        (s, n, p, r)
        for s in named_scenarios for n in sizes for p in settings for r in range(n_reps)
    ]  # fmt: skip
    done = store.load() if store is not None else tidy([])
    finished = set(zip(*(done[k] for k in KEY), strict=True))
    pending = [c for c in cells if c not in finished]
    remaining = pd.Series([c[0] for c in pending], dtype=object).value_counts().to_dict()
    parts = [done]
    for scenario in named_scenarios:
        if not remaining.get(scenario):
            _stop_if_all_failed(_rows_of(done, scenario, named_estimators), scenario)

    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=len(cells), initial=len(cells) - len(pending), unit="cell")
    with Parallel(n_jobs=n_jobs) as parallel:
        for start in range(0, len(pending), batch_size):
            batch = pending[start : start + batch_size]
            rows = parallel(
                delayed(run_cell)(named_estimators, s, named_scenarios[s], n, p, r, entropy, level)
                for s, n, p, r in batch
            )
            part = tidy([row for cell_rows in rows for row in cell_rows])
            if store is not None:
                store.save(part, batch)
            parts.append(part)
            if bar is not None:
                bar.update(len(batch))
            for scenario in dict.fromkeys(c[0] for c in batch):
                remaining[scenario] -= sum(c[0] == scenario for c in batch)
                if not remaining[scenario]:
                    so_far = pd.concat(parts, ignore_index=True)
                    _stop_if_all_failed(_rows_of(so_far, scenario, named_estimators), scenario)
    if bar is not None:
        bar.close()

    results = pd.concat(parts, ignore_index=True)
    return _in_study_order(results, cells, list(named_estimators))


def _rows_of(results, scenario, estimators):
    return results[(results["scenario"] == scenario) & results["estimator"].isin(estimators)]


def _in_study_order(results, cells, estimator_names):
    """Keep the study's cells and estimators; sort as the arguments listed them."""
    wanted = pd.MultiIndex.from_tuples(cells, names=KEY)
    keys = pd.MultiIndex.from_frame(results[KEY])
    results = results[keys.isin(wanted) & results["estimator"].isin(estimator_names)]
    categories = {
        "scenario": list(dict.fromkeys(c[0] for c in cells)),
        "n_samples": list(dict.fromkeys(c[1] for c in cells)),
        "params": list(dict.fromkeys(c[2] for c in cells)),
        "estimator": estimator_names,
    }
    sort_keys = results.assign(
        **{
            col: pd.Categorical(results[col], categories=cats, ordered=True)
            for col, cats in categories.items()
        }
    )
    index = sort_keys.sort_values([*KEY, "estimator"]).index
    return tidy(results.loc[index].to_dict("records"))
