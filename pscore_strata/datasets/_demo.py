"""Loader for the invented critical-care registry shipped with the package."""

from importlib import resources

import pandas as pd

DEMO_FILE = "critical_care_demo.csv"
DEMO_CARD = "critical_care_demo.md"

#: Column roles of the demo registry, ready to pass to an estimator.
DEMO_ROLES = {
    "outcome": "functional_score_6mo",
    "treatment": "protective_ventilation",
    "survival": "alive_6mo",
    "covariates": ["age", "female", "severity_score", "comorbidities", "pf_ratio", "site"],
    "categorical": ["site"],
    "identifier": "patient_id",
}

#: True SACE of the demo registry, in functional-score points. It is exact: the data were
#: generated with this constant gain for every always-survivor (see the data card).
DEMO_TRUE_EFFECT = 4.0


def demo_path(filename=DEMO_FILE):
    """Return a traversable handle on a file of the demo data directory."""
    return resources.files("pscore_strata.datasets").joinpath("data", filename)


def load_demo():
    """Load the invented critical-care registry.

    About 2000 invented patients of an invented registry compare a lung-protective,
    low-tidal-volume ventilation strategy (``protective_ventilation == 1``) with a
    conventional one. Six-month survival is ``alive_6mo``; the 0-100 functional score
    ``functional_score_6mo`` exists only for survivors and is NaN for patients who died.
    These are simulated data, not real patients. The data card
    ``critical_care_demo.md`` beside the CSV gives the columns, units, the generating
    script and seed, and the true SACE.

    Returns
    -------
    frame : pandas.DataFrame
        One row per patient; a fresh copy on every call.

    See Also
    --------
    DEMO_ROLES : which column plays which part.
    DEMO_TRUE_EFFECT : the true survivor average causal effect.

    Examples
    --------
    >>> from pscore_strata.datasets import load_demo, DEMO_ROLES
    >>> frame = load_demo()
    >>> bool(frame.loc[frame[DEMO_ROLES["survival"]] == 0, DEMO_ROLES["outcome"]].isna().all())
    True
    """
    with demo_path().open("r", encoding="utf-8") as handle:
        return pd.read_csv(handle)
