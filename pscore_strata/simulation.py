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

from ._simulation_checks import (
    check_count,
    check_estimators,
    check_level,
    check_scenarios,
    check_sizes,
    root_seed,
)
from ._simulation_store import CheckpointStore, tidy
from .datasets import make_scenario

__all__ = ["run_study", "summarize", "plot_summary"]

_SUMMARY_CAUTION = (
    "These operating characteristics hold for simulated data in which the assumptions are known "
    "to hold or fail by construction. In real data the always-survivor stratum is latent and "
    "monotonicity and principal ignorability cannot be tested; no individual decisions should "
    "rest on an estimate. Defer to the study protocol, local regulation and a qualified "
    "statistician."
)


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
        the seed stored in the directory is reused.
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
        root = store.open(root, random_state is None, named_estimators, level)
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
                store.save(part)
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


# -- summaries ---------------------------------------------------------------------------------
_GROUP = ["scenario", "estimator", "n_samples"]
_NEEDED = [*_GROUP, "estimate", "std_error", "ci_low", "ci_high", "truth", "failed"]


def _summarize_group(group):
    ok = group[~group["failed"].astype(bool)]
    k = len(ok)
    error = ok["estimate"] - ok["truth"]
    sd = float(ok["estimate"].std(ddof=1)) if k > 1 else np.nan
    covered = (ok["ci_low"] <= ok["truth"]) & (ok["truth"] <= ok["ci_high"])
    coverage = float(covered.mean()) if k else np.nan
    mean_se = float(ok["std_error"].mean()) if k else np.nan
    return pd.Series(
        {
            "n_reps": len(group),
            "n_failed": len(group) - k,
            "truth": float(group["truth"].mean()),
            "mean_estimate": float(ok["estimate"].mean()) if k else np.nan,
            "bias": float(error.mean()) if k else np.nan,
            # Monte Carlo standard errors of the bias and the coverage (Morris, White & Crowther
            # 2019, Stat Med, Table 6): SD / sqrt(k) and sqrt(c (1 - c) / k).
            "bias_mcse": sd / np.sqrt(k) if k > 1 else np.nan,
            "sd": sd,
            "rmse": float(np.sqrt(np.mean(error**2))) if k else np.nan,
            "mean_se": mean_se,
            "se_sd_ratio": mean_se / sd if k > 1 and sd > 0 else np.nan,
            "coverage": coverage,
            "coverage_mcse": float(np.sqrt(coverage * (1 - coverage) / k)) if k else np.nan,
            "mean_width": float((ok["ci_high"] - ok["ci_low"]).mean()) if k else np.nan,
        }
    )


def summarize(results):
    """Operating characteristics per scenario x estimator x sample size.

    Parameters
    ----------
    results : pandas.DataFrame
        The output of :func:`run_study` (or any table with its columns).

    Returns
    -------
    summary : pandas.DataFrame
        One row per scenario x estimator x n_samples, in order of appearance, with ``n_reps``,
        ``n_failed``, ``truth``, ``mean_estimate``, ``bias`` (mean of estimate - truth),
        ``bias_mcse``, ``sd`` (Monte Carlo SD, ddof=1), ``rmse``, ``mean_se``, ``se_sd_ratio``
        (near 1 when standard errors are honest), ``coverage`` (share of intervals holding the
        truth), ``coverage_mcse`` and ``mean_width``. Failed replicates count in ``n_failed``
        only. ``attrs["notes"]`` carries the cautions for reading it.
    """
    if not isinstance(results, pd.DataFrame):
        raise TypeError(
            f"`results` must be the DataFrame returned by run_study; got {type(results).__name__}."
        )
    missing = [c for c in _NEEDED if c not in results.columns]
    if missing:
        raise ValueError(
            f"`results` lacks the column(s) {', '.join(missing)}; pass the DataFrame returned by "
            "run_study."
        )
    if results.empty:
        raise ValueError("`results` has no rows; run a study with at least one replicate.")
    summary = results.groupby(_GROUP, sort=False)[_NEEDED[3:]].apply(_summarize_group).reset_index()
    summary["n_reps"] = summary["n_reps"].astype(int)
    summary["n_failed"] = summary["n_failed"].astype(int)
    summary.attrs["notes"] = [_SUMMARY_CAUTION]
    return summary


_PANELS = (
    ("bias", "Bias (+/- 2 MC s.e.)"),
    ("rmse", "RMSE"),
    ("se_sd_ratio", "Mean SE / SD"),
    ("coverage", "Coverage"),
)


def plot_summary(summary, *, level=0.95):
    """Draw bias, RMSE, SE/SD and coverage against sample size, one row per scenario.

    Parameters
    ----------
    summary : pandas.DataFrame
        The output of :func:`summarize`.
    level : float, default=0.95
        Nominal level drawn as the coverage reference line.

    Returns
    -------
    fig : matplotlib.figure.Figure
    """
    if not isinstance(summary, pd.DataFrame) or "se_sd_ratio" not in summary.columns:
        raise TypeError("`summary` must be the DataFrame returned by summarize(results).")
    import matplotlib.pyplot as plt

    scenarios = list(dict.fromkeys(summary["scenario"]))
    estimators = list(dict.fromkeys(summary["estimator"]))
    sizes = sorted(set(summary["n_samples"]))
    fig, axes = plt.subplots(
        len(scenarios),
        len(_PANELS),
        figsize=(3.2 * len(_PANELS), 2.3 * len(scenarios) + 0.8),
        squeeze=False,
        sharex=True,
    )
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for i, scenario in enumerate(scenarios):
        rows = summary[summary["scenario"] == scenario]
        for j, (column, title) in enumerate(_PANELS):
            ax = axes[i, j]
            for k, name in enumerate(estimators):
                part = rows[rows["estimator"] == name].sort_values("n_samples")
                offset = 1 + 0.04 * (k - (len(estimators) - 1) / 2)  # keep error bars apart
                x = part["n_samples"] * offset
                color = colors[k % len(colors)]
                if column in ("bias", "coverage"):
                    half = 2 * part[f"{column}_mcse"]
                    ax.errorbar(
                        x,
                        part[column],
                        yerr=half,
                        marker="o",
                        ms=4,
                        capsize=2,
                        color=color,
                        label=name,
                    )
                else:
                    ax.plot(x, part[column], marker="o", ms=4, color=color, label=name)
            reference = {"bias": 0.0, "se_sd_ratio": 1.0, "coverage": level}.get(column)
            if reference is not None:
                ax.axhline(reference, color="0.4", lw=0.8, ls="--")
            if column == "rmse":
                ax.set_ylim(bottom=0)
            if column == "coverage":
                # Error bars may pass 0 or 1; coverage itself cannot.
                low = np.nanmin(np.append(rows["coverage"].to_numpy(), level))
                ax.set_ylim(max(-0.02, low - 0.05), 1.02)
            ax.set_xscale("log")
            ax.set_xticks(sizes, [f"{n:g}" for n in sizes])
            ax.minorticks_off()
            ax.grid(alpha=0.3)
            if i == 0:
                ax.set_title(title, fontsize=10)
            if j == 0:
                ax.set_ylabel(scenario, fontsize=10)
            if i == len(scenarios) - 1:
                ax.set_xlabel("sample size")
    handles, labels = axes[0, 0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="upper center", ncol=len(estimators), frameon=False)
    fig.tight_layout(rect=(0, 0, 1, 1 - 0.5 / fig.get_figheight()))
    return fig
