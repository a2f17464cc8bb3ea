"""A study's summary as a manuscript table (Word, LaTeX, Markdown, HTML), MC s.e. in parentheses.

The table is a :class:`pscore_strata.tables.Table`, so it shares the writers, the number
formatting and the read-back tests of every other manuscript table of the library.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from ..tables import Table, format_cell
from ._summary import _SUMMARY_CAUTION

__all__ = ["summary_table"]

_MEASURES = {
    "bias": "Bias",
    "sd": "Empirical SE",
    "rmse": "RMSE",
    "model_se": "Model SE",
    "se_sd_ratio": "Model SE / empirical SE",
    "coverage": "Coverage",
    "mean_width": "CI width",
    "relative_efficiency": "Relative efficiency",
    "mean_difference": "Paired difference",
    "set_coverage": "Identified-set coverage",
    "median_fit_seconds": "Median fit (s)",
}
_DEFAULT = ("bias", "sd", "rmse", "se_sd_ratio", "coverage")


def _with_mcse(value, mcse, spec):
    text = format_cell(value, spec)
    if mcse is None or (isinstance(mcse, float) and np.isnan(mcse)) or text == "—":
        return text
    return f"{text} ({format_cell(mcse, spec)})"


def summary_table(summary, *, measures=None, caption=None, digits=3, label=None):
    """The summary of a study as a manuscript table, each Monte Carlo s.e. in parentheses.

    Parameters
    ----------
    summary : pandas.DataFrame
        The output of :func:`summarize`.
    measures : sequence of str, optional
        Columns of ``summary`` to print, in order; default ``bias``, ``sd``, ``rmse``,
        ``se_sd_ratio``, ``coverage`` (with ``relative_efficiency`` when the summary has a
        reference). Any of ``bias``, ``sd``, ``rmse``, ``model_se``, ``se_sd_ratio``,
        ``coverage``, ``mean_width``, ``relative_efficiency``, ``mean_difference``,
        ``set_coverage``, ``median_fit_seconds``. A measure with a ``<measure>_mcse`` column
        prints as ``value (MC s.e.)``.
    caption : str, optional
        Table caption; by default it names the number of replicates.
    digits : int, default=3
        Decimals of every printed number.
    label : str, optional
        Cross-reference key (LaTeX ``\\label``).

    Returns
    -------
    table : pscore_strata.tables.Table
        Write it with ``table.write("study.tex")`` (or ``.md``, ``.docx``, ``.html``), or get
        the text with ``table.to_latex()`` and ``table.to_markdown()``. Rows are grouped by
        scenario.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> results = ps.simulation.run_study(
    ...     [ps.OutcomeRegression()], "linear", 400, n_reps=3, random_state=0)
    >>> table = ps.simulation.summary_table(ps.simulation.summarize(results))
    >>> table.header()[:3]
    ['Estimator', 'n', 'Bias']
    """
    if not isinstance(summary, pd.DataFrame) or "bias" not in summary.columns:
        raise TypeError("`summary` must be the DataFrame returned by summarize(results).")
    if isinstance(digits, bool) or not isinstance(digits, int) or not 0 <= digits <= 10:
        raise ValueError(f"`digits` must be an integer from 0 to 10; got {digits!r}.")
    if measures is None:
        measures = list(_DEFAULT)
        if "relative_efficiency" in summary.columns:
            measures.append("relative_efficiency")
    measures = list(measures)
    unknown = [m for m in measures if m not in _MEASURES]
    absent = [m for m in measures if m in _MEASURES and m not in summary.columns]
    if unknown or absent or not measures:
        raise ValueError(
            f"`measures` must name columns of the summary among {', '.join(_MEASURES)}; "
            f"{'unknown: ' + ', '.join(map(repr, unknown)) if unknown else ''}"
            f"{' not in this summary: ' + ', '.join(map(repr, absent)) if absent else ''}"
            f"{'got none' if not measures else ''}."
        )
    spec = f".{digits}f"
    frame = pd.DataFrame({"scenario": summary["scenario"], "Estimator": summary["estimator"],
                          "n": summary["n_samples"].astype(int)})  # fmt: skip
    settings = summary.get("params", pd.Series("{}", index=summary.index))
    if settings.nunique() > 1 or (settings != "{}").any():
        frame.insert(1, "Setting", settings.map(
            lambda p: ", ".join(f"{k} = {v}" for k, v in json.loads(p).items()) or "default"))
    for measure in measures:
        mcse = summary.get(f"{measure}_mcse")
        frame[_MEASURES[measure]] = [
            _with_mcse(v, None if mcse is None else mcse.iloc[i], spec)
            for i, v in enumerate(summary[measure])
        ]
    if summary["n_failed"].any():
        frame["Failed"] = summary["n_failed"].astype(int)
    reps = sorted(set(summary["n_reps"].astype(int)))
    caption = caption or (
        f"Operating characteristics over {reps[0] if len(reps) == 1 else 'up to ' + str(reps[-1])}"
        " simulated replicates per row; Monte Carlo standard errors in parentheses."
    )
    footnote = [
        "Monte Carlo standard errors (in parentheses) follow Morris, White & Crowther (2019, Stat "
        "Med). Empirical SE: standard deviation of the estimates; model SE: root mean squared "
        "standard error.",
    ]
    if "relative_efficiency" in measures:
        footnote.append(
            f"Relative efficiency: variance of {summary['reference'].iloc[0]} over the "
            "estimator's, on paired replicates.")
    if "interval" in summary.columns and summary["interval"].str.contains("wald").any():
        wald = dict.fromkeys(summary.loc[summary["interval"].str.contains("wald"), "estimator"])
        footnote.append(f"Intervals of {', '.join(wald)} (no conf_int method) are Wald "
                        "intervals from the estimator's standard error.")  # fmt: skip
    footnote.append(_SUMMARY_CAUTION)
    align = {c: "right" for c in frame.columns if c not in ("scenario", "Estimator", "Setting")}
    return Table(frame, caption, footnote=footnote, group_column="scenario", align=align,
                 label=label)  # fmt: skip
