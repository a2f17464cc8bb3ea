"""The demo analysis's numbers (estimates, standard errors, bounds, sensitivity and distribution
values), computed as ``pscore-strata demo`` computes them but without writing the report.

Shared by ``test_demo_numbers.py`` and by the command that rewrites its fixture::

    python tests/_demo_numbers.py tests/data/demo_results_before.json
"""

import json
import sys

SECTIONS = ("estimates", "stratum_shares", "naive_survivor_contrast", "bounds", "sensitivity",
            "distributions")  # fmt: skip


def demo_results():
    from pscore_strata.datasets import DEMO_ROLES, load_demo
    from pscore_strata.report import AnalysisOptions, ColumnRoles, analyze_frame

    # the same roles and options as the ``demo`` command (pscore_strata/cli.py)
    roles = ColumnRoles(
        outcome=DEMO_ROLES["outcome"],
        treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"],
        covariates=tuple(DEMO_ROLES["covariates"]),
        categorical=tuple(DEMO_ROLES["categorical"]),
    )
    options = AnalysisOptions(
        bootstrap=0, unit_name="patient",
        arm_names=("protective ventilation", "conventional ventilation"),
        survival_model="strata",
    )  # fmt: skip
    return analyze_frame(load_demo(), roles, options, None,
                         source="bundled demo registry (invented)").results  # fmt: skip


def numbers(results):
    """Every numeric leaf of the compared sections, keyed by its path (estimates by method)."""
    found = {}

    def walk(value, path):
        if isinstance(value, bool) or value is None or isinstance(value, str):
            return
        if isinstance(value, dict):
            for key, item in value.items():
                walk(item, f"{path}/{key}")
        elif isinstance(value, list):
            for index, item in enumerate(value):
                key = item.get("method", index) if isinstance(item, dict) else index
                walk(item, f"{path}/{key}")
        else:
            found[path] = float(value)

    for section in SECTIONS:
        walk(results[section], section)
    return found


if __name__ == "__main__":
    with open(sys.argv[1], "w") as handle:
        json.dump(numbers(demo_results()), handle, indent=0, sort_keys=True)
        handle.write("\n")
