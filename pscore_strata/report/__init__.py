"""The shareable analysis report: one complete SACE analysis written as HTML, JSON and PNG.

``analyze_file`` is what ``pscore-strata analyze`` runs; its parts can be used on their own:
:func:`prepare_data` checks a table's columns, :func:`run_analysis` computes the results
(a dictionary following ``results.schema.json``, see docs/guide/results-json.md) and
:func:`write_report` writes the files. matplotlib and jinja2 are imported only when a report is
written.
"""

from __future__ import annotations

from ._analysis import SCHEMA_VERSION, Analysis, AnalysisOptions, build_estimator, run_analysis
from ._data import ColumnRoles, InputError, PreparedData, check_folds, prepare_data, read_table
from ._html import render_html, schema, write_report
from ._manuscript import TABLE_FORMATS, manuscript_tables, write_manuscript_tables

__all__ = [
    "SCHEMA_VERSION",
    "Analysis",
    "AnalysisOptions",
    "ColumnRoles",
    "InputError",
    "TABLE_FORMATS",
    "manuscript_tables",
    "write_manuscript_tables",
    "PreparedData",
    "analyze_frame",
    "build_estimator",
    "prepare_data",
    "read_table",
    "render_html",
    "run_analysis",
    "schema",
    "write_report",
]


def analyze_frame(frame, roles, options=None, out_dir=None, *, drop_incomplete=False,
                  source="data", progress=None, treated_value=None,
                  survived_value=None):  # fmt: skip
    """Check, analyse and (when ``out_dir`` is given) write the report for a DataFrame.

    Parameters
    ----------
    frame : pandas.DataFrame
        The data; it is not modified.
    roles : ColumnRoles
    options : AnalysisOptions, optional
    out_dir : str or path-like, optional
    drop_incomplete : bool, default=False
    source : str
        Name of the data recorded in the report.
    progress : callable, optional
        Called with a short message before each long step.
    treated_value, survived_value : scalar or str, optional
        Levels of a text-coded treatment / survival column that mean 1 (see
        :func:`prepare_data`); the report names the other level.

    Returns
    -------
    Analysis
        ``results`` (the contents of results.json) and the fitted estimators.
    """
    options = options or AnalysisOptions()
    data = prepare_data(frame, roles, drop_incomplete=drop_incomplete, missing=options.missing,
                        treated_value=treated_value, survived_value=survived_value)  # fmt: skip
    check_folds(data, options)
    from .._checked_once import checked_once

    # Every fit of the analysis reads the same arrays: each check of them is done once.
    with checked_once():
        analysis = run_analysis(data, roles, options, source=source, progress=progress)
    if out_dir is not None:
        if progress:
            progress("writing the report")
        write_report(analysis, out_dir)
    return analysis
