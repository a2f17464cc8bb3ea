"""What a reviewer asks to see of the fitted models: principal-score distributions by arm,
survivors' outcome distributions by arm, and the calibration of each survival model.

Calibration is checked on each arm's own rows, where the survival model was fitted (out of
fold when cross-fitted): rows are grouped into tenths of the predicted probability and the
observed survival share of each group is set against its mean prediction
(``sklearn.calibration.calibration_curve``); the Brier score is scikit-learn's
``brier_score_loss``. Both ignore sample weights.
"""

from __future__ import annotations

import numpy as np

from ._options import number

__all__ = ["model_checks_section", "model_check_figures"]

_ARM_COLORS = {1: "#1f77b4", 0: "#dd8452"}


def _arm_names(results):
    words = results.get("wording") or {}
    return {1: words.get("treated_arm", "treated"), 0: words.get("control_arm", "control")}


def model_checks_section(primary):
    """Calibration of each arm's survival model (``model_checks`` record of results.json)."""
    from sklearn.calibration import calibration_curve
    from sklearn.metrics import brier_score_loss

    data = primary.training_data_
    rows = []
    for arm in (1, 0):
        # Rows of the arm with a known survival status (all rows unless --missing at_random).
        in_arm = (data.treatment == arm) & np.isfinite(data.survival)
        survived = data.survival[in_arm]
        predicted = np.clip(primary.nuisance_.survival[arm][in_arm], 0.0, 1.0)
        observed_share, mean_predicted = calibration_curve(
            survived, predicted, n_bins=10, strategy="quantile"
        )
        rows.append({
            "arm": "treated" if arm == 1 else "control",
            "n_rows": int(in_arm.sum()),
            "mean_predicted": number(predicted.mean()),
            "observed_share": number(survived.mean()),
            "brier_score": number(brier_score_loss(survived, predicted)),
            "max_bin_gap": number(np.max(np.abs(observed_share - mean_predicted))),
        })  # fmt: skip
    return {"calibration": rows, "n_bins": 10}


def _scores_figure(primary, results):
    import matplotlib.pyplot as plt

    names = _arm_names(results)
    scores = np.asarray(primary.principal_scores_)
    treatment = primary.training_data_.treatment
    labels = [c.replace("_", "-") for c in primary.classes_]
    figure, axes = plt.subplots(1, 3, figsize=(10.5, 3.2), layout="constrained", sharey=True)
    bins = np.linspace(0, 1, 26)
    for column, (ax, label) in enumerate(zip(axes, labels, strict=True)):
        for arm in (1, 0):
            ax.hist(scores[treatment == arm, column], bins=bins, density=True, alpha=0.5,
                    color=_ARM_COLORS[arm], label=f"{names[arm]} (n={np.sum(treatment == arm):,})")
        ax.set_xlabel(f"{label} score")
        ax.grid(color="0.92")
    axes[0].set_ylabel("density")
    axes[0].legend(fontsize=8)
    figure.suptitle("Principal scores by arm", fontsize=10)
    return figure


def _outcome_figure(primary, results):
    import matplotlib.pyplot as plt

    names = _arm_names(results)
    data = primary.training_data_
    figure, ax = plt.subplots(figsize=(7.2, 3.4), layout="constrained")
    # Survivors whose outcome was observed (all survivors unless --missing at_random).
    survivors = (data.survival == 1) & np.isfinite(data.outcome)
    values = data.outcome[survivors]
    bins = np.histogram_bin_edges(values, bins=30)
    for arm in (1, 0):
        rows = survivors & (data.treatment == arm)
        ax.hist(data.outcome[rows], bins=bins, density=True, alpha=0.5, color=_ARM_COLORS[arm],
                label=f"{names[arm]} survivors (n={rows.sum():,})")
    ax.set_xlabel(f"'{results['columns']['outcome']}'")
    ax.set_ylabel("density")
    ax.set_title("Outcome of the survivors by arm (unweighted)", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(color="0.92")
    return figure


def _calibration_figure(primary, results):
    import matplotlib.pyplot as plt
    from sklearn.calibration import calibration_curve

    names = _arm_names(results)
    data = primary.training_data_
    figure, axes = plt.subplots(1, 2, figsize=(8.4, 3.8), layout="constrained")
    for ax, arm in zip(axes, (1, 0), strict=True):
        in_arm = (data.treatment == arm) & np.isfinite(data.survival)
        predicted = np.clip(primary.nuisance_.survival[arm][in_arm], 0.0, 1.0)
        observed, mean_predicted = calibration_curve(
            data.survival[in_arm], predicted, n_bins=10, strategy="quantile"
        )
        ax.plot([0, 1], [0, 1], color="0.5", linestyle="--", linewidth=1, label="perfect")
        ax.plot(mean_predicted, observed, "o-", color=_ARM_COLORS[arm], label="tenths of rows")
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_aspect("equal")
        ax.set_xlabel("predicted survival probability")
        ax.set_ylabel("observed survival share")
        ax.set_title(f"Survival model, {names[arm]} (n={in_arm.sum():,})", fontsize=9)
        ax.legend(fontsize=8, loc="upper left")
        ax.grid(color="0.92")
    return figure


def model_check_figures(analysis):
    """Figure specifications (name, title, draw, args, caption) for the report."""
    if analysis.primary is None or "model_checks" not in analysis.results:
        return []
    primary, results = analysis.primary, analysis.results
    return [
        ("principal_scores.png", "Principal scores by arm", _scores_figure, (primary, results),
         "Distribution of each fitted principal score in the two arms. Scores near 0 for many "
         "rows of an arm mean that stratum is nearly absent there."),
        ("survivor_outcomes.png", "Outcome of the survivors by arm", _outcome_figure,
         (primary, results),
         "Observed outcomes of the survivors, without weights: the naive comparison contrasts "
         "these two groups, which are different mixtures of strata."),
        ("calibration.png", "Calibration of the survival models", _calibration_figure,
         (primary, results),
         "Each point is a tenth of the arm's rows ordered by predicted survival: points on the "
         "dashed line mean the model's probabilities match the observed survival shares."),
    ]  # fmt: skip
