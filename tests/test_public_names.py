"""Snapshot of the public names: ``__all__`` of the package and of each subpackage.

Growing (or shrinking) the public interface is a decision, made visible here: a change to an
``__all__`` fails this test until the list below is edited in the same commit. Engineers adding
a public name add it to its list (keep each list sorted); removing one needs a deprecation first
(scripts outside the project import these names).
"""

import importlib

import pytest

PUBLIC_NAMES = {
    "pscore_strata": [
        "BootstrapFailureError",
        "BootstrapResult",
        "FewClustersWarning",
        "FewOutcomesWarning",
        "MonotonicityWarning",
        "MultiplyRobust",
        "OrdinalComparison",
        "OutcomeRegression",
        "OverlapWarning",
        "PrincipalScoreModel",
        "PrincipalScoreWeighting",
        "SeparationWarning",
        "SurvivorDistribution",
        "TrimmingBounds",
        "__version__",
        "assumptions",
        "balance_table",
        "bootstrap",
        "datasets",
        "diagnostic_warnings",
        "diagnostics",
        "distributions",
        "exceptions",
        "fit_estimators",
        "inference",
        "monotonicity_check",
        "nuisance",
        "ordinal_comparison",
        "overlap_summary",
        "plotting",
        "quantile_effects",
        "sensitivity_grid",
        "simulation",
        "survival_fit_check",
        "survivor_distribution",
        "tables",
        "tipping_point",
        "visit_effects",
        "visits",
        "weight_summary",
    ],
    "pscore_strata.assumptions": [
        "TrimmingBounds",
        "adjusted_effect",
        "imbens_manski_interval",
        "sensitivity_grid",
        "tipping_point",
        "trimmed_means",
    ],
    "pscore_strata.datasets": [
        "DEMO_ROLES",
        "DEMO_TRUE_EFFECT",
        "SCENARIOS",
        "list_scenarios",
        "load_demo",
        "make_intermediate",
        "make_scenario",
        "make_truncation",
        "make_visits",
    ],
    "pscore_strata.diagnostics": [
        "balance_table",
        "diagnostic_warnings",
        "effective_sample_size",
        "missing_data_balance",
        "missing_data_summary",
        "monotonicity_check",
        "overlap_summary",
        "survival_fit_check",
        "weight_summary",
    ],
    "pscore_strata.distributions": [
        "OrdinalComparison",
        "SurvivorDistribution",
        "ordinal_comparison",
        "quantile_effects",
        "survivor_distribution",
    ],
    "pscore_strata.estimands": [
        "METHODS",
        "Method",
        "Setting",
    ],
    "pscore_strata.estimators": [
        "MultiplyRobust",
        "OutcomeRegression",
        "PrincipalScoreWeighting",
        "fit_estimators",
    ],
    "pscore_strata.inference": [
        "BootstrapResult",
        "FewClustersWarning",
        "bca_interval",
        "bootstrap",
        "influence_std_error",
        "normal_interval",
        "percentile_interval",
    ],
    "pscore_strata.nuisance": [
        "MonotonicityWarning",
        "NuisanceFit",
        "OverlapWarning",
        "ParametricFit",
        "PrincipalScoreModel",
        "default_binary_model",
        "fit_nuisance",
    ],
    "pscore_strata.plotting": [
        "plot_balance",
        "plot_level_shares",
        "plot_overlap",
        "plot_quantile_effects",
        "plot_sensitivity",
        "plot_sensitivity_contour",
        "plot_survivor_distribution",
        "plot_visit_effects",
        "plot_weights",
    ],
    "pscore_strata.report": [
        "Analysis",
        "AnalysisOptions",
        "ColumnRoles",
        "InputError",
        "PreparedData",
        "SCHEMA_VERSION",
        "TABLE_FORMATS",
        "analyze_frame",
        "build_estimator",
        "manuscript_tables",
        "prepare_data",
        "read_table",
        "render_html",
        "run_analysis",
        "schema",
        "write_manuscript_tables",
        "write_report",
    ],
    "pscore_strata.simulation": [
        "plot_summary",
        "run_study",
        "simulate_cell",
        "summarize",
        "summary_table",
    ],
    "pscore_strata.tables": [
        "FORMATS",
        "NotebookDisplay",
        "SummaryTable",
        "Table",
        "format_cell",
        "latex_escape",
        "number_text",
        "result_card",
        "write_tables",
    ],
    "pscore_strata.visits": [
        "visit_effects",
    ],
    "pscore_strata.exceptions": [
        "BootstrapFailureError",
        "DataWarning",
        "FewClustersWarning",
        "FewOutcomesWarning",
        "FileProblem",
        "InputError",
        "LooseFitWarning",
        "MonotonicityWarning",
        "OverlapWarning",
        "SeparationWarning",
    ],
}


@pytest.mark.parametrize("module", sorted(PUBLIC_NAMES))
def test_public_names_are_the_recorded_ones(module):
    names = importlib.import_module(module).__all__
    assert len(names) == len(set(names)), f"{module}.__all__ lists a name twice"
    assert sorted(names) == PUBLIC_NAMES[module], (
        f"{module}.__all__ changed; if that is intended, update PUBLIC_NAMES in this file"
    )


def test_every_subpackage_is_recorded():
    import pkgutil

    import pscore_strata

    families = {f"pscore_strata.{m.name}" for m in pkgutil.iter_modules(pscore_strata.__path__)
                if m.ispkg and not m.name.startswith("_")}  # fmt: skip
    assert families <= set(PUBLIC_NAMES), "a new subpackage: add its __all__ to PUBLIC_NAMES"


@pytest.mark.parametrize("module", sorted(PUBLIC_NAMES))
def test_every_public_name_exists(module):
    imported = importlib.import_module(module)
    missing = [name for name in imported.__all__ if not hasattr(imported, name)]
    assert not missing, f"{module}.__all__ names {missing}, which it does not define"
