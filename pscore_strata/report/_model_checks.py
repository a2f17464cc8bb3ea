"""What a reviewer asks to see of the fitted models: principal-score distributions by arm,
survivors' outcome distributions by arm, and the calibration of the survival side.

Calibration is checked on each arm's own rows (out of fold when cross-fitted), for whichever
model produced the principal scores: :func:`pscore_strata.survival_fit_check` groups the rows
into tenths of the predicted probability (as ``sklearn.calibration.calibration_curve`` bins
them), sets each group's observed survival share against its mean prediction and tests the
gaps (a Hosmer-Lemeshow-type chi-square per arm). Shares are weighted by the sample weights;
the Brier score is scikit-learn's ``brier_score_loss`` with the same weights.
"""

from __future__ import annotations

import numpy as np

from ._options import number
from ._wording import outcome_label

__all__ = ["model_checks_section", "model_check_figures"]

_ARM_COLORS = {1: "#1f77b4", 0: "#dd8452"}


def _arm_names(results):
    words = results.get("wording") or {}
    return {1: words.get("treated_arm", "treated"), 0: words.get("control_arm", "control")}


def _fit_check_record(table):
    attrs = table.attrs
    return {
        "survival_model": attrs["survival_model"],
        "grouping": attrs["grouping"],
        "reference": attrs["reference"],
        "tests": [
            {"arm": "both" if arm == "both arms" else arm, "statistic": number(t["statistic"]),
             "df": int(t["df"]), "p_value": number(t["p_value"]), "n_groups": int(t["n_groups"]),
             "assessable": bool(t["assessable"])}
            for arm, t in attrs["tests"].items()
        ],
        "groups": [
            {"arm": arm, "group": str(group), "n_rows": int(row["n_rows"]),
             "predicted": number(row["predicted"]), "observed": number(row["observed"]),
             "std_error": number(row["std_error"]), "z": number(row["z"])}
            for (arm, group), row in table.iterrows()
        ],
        "log_likelihood": number(attrs["log_likelihood"]),
        "n_parameters": attrs["n_parameters"],
        "aic": None if attrs["aic"] is None else number(attrs["aic"]),
        "notes": list(attrs["notes"]),
    }  # fmt: skip


def model_checks_section(primary):
    """Calibration and fit of the survival side (``model_checks`` record of results.json)."""
    from sklearn.metrics import brier_score_loss

    from ..diagnostics import survival_fit_check

    table = survival_fit_check(primary, n_groups=10)
    data = primary.training_data_
    rows = []
    for arm in (1, 0):
        name = "treated" if arm == 1 else "control"
        # Rows of the arm with a known survival status (all rows unless --missing at_random).
        in_arm = (data.treatment == arm) & np.isfinite(data.survival)
        if data.status_known is not None:
            in_arm &= data.status_known == 1
        survived = data.survival[in_arm]
        weights = data.sample_weight[in_arm]
        predicted = np.clip(primary.nuisance_.survival[arm][in_arm], 0.0, 1.0)
        groups = table.loc[name]
        rows.append({
            "arm": name,
            "n_rows": int(in_arm.sum()),
            "mean_predicted": number(np.average(predicted, weights=weights)),
            "observed_share": number(np.average(survived, weights=weights)),
            "brier_score": number(brier_score_loss(survived, predicted, sample_weight=weights)),
            "max_bin_gap": number(np.max(np.abs(groups["observed"] - groups["predicted"]))),
        })  # fmt: skip
    return {"calibration": rows, "n_bins": 10, "fit_check": _fit_check_record(table)}


def _scores_figure(primary, results):
    import matplotlib.pyplot as plt

    from ..plotting._diagnostics import histogram_steps

    names = _arm_names(results)
    scores = np.asarray(primary.principal_scores_)
    treatment = primary.training_data_.treatment
    labels = [c.replace("_", "-") for c in primary.classes_]
    figure, axes = plt.subplots(1, 3, figsize=(10.5, 3.2), layout="constrained", sharey=True)
    bins = np.linspace(0, 1, 26)
    for column, (ax, label) in enumerate(zip(axes, labels, strict=True)):
        for arm in (1, 0):
            histogram_steps(ax, scores[treatment == arm, column], bins, density=True, fill=True,
                            alpha=0.5, color=_ARM_COLORS[arm],
                            label=f"{names[arm]} (n={np.sum(treatment == arm):,})")  # fmt: skip
        ax.set_xlabel(f"{label} score")
        ax.grid(color="0.92")
    axes[0].set_ylabel("density")
    axes[0].legend(fontsize=8)
    figure.suptitle("Principal scores by arm", fontsize=10)
    return figure


def _outcome_figure(primary, results):
    import matplotlib.pyplot as plt

    from ..plotting._diagnostics import histogram_steps

    names = _arm_names(results)
    data = primary.training_data_
    figure, ax = plt.subplots(figsize=(7.2, 3.4), layout="constrained")
    # Survivors whose outcome was observed (all survivors unless --missing at_random).
    survivors = (data.survival == 1) & np.isfinite(data.outcome)
    values = data.outcome[survivors]
    bins = np.histogram_bin_edges(values, bins=30)
    for arm in (1, 0):
        rows = survivors & (data.treatment == arm)
        histogram_steps(ax, data.outcome[rows], bins, density=True, fill=True, alpha=0.5,
                        color=_ARM_COLORS[arm], label=f"{names[arm]} survivors (n={rows.sum():,})")
    ax.set_xlabel(outcome_label(results))
    ax.set_ylabel("density")
    ax.set_title("Outcome of the survivors by arm (unweighted)", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(color="0.92")
    return figure


def _calibration_figure(primary, results):
    import matplotlib.pyplot as plt

    names = _arm_names(results)
    groups = results["model_checks"]["fit_check"]["groups"]
    tests = {t["arm"]: t for t in results["model_checks"]["fit_check"]["tests"]}
    figure, axes = plt.subplots(1, 2, figsize=(8.4, 3.8), layout="constrained")
    for ax, arm in zip(axes, ("treated", "control"), strict=True):
        rows = [g for g in groups if g["arm"] == arm]
        predicted = np.array([g["predicted"] for g in rows], dtype=float)
        observed = np.array([g["observed"] for g in rows], dtype=float)
        spread = 1.96 * np.array([g["std_error"] or 0.0 for g in rows], dtype=float)
        ax.plot([0, 1], [0, 1], color="0.5", linestyle="--", linewidth=1, label="perfect")
        color = _ARM_COLORS[1 if arm == "treated" else 0]
        ax.errorbar(predicted, observed, yerr=spread, fmt="o-", color=color, capsize=2,
                    label="tenths of rows, ±1.96 SE")  # fmt: skip
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_aspect("equal")
        ax.set_xlabel("predicted survival probability")
        ax.set_ylabel("observed survival share")
        test = tests[arm]
        p_value = "n/a" if test["p_value"] is None else f"{test['p_value']:.3f}"
        ax.set_title(f"Survival, {names[1 if arm == 'treated' else 0]} "
                     f"(n={sum(g['n_rows'] for g in rows):,}; fit check p={p_value})",
                     fontsize=9)  # fmt: skip
        ax.legend(fontsize=7, loc="upper left")
        ax.grid(color="0.92")
    return figure


def model_check_figures(analysis):
    """Figure specifications (name, title, draw, args, caption) for the report."""
    checks = analysis.results.get("model_checks") or {}
    if analysis.primary is None or "fit_check" not in checks:
        return []  # the section shows why the checks are missing, and no figure
    primary, results = analysis.primary, analysis.results
    return [
        ("principal_scores.png", "Principal scores by arm", _scores_figure, (primary, results),
         "Distribution of each fitted principal score in the two arms. Scores near 0 for many "
         "rows of an arm mean that stratum is nearly absent there."),
        ("survivor_outcomes.png", "Outcome of the survivors by arm", _outcome_figure,
         (primary, results),
         "Observed outcomes of the survivors, without weights: the naive comparison contrasts "
         "these two groups, which are different mixtures of strata."),
        ("calibration.png", "Calibration of the survival side", _calibration_figure,
         (primary, results),
         "Each point is a tenth of the arm's rows ordered by predicted survival; points on the "
         "dashed line mean the model's probabilities match the observed survival shares. Bars "
         "span 1.96 binomial standard errors under the fitted model: a bar missing the line "
         "marks a gap significant at 5% on its own (the fit check in the title tests all "
         "groups at once)."),
    ]  # fmt: skip
