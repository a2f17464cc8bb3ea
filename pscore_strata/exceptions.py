"""Every warning and error class that pscore_strata raises.

They are defined here once and re-exported where they first lived (``pscore_strata``,
``pscore_strata.nuisance``, ``pscore_strata.inference``, ``pscore_strata.report``), so either
import path works. Filter them like any warning, for example::

    import warnings
    import pscore_strata as ps
    warnings.simplefilter("error", ps.exceptions.MonotonicityWarning)

The library also raises the standard ``ValueError`` / ``TypeError`` for bad arguments (each
message names the argument and what to do), scikit-learn's ``NotFittedError`` and
``ConvergenceWarning``, and plain ``UserWarning`` / ``RuntimeWarning`` for one-off notes.
"""

from __future__ import annotations

__all__ = [
    "OverlapWarning",
    "MonotonicityWarning",
    "LooseFitWarning",
    "FewClustersWarning",
    "DataWarning",
    "InputError",
    "FileProblem",
]


class OverlapWarning(UserWarning):
    """Fitted probabilities close to 0 or 1: weights are unstable and overlap is doubtful.

    Raised when a share of the fitted treatment (or follow-up) probabilities lies outside
    ``[0.01, 0.99]``. The weights then rest on few rows; consider trimming the sample to the
    region of overlap or a different treatment model.
    """


class MonotonicityWarning(UserWarning):
    """The fitted survival models contradict the monotonicity assumption for some rows.

    Raised when the fitted survival probability of the arm that monotonicity says survives more
    is lower for some rows; the principal scores are clipped at zero there. Check the survival
    models, or use :class:`pscore_strata.PrincipalScoreModel`, whose scores never cross.
    """


class LooseFitWarning(UserWarning):
    """A user's GLM stopped far from the root of its score; the sandwich uses it as fitted.

    The M-estimation standard error assumes the nuisance model solved its score equations; raise
    the model's ``max_iter`` or tighten its ``tol`` and refit.
    """


class FewClustersWarning(UserWarning):
    """Cluster-robust inference with fewer than 30 clusters (intervals use a t reference).

    The cluster-robust standard error is itself noisy with few clusters; intervals then use
    Student's t with ``G - 1`` degrees of freedom and may still undercover.
    """


class DataWarning(UserWarning):
    """Something in the data the analysis proceeds with but the analyst should see.

    Raised by the report's data preparation (for example, a categorical column with very many
    levels, or date-like text); the message says what was found and what to do.
    """


class InputError(ValueError):
    """A problem with the user's data or options, reported without a traceback.

    Raised by :mod:`pscore_strata.report` and the command line; the message names the column or
    option and what to change.
    """


class FileProblem(ValueError):
    """Raised by a check inside a file reader, so the reader's own errors stay apart from it.

    The report turns it into an :class:`InputError` naming the file.
    """
