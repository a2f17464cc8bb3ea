"""Warnings name the caller's line, not a line inside the library.

Source: Python's warnings machinery (``warnings.warn(..., stacklevel=)``, documented in the
standard library): a warning issued for a user's call is attributed to that call's file, as
for a warning raised by the function itself.
"""

import os
import warnings

import numpy as np

import pscore_strata as ps

PACKAGE = os.path.dirname(os.path.abspath(ps.__file__))


def _caught(call):
    """The warnings the call raised, except those of other libraries (scikit-learn's
    ConvergenceWarning names scikit-learn's own line)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        call()
    return [w for w in caught if "site-packages" not in w.filename
            or w.filename.startswith(PACKAGE)]  # fmt: skip


def test_fit_and_analysis_warnings_point_at_this_file():
    data = ps.datasets.make_truncation(400, random_state=1)
    survival = np.array(data.survival)
    survival[np.flatnonzero(data.treatment == 1)[:3]] = 0

    def run():
        # The positional form of PrincipalScoreModel.fit warns (FutureWarning), a few outcomes
        # in tiny data warn at fit, a tipping point not reached warns.
        ps.PrincipalScoreModel().fit(data.X, data.treatment, survival)
        est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                      survival=survival)  # fmt: skip
        ps.tipping_point(est, "pi_difference", search=(-0.01, 0.01))

    caught = _caught(run)
    assert {w.category for w in caught} >= {FutureWarning, UserWarning}
    for w in caught:
        assert w.filename == __file__, (w.category.__name__, w.filename, str(w.message)[:60])


def test_a_warning_from_the_nuisance_layer_points_at_this_file():
    # Survival nearly determined by x in one arm: overlap and separation warnings arise four
    # calls deep (estimator -> nuisance fit -> checks).
    rng = np.random.default_rng(3)
    x = rng.standard_normal((600, 1))
    treatment = rng.integers(0, 2, 600)
    survival = np.where(treatment == 1, rng.random(600) < 0.8, x[:, 0] > -1.2).astype(int)
    y = np.where(survival == 1, x[:, 0] + rng.standard_normal(600), np.nan)

    def run():
        ps.PrincipalScoreWeighting().fit(x, y, treatment=treatment, survival=survival)

    caught = _caught(run)
    assert caught
    for w in caught:
        assert w.filename == __file__, (w.category.__name__, w.filename)


def test_every_library_warning_goes_through_warn_at_caller():
    # Convention (pscore_strata/_warnings.py): a fixed stacklevel points into the library when
    # the call path changes, so no module calls warnings.warn itself.
    import pathlib

    paths = [p for p in pathlib.Path(PACKAGE).rglob("*.py") if p.name != "_warnings.py"]
    offenders = [str(path) for path in paths if "warnings.warn(" in path.read_text()]
    assert not offenders, offenders
