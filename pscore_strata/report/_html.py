"""Write the report files: report.html (self-contained), results.json and the PNG figures."""

from __future__ import annotations

import base64
import json
from importlib import resources
from pathlib import Path

from ._format import count, interval, number, percent
from ._glance import FOLD_TITLES, FOLDED, headlines, main_warnings, tipping_text

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
    "diagnostics",
    "model_checks",
    "bounds",
    "sensitivity",
    "distributions",
    "assumptions",
    "cautions",
)


def schema():
    """The JSON Schema that ``results.json`` follows."""
    text = resources.files("pscore_strata.report").joinpath(SCHEMA).read_text(encoding="utf-8")
    return json.loads(text)


_DEFAULT_WORDING = {
    "event": "death", "unit": "unit", "units": "units", "treated_arm": "treatment",
    "control_arm": "control", "treated_condition": "treatment = 1",
    "control_condition": "treatment = 0", "survived_condition": "survival = 1",
    "event_condition": "survival = 0",
}  # fmt: skip


def _every_few(grid, n_shown):
    """About ``n_shown`` evenly spaced rows of a grid, its last row included."""
    selected = grid[:: max(1, len(grid) // (n_shown - 1))]
    if grid[-1] not in selected:
        selected.append(grid[-1])
    return selected


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
    words = results.get("wording") or _DEFAULT_WORDING
    shown, more = main_warnings(results)
    return {
        "r": results,
        "sections": SECTIONS,
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
        "w": words,
        "figures": [{**f, "data": base64.b64encode(f["png"]).decode("ascii")} for f in figures],
        "fmt": number,
        "pct": percent,
        "interval": interval,
        "count": count,
    }


def render_html(results, figures):
    """The report as one HTML string; every value from the user is escaped by jinja2."""
    try:
        import jinja2
    except ImportError as error:
        raise ImportError(
            "The HTML report needs jinja2 and matplotlib: pip install 'pscore_strata[report]'."
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
    paths["json"].write_text(json.dumps(results, indent=2, allow_nan=False) + "\n",
                             encoding="utf-8")  # fmt: skip
    paths["html"] = out / "report.html"
    paths["html"].write_text(render_html(results, figures), encoding="utf-8")
    analysis.results = results
    return paths
