"""Subgroup SACEs of the primary estimator (``--by COL``) and their forest plot.

The effects come from :meth:`~pscore_strata.MultiplyRobust.effect_by` on the fitted models (no
refit). Their intervals are printed only when the primary estimator's influence values carry
the nuisance estimation (sandwich or influence function), the same rule as for every other
interval in the report (:mod:`._honesty`).
"""

from __future__ import annotations

import numpy as np

from ._format import number as number_text
from ._options import number
from ._wording import outcome_label

__all__ = ["MAX_SUBGROUPS", "subgroups_section", "subgroup_figures"]

#: More groups than this is not a subgroup analysis a forest plot can show.
MAX_SUBGROUPS = 30


def subgroups_section(collector, primary, data, roles, level, input_error=ValueError):
    labels = data.frame[roles.by].to_numpy()
    n_groups = len(np.unique(labels.astype(str)))
    if n_groups > MAX_SUBGROUPS:
        raise input_error(
            f"--by column '{roles.by}' has {n_groups} distinct values; subgroup effects need at "
            f"most {MAX_SUBGROUPS} groups. Group its values first (for example age bands)."
        )
    try:
        table = collector.run("subgroup effects", primary.effect_by, labels, level)
    except ValueError as error:
        # effect_by names its Python argument; on the command line it is the --by column.
        raise input_error(
            str(error).replace("of `labels` ", f"of --by column '{roles.by}' ")
            .replace("`labels`", f"--by column '{roles.by}'")
        ) from None
    honest = str(primary.std_error_method_) in ("sandwich", "influence function")
    rows = []
    for _, row in table.iterrows():
        rows.append({
            "label": str(row["label"]),
            "n": int(row["n"]),
            "effect": float(row["effect"]),
            "std_error": number(row["std_error"]) if honest else None,
            "ci_low": number(row["ci_low"]) if honest else None,
            "ci_high": number(row["ci_high"]) if honest else None,
        })  # fmt: skip
    note = None if honest else (
        "intervals not available: the primary estimator's standard error "
        f"({primary.std_error_method_}) is not from influence values that carry the fitted "
        "models, and subgroups are not bootstrapped. Choose --method robust for intervals."
    )  # fmt: skip
    return {
        "column": roles.by,
        "rows": rows,
        "interval_note": note,
        "notes": [n for n in table.attrs["notes"][:-1]],
    }


def _forest(results):
    import matplotlib.pyplot as plt

    record = results["subgroups"]
    rows = record["rows"]
    primary = next(e for e in results["estimates"] if e["primary"])
    figure, ax = plt.subplots(figsize=(7.2, 0.45 * len(rows) + 1.6), layout="constrained")
    positions = np.arange(len(rows))[::-1]
    for y, row in zip(positions, rows, strict=True):
        if row["ci_low"] is not None:
            ax.plot([row["ci_low"], row["ci_high"]], [y, y], color="#1f5f8b", linewidth=2)
        ax.plot([row["effect"]], [y], "s", color="#1f5f8b",
                markersize=4 + 6 * np.sqrt(row["n"] / max(r["n"] for r in rows)))  # fmt: skip
    ax.axvline(primary["effect"], color="#b5651d", linewidth=1,
               label=f"all rows: {number_text(primary['effect'])}")  # fmt: skip
    ax.axvline(0, color="0.3", linewidth=1, linestyle="--")
    ax.set_yticks(positions, [f"{row['label']} (n={row['n']:,})" for row in rows])
    ax.set_xlabel(f"SACE on {outcome_label(results)} "
                  f"({results['settings']['level']:.0%} intervals)")  # fmt: skip
    ax.set_title(f"Subgroup effects by {record['column']}", fontsize=10)
    ax.legend(fontsize=8, loc="best")
    ax.grid(axis="x", color="0.92")
    return figure


def subgroup_figures(results):
    """Figure specifications (name, title, draw, args, caption) for the report."""
    if not (results.get("subgroups") or {}).get("rows"):
        return []
    return [(
        "subgroups.png", "Subgroup effects", _forest, (results,),
        "Squares: subgroup SACEs (size grows with the number of rows); lines: their intervals "
        "(shown only when honest); vertical line: the SACE over all rows. Differences between "
        "subgroups are exploratory unless the protocol specified them.",
    )]  # fmt: skip
