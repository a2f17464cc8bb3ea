"""Every documented public path stays importable (README, DESIGN.md section 7, DEVELOPERS.md)."""

import importlib

import pytest

import pscore_strata as ps

TOP_LEVEL = [
    "PrincipalScoreWeighting",
    "OutcomeRegression",
    "MultiplyRobust",
    "TrimmingBounds",
    "bootstrap",
    "BootstrapResult",
    "sensitivity_grid",
    "tipping_point",
    "balance_table",
    "weight_summary",
    "overlap_summary",
    "monotonicity_check",
    "survival_fit_check",
    "diagnostic_warnings",
    "OverlapWarning",
    "MonotonicityWarning",
    "FewClustersWarning",
    "PrincipalScoreModel",
    "survivor_distribution",
    "quantile_effects",
    "ordinal_comparison",
]

SUBPACKAGE_NAMES = {
    "pscore_strata.estimators": ["PrincipalScoreWeighting", "OutcomeRegression", "MultiplyRobust"],
    "pscore_strata.nuisance": [
        "fit_nuisance", "NuisanceFit", "default_binary_model", "PrincipalScoreModel"
    ],
    "pscore_strata.inference": [
        "bootstrap",
        "BootstrapResult",
        "influence_std_error",
        "FewClustersWarning",
    ],
    "pscore_strata.assumptions": ["TrimmingBounds", "sensitivity_grid", "tipping_point"],
    "pscore_strata.diagnostics": [
        "balance_table",
        "weight_summary",
        "overlap_summary",
        "monotonicity_check",
        "survival_fit_check",
        "diagnostic_warnings",
        "effective_sample_size",
    ],
    "pscore_strata.plotting": [
        "plot_balance",
        "plot_overlap",
        "plot_weights",
        "plot_sensitivity",
        "plot_sensitivity_contour",
        "plot_survivor_distribution",
        "plot_quantile_effects",
    ],
    "pscore_strata.distributions": [
        "survivor_distribution",
        "SurvivorDistribution",
        "quantile_effects",
        "ordinal_comparison",
        "OrdinalComparison",
    ],
    "pscore_strata.simulation": [
        "run_study", "simulate_cell", "summarize", "plot_summary", "summary_table",
    ],
    "pscore_strata.datasets": ["make_truncation", "make_scenario", "list_scenarios", "load_demo"],
    "pscore_strata.report": ["run_analysis", "write_report", "AnalysisOptions", "ColumnRoles"],
}


@pytest.mark.parametrize("name", TOP_LEVEL)
def test_top_level_name(name):
    assert name in ps.__all__
    assert getattr(ps, name) is not None


@pytest.mark.parametrize(
    "module, name", [(m, n) for m, names in SUBPACKAGE_NAMES.items() for n in names]
)
def test_subpackage_name(module, name):
    assert getattr(importlib.import_module(module), name) is not None


def test_top_level_names_are_the_subpackage_objects():
    assert ps.bootstrap is ps.inference.bootstrap
    assert ps.TrimmingBounds is ps.assumptions.TrimmingBounds
    assert ps.balance_table is ps.diagnostics.balance_table
    assert ps.MultiplyRobust is ps.estimators.MultiplyRobust


def test_cli_entry_point():
    from pscore_strata.cli import main

    assert callable(main)
