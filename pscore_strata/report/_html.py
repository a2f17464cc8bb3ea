"""Write the report files: report.html (self-contained), results.json and the PNG figures."""

from __future__ import annotations

import base64
import json
from importlib import resources
from pathlib import Path

import numpy as np

from ._format import count, interval, number, percent
from ._glance import FOLD_TITLES, FOLDED, headlines, main_warnings, tipping_text
from ._wording import outcome_label

__all__ = ["write_report", "render_html", "schema"]

TEMPLATE = "report.html"
SCHEMA = "results.schema.json"
# The report's numbered sections, in order; each is ``templates/section_<name>.html``.
SECTIONS = (
    "estimand",
    "data",
    "missing",
    "estimates",
    "subgroups",
    "visits",
    "diagnostics",
    "model_checks",
    "bounds",
    "sensitivity",
    "distributions",
    "assumptions",
    "cautions",
)


def schema():
    """The JSON Schema that ``results.json`` follows.

    Returns
    -------
    dict
    """
    text = resources.files("pscore_strata.report").joinpath(SCHEMA).read_text(encoding="utf-8")
    return json.loads(text)


_DEFAULT_WORDING = {
    "event": "death", "unit": "unit", "units": "units", "treated_arm": "treatment",
    "control_arm": "control", "treated_condition": "treatment = 1",
    "control_condition": "treatment = 0", "survived_condition": "survival = 1",
    "event_condition": "survival = 0",
}  # fmt: skip


def _every_few(grid, n_shown):
    """About ``n_shown`` evenly spaced rows of a grid: the null setting (value 0), both ends.

    The spacing is counted from the row at 0, so the assumption itself is always shown.
    """
    step = max(1, len(grid) // (n_shown - 1))
    null = min(range(len(grid)), key=lambda i: abs(grid[i]["value"]))
    chosen = set(range(null % step, len(grid), step))
    # The ends too, unless a chosen row sits right beside them.
    for end in (0, len(grid) - 1):
        if min(abs(end - i) for i in chosen) >= max(1, step // 2):
            chosen.add(end)
    return [grid[i] for i in sorted(chosen)]


def finite_or_null(value):
    """A copy of a JSON-ready record with NaN and infinite floats replaced by ``None``."""
    if isinstance(value, dict):
        return {key: finite_or_null(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [finite_or_null(item) for item in value]
    if isinstance(value, float | np.floating) and not np.isfinite(value):
        return None
    return value


def _outside_bounds(results):
    """Estimates that fall outside the trimming bounds, with how far and in standard errors."""
    bounds = results.get("bounds") or {}
    if bounds.get("lower") is None or bounds.get("upper") is None:
        return []
    outside = []
    for estimate in results["estimates"]:
        effect = estimate["effect"]
        if effect is None:
            continue
        if effect < bounds["lower"]:
            side, bound, error = "below the lower", bounds["lower"], bounds.get("std_error_lower")
        elif effect > bounds["upper"]:
            side, bound, error = "above the upper", bounds["upper"], bounds.get("std_error_upper")
        else:
            continue
        distance = abs(effect - bound)
        outside.append({"label": estimate["label"], "effect": effect, "side": side,
                        "bound": bound, "distance": distance,
                        "in_std_errors": distance / error if error else None})  # fmt: skip
    return outside


def _view(results, figures):
    level = f"{results['settings']['level']:.0%}"
    primary = next(e for e in results["estimates"] if e["primary"])
    diagnostics = results.get("diagnostics", {})
    balance = sorted(
        diagnostics.get("balance", []),
        key=lambda r: -abs(r["raw_smd_treated_vs_control"] or 0),
    )
    sens = results.get("sensitivity", {})
    selected = selected_harmed = []
    if "pi_difference" in sens:
        selected = _every_few(sens["pi_difference"]["grid"], 7)
        selected_harmed = _every_few(sens["harmed_ratio"]["grid"], 7)
    # Another stratum than the always-survivors (--stratum; report/_strata.py).
    target = results.get("stratum")
    other = target is not None and target["name"] != "always_survivor"
    words = results.get("wording") or _DEFAULT_WORDING
    shown, more = main_warnings(results)
    return {
        "r": results,
        "other_stratum": other,
        "effect_name": f"Effect in the {target['label']} stratum" if other else "SACE",
        "target_share": (results["stratum_shares"].get(target["name"]) if other
                         else results["stratum_shares"].get("always_survivor")),
        "strata": results.get("strata"),
        # "Over visits" appears only for an analysis of several visits.
        "sections": tuple(s for s in SECTIONS if s != "visits" or results.get("visits")),
        "folded": FOLDED,
        "fold_titles": FOLD_TITLES,
        "headlines": headlines(results, words),
        "tipping": tipping_text(results),
        "glance_warnings": shown,
        "more_warnings": more,
        "level": level,
        "primary": primary,
        "balance": balance,
        "selected_grid": selected,
        "selected_harmed": selected_harmed,
        "outside_bounds": _outside_bounds(results),
        "outcome_name": outcome_label(results),
        "w": words,
        "figures": [{**f, "data": base64.b64encode(f["png"]).decode("ascii")} for f in figures],
        "fmt": number,
        "pct": percent,
        "interval": interval,
        "count": count,
    }


def render_html(results, figures):
    """The report as one HTML string; every value from the user is escaped by jinja2.

    Parameters
    ----------
    results : dict
        The JSON-ready results (``Analysis.results``).
    figures : list of dict
        One per figure: its metadata and its PNG bytes under ``"png"``.

    Returns
    -------
    str
    """
    try:
        import jinja2
    except ImportError as error:
        raise ImportError(
            "The HTML report needs jinja2 and matplotlib: pip install jinja2 matplotlib (or, "
            "from a checkout, pip install '.[report]')."
        ) from error
    environment = jinja2.Environment(
        loader=jinja2.PackageLoader("pscore_strata.report", "templates"),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    return environment.get_template(TEMPLATE).render(**_view(results, figures))


def write_report(analysis, out_dir):
    """Write ``report.html``, ``results.json`` and one PNG per figure into ``out_dir``.

    Parameters
    ----------
    analysis : Analysis
        What :func:`run_analysis` returned.
    out_dir : str or pathlib.Path
        Created if it does not exist.

    Returns
    -------
    dict
        Paths of the written files by kind.
    """
    from ._figures import draw_figures

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    figures = draw_figures(analysis)
    results = dict(analysis.results)
    results["figures"] = [f["name"] for f in figures]
    paths = {"figures": []}
    for figure in figures:
        path = out / figure["name"]
        path.write_bytes(figure["png"])
        paths["figures"].append(path)
    paths["json"] = out / "results.json"
    # Every non-finite number becomes null, as the schema says (json refuses NaN otherwise).
    paths["json"].write_text(json.dumps(finite_or_null(results), indent=2, allow_nan=False)
                             + "\n", encoding="utf-8")  # fmt: skip
    paths["html"] = out / "report.html"
    paths["html"].write_text(render_html(results, figures), encoding="utf-8")
    analysis.results = results
    return paths
