"""The report's figures as PNG bytes (matplotlib with the non-interactive Agg canvas)."""

from __future__ import annotations

import io

import numpy as np

from ._distributions import distribution_figures
from ._format import number
from ._visits import visit_figures
from ._wording import outcome_label

__all__ = ["draw_figures"]

_PRIMARY, _OTHER, _GREY = "#1f5f8b", "#7a9cb8", "#8c8c8c"


def _png(figure):
    import matplotlib.pyplot as plt

    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=110, bbox_inches="tight")
    plt.close(figure)
    return buffer.getvalue()


def _estimates_figure(results):
    import matplotlib.pyplot as plt

    rows = []
    for record in results["estimates"]:
        # An estimate without an honest interval is drawn as a point only.
        low, high = record["ci_low"], record["ci_high"]
        rows.append((record["label"] + (" (primary)" if record["primary"] else "")
                     + ("" if low is not None else ": no interval"),
                     record["effect"], record["effect"] if low is None else low,
                     record["effect"] if high is None else high,
                     _PRIMARY if record["primary"] else _OTHER))  # fmt: skip
    boot = results.get("bootstrap")
    if boot:
        rows.append(("Bootstrap percentile interval", boot["estimate"], boot["ci_low"],
                     boot["ci_high"], _PRIMARY))  # fmt: skip
    bounds = results.get("bounds", {})
    if "lower" in bounds:
        rows.append(("Bounds (no principal ignorability)", None, bounds["lower"],
                     bounds["upper"], "#b5651d"))  # fmt: skip
    naive = results["naive_survivor_contrast"]
    other = (results.get("stratum") or {}).get("name", "always_survivor") != "always_survivor"
    rows.append(("Naive cell contrast (biased)" if other else "Naive survivor contrast (biased)",
                 naive["estimate"], naive["ci_low"],
                 naive["ci_high"], _GREY))  # fmt: skip
    figure, ax = plt.subplots(figsize=(7.2, 0.55 * len(rows) + 1.2), layout="constrained")
    positions = np.arange(len(rows))[::-1]
    for y, (_, effect, low, high, color) in zip(positions, rows, strict=True):
        if effect is None:
            ax.plot([low, high], [y, y], color=color, linewidth=7, alpha=0.5,
                    solid_capstyle="butt")  # fmt: skip
        else:
            ax.plot([low, high], [y, y], color=color, linewidth=2)
            ax.plot([effect], [y], "o", color=color, markersize=7)
    ax.axvline(0, color="0.3", linewidth=1, linestyle="--")
    ax.set_yticks(positions, [label for label, *_ in rows])
    level = results["settings"]["level"]
    ax.set_xlabel(f"effect on {outcome_label(results)} ({level:.0%} intervals)")
    ax.set_title(f"Effect in the {results['stratum']['label']} stratum" if other
                 else "Survivor average causal effect", fontsize=10)  # fmt: skip
    ax.grid(axis="x", color="0.92")
    return figure


def _sensitivity_figure(results):
    import matplotlib.pyplot as plt

    sens = results["sensitivity"]
    panels = _sensitivity_panels(results)
    other_stratum = "contrast" in sens["harmed_ratio"]
    # Another stratum's axis labels name two strata: a little wider, one more line.
    width, height = (5.4, 3.9) if other_stratum else (4.8, 3.6)
    figure, axes = plt.subplots(1, len(panels), figsize=(width * len(panels), height),
                                layout="constrained", squeeze=False)  # fmt: skip
    axes = axes[0]
    for ax, (key, label) in zip(axes, panels, strict=True):
        grid = sens[key]["grid"]
        x = np.array([g["value"] for g in grid])
        effect = np.array([g["effect"] for g in grid])
        low = np.array([np.nan if g["ci_low"] is None else g["ci_low"] for g in grid])
        high = np.array([np.nan if g["ci_high"] is None else g["ci_high"] for g in grid])
        ax.fill_between(x, low, high, color=_OTHER, alpha=0.35, linewidth=0)
        ax.plot(x, effect, color=_PRIMARY, linewidth=2)
        ax.axhline(0, color="0.3", linewidth=1, linestyle="--")
        tip = sens[key]["tipping_point"]
        if other_stratum and sens[key].get("tipping_status") in ("covers_null", "unchanged"):
            tip = None  # no tipping point to mark
        if tip is not None and x.min() <= tip <= x.max():
            ax.axvline(tip, color="#b5651d", linewidth=1)
            ax.text(tip, 0.98, f" tipping point {number(tip)}",
                    transform=ax.get_xaxis_transform(), va="top", fontsize=8,
                    color="#b5651d", ha="right" if tip > x.mean() else "left")  # fmt: skip
        ax.set_xlim(x.min(), x.max())
        ax.set_xlabel(label, fontsize=9)
        ax.set_ylabel(f"effect, {results['stratum']['label']}" if other_stratum else "SACE")
        ax.grid(color="0.92")
    figure.suptitle("How the estimate moves when an untestable assumption is relaxed", fontsize=10)
    return figure


def _sensitivity_panels(results):
    """``(parameter, axis label)`` per panel: the parameters the stratum's effect depends on."""
    sens = results["sensitivity"]
    mixed, other = (("protected", "harmed") if results["settings"]["monotonicity"] == "increasing"
                    else ("harmed", "protected"))  # fmt: skip
    if "contrast" not in sens["harmed_ratio"]:  # the always-survivor section
        return (
            ("pi_difference", f"{mixed} minus always-survivor mean of "
             f"{outcome_label(results)}\n(0 = principal ignorability)"),
            ("harmed_ratio", f"{other} / {mixed} stratum size\n(0 = monotonicity; shown where "
             "informative)"),
        )  # fmt: skip
    # The helped stratum's effect does not move with the harmed ratio alone: no panel then.
    mono = sens["harmed_ratio"]
    flat = mono.get("tipping_status") == "unchanged" or len(mono["grid"]) < 2
    return tuple(
        (key, f"{sens[key]['contrast']}\nmean of {outcome_label(results)} (0 = principal "
         "ignorability in that cell)") if key != "harmed_ratio" else
        (key, f"{sens[key]['contrast']}\n(0 = monotonicity; shown where informative)")
        for key in ("pi_difference", "pi_difference_doomed", "harmed_ratio")
        if key in sens and not (key == "harmed_ratio" and flat)
    )  # fmt: skip


def _in_study_words(figure, words):
    """Arm names of the study in a library figure's legends, labels and titles.

    The library's diagnostic plots say "treated" and "control"; the report uses the study's
    arm names (``--arm-names`` or the treatment levels).
    """
    if not words:
        return figure
    import re

    from matplotlib.text import Text

    names = {"treated": words["treated_arm"], "control": words["control_arm"]}
    pattern = re.compile(r"\b(treated|control)\b")
    for text in figure.findobj(Text):
        content = text.get_text()
        if pattern.search(content):
            text.set_text(pattern.sub(lambda m: names[m.group(1)], content))
    return figure


def _in_study_words_text(text, words):
    import re

    if not words:
        return text
    names = {"treated": words["treated_arm"], "control": words["control_arm"]}
    return re.sub(r"\b(treated|control)\b", lambda m: names[m.group(1)], text)


def draw_figures(analysis):
    """Draw every figure the results allow.

    Returns
    -------
    list of dict
        ``name`` (file name), ``title``, ``caption`` and ``png`` (bytes), in report order.
    """
    import matplotlib

    matplotlib.use("Agg", force=True)
    results = analysis.results
    figures = [
        ("estimates.png", "Estimates side by side", _estimates_figure, (results,),
         "Points and lines: estimates and confidence intervals. Shaded bar: the bounds, which "
         "drop principal ignorability. The naive comparison of survivors is biased when "
         "treatment changes who survives; it is shown only for contrast."),
    ]  # fmt: skip
    other = (results.get("stratum") or {}).get("name", "always_survivor") != "always_survivor"
    if results.get("stratum") and ("lower" not in results.get("bounds", {}) or other):
        shaded = (" Shaded bar: the bounds, which drop principal ignorability."
                  if "lower" in results.get("bounds", {}) else "")  # fmt: skip
        figures[0] = figures[0][:4] + (
            f"Points and lines: estimates and confidence intervals.{shaded} The naive contrast "
            "of the stratum's observed cells is biased when treatment changes the "
            "intermediate; it is shown only for contrast.",)  # fmt: skip
    diagnostics = results.get("diagnostics", {})
    if diagnostics.get("available", True):
        from .. import plotting

        if analysis.covariates is not None:
            figures.append(
                (
                    "balance.png",
                    "Covariate balance",
                    plotting.plot_balance,
                    (analysis.primary, analysis.covariates),
                    "Each arrow runs from the treated against control survivors without weights "
                    "(grey bar: what a naive survivor analysis compares) to the weighted "
                    "always-survivor reconstructions from the two arms (diamond, dark red when "
                    "outside the band). Inside the shaded band (|SMD| < 0.1, common practice) the "
                    "reconstructions agree; the largest unweighted imbalance is on top.",
                )  # fmt: skip
            )
    # Without covariates every unit shares one treatment probability, one set of principal
    # scores and one weight per arm: the overlap, weight, score and calibration figures would
    # show single bars (the tables say it in numbers).
    unadjusted = analysis.primary is not None and analysis.primary.n_features_in_ == 0
    if diagnostics.get("available", True) and not unadjusted:
        figures.append(
            ("overlap.png", "Overlap of the treatment probability", plotting.plot_overlap,
             (analysis.primary,),
             "Both arms should cover the same range; dashed lines at 0.05 and 0.95.")
        )  # fmt: skip
        figures.append(
            ("weights.png", "Balancing weights", plotting.plot_weights, (analysis.primary,),
             "A long right tail means a few rows carry much of the weight.")
        )  # fmt: skip
    from ._model_checks import model_check_figures
    from ._subgroups import subgroup_figures

    # In report order: subgroups follow the estimates, the model checks the diagnostics.
    figures[1:1] = subgroup_figures(results)
    figures += [f for f in model_check_figures(analysis)
                if not (unadjusted and f[0] in ("principal_scores.png", "calibration.png"))]
    if "grid" in results.get("sensitivity", {}).get("harmed_ratio", {}):
        effect = "SACE" if "contrast" not in results["sensitivity"]["harmed_ratio"] else (
            f"effect in the {results['stratum']['label']} stratum")  # fmt: skip
        figures.append(
            ("sensitivity.png", "Sensitivity analysis", _sensitivity_figure, (results,),
             f"Line: the {effect} if the assumption failed by the amount on the horizontal axis; "
             "band: its confidence interval. The tipping point is where the interval first "
             "covers zero.")
        )  # fmt: skip
    figures.extend(distribution_figures(results))
    figures.extend(visit_figures(analysis))
    drawn = []
    words = results.get("wording")
    for name, title, draw, args, caption in figures:
        figure = draw(*args)
        if name in ("balance.png", "overlap.png", "weights.png", "visits.png"):
            figure = _in_study_words(figure, words)
            caption = _in_study_words_text(caption, words)
        drawn.append({"name": name, "title": title, "caption": caption, "png": _png(figure)})
    return drawn
