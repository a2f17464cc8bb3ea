"""Covariates given as a formula over a DataFrame (``"age + severity + C(site) + bs(bmi, 4)"``).

The formulaic library builds the design matrix; its model specification stores everything
learned from the training rows (category levels, spline knots, centering), so new data get the
same columns. The intercept is dropped (every model fits its own); categorical terms keep their
reference-level coding, as with an intercept. Every error is raised here, naming the formula.
"""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd

__all__ = ["FormulaDesign", "check_formula", "variables_in"]

_INTERCEPT = "Intercept"


def _formulaic():
    try:
        import formulaic
    except ImportError as error:  # pragma: no cover - the test extra installs it
        raise ImportError(
            "`covariates` given as a formula needs the formulaic library: "
            "pip install 'pscore_strata[formula]'."
        ) from error
    return formulaic


def check_formula(covariates, name="covariates"):
    """``covariates`` as a right-hand-side formula string (a clear error otherwise)."""
    label = name if name.startswith("--") else f"`{name}`"
    if not isinstance(covariates, str) or not covariates.strip():
        raise TypeError(
            f"{label} must be a formula string such as \"age + severity + C(site)\"; got "
            f"{covariates!r}."
        )
    if "~" in covariates:
        raise ValueError(
            f"{label} is the right-hand side only (the covariates): drop the outcome and '~' "
            f"from {covariates!r}; the outcome, treatment and survival are passed to fit."
        )
    return covariates.strip()


class FormulaDesign:
    """The design of a covariate formula, learned on training rows and applied to new ones.

    Parameters
    ----------
    formula : str
        Right-hand side, in formulaic's grammar: ``C(x)`` categorical, ``bs(x, 4)`` B-spline,
        ``x:z`` interaction, ``np.log(x)`` any numpy function.
    name : str
        The argument or option that gave the formula, for error messages.
    """

    def __init__(self, formula, name="covariates"):
        self.formula = check_formula(formula, name)
        self.name = name
        # An option of the command line is named as typed, an argument in backquotes.
        self.label = name if name.startswith("--") else f"`{name}`"
        self.spec = None

    def _check_frame(self, X, where):
        if not isinstance(X, pd.DataFrame):
            raise TypeError(
                f"`X` must be a pandas DataFrame when {self.label} is a formula "
                f"({self.formula!r}) {where}; got {type(X).__name__}."
            )

    def fit_transform(self, X):
        """Learn the design on ``X`` (a DataFrame) and return its matrix as a DataFrame."""
        self._check_frame(X, "at fit")
        formulaic = _formulaic()
        matrix = self._build(lambda: formulaic.model_matrix(self.formula, X, na_action="raise"),
                             X)  # fmt: skip
        self.spec = matrix.model_spec
        return self._without_intercept(matrix, X.index)

    def transform(self, X):
        """The design matrix of new rows, with the columns learned at fit."""
        self._check_frame(X, "for new data")
        return self._without_intercept(self._build(lambda: self.spec.get_model_matrix(X), X),
                                       X.index)  # fmt: skip

    @property
    def variables(self):
        """The data columns the formula reads, sorted."""
        return sorted(str(v) for v in self.spec.required_variables)

    @property
    def feature_names(self):
        """Names of the design columns (intercept dropped)."""
        return [c for c in self.spec.column_names if c != _INTERCEPT]

    def _build(self, build, X):
        missing = self._missing_columns(X)
        if missing:
            raise ValueError(
                f"{self.label} formula {self.formula!r} uses column(s) {missing} that `X` does "
                f"not have; its columns are {list(map(str, X.columns))}."
            )
        from formulaic.errors import FormulaicError

        with warnings.catch_warnings():
            # New levels would silently become missing codes: refuse them instead.
            warnings.filterwarnings("error", message="Data has categories outside")
            try:
                return build()
            except Warning as error:
                levels = re.search(r"\{.*\}", str(error))
                raise ValueError(
                    f"`X` has categories not seen at fit in the {self.label} formula "
                    f"{self.formula!r}: {levels.group(0) if levels else error}. Map them to "
                    "known levels or refit on data that contain them."
                ) from None
            except (FormulaicError, SyntaxError, NameError, TypeError) as error:
                # formulaic's first line says what is wrong; the rest is a colored excerpt.
                reason = str(error).splitlines()[0] if str(error) else type(error).__name__
                raise ValueError(
                    f"cannot build {self.label} {self.formula!r}: {reason}"
                ) from None
            except ValueError as error:
                if "null values" in str(error):
                    column = re.search(r"`([^`]+)`", str(error))
                    shown = column.group(1) if column else "a variable"
                    raise ValueError(
                        f"{self.label} formula {self.formula!r}: {shown} has missing values "
                        "in X. Impute them or drop those rows first (nothing is dropped "
                        "silently)."
                    ) from None
                raise ValueError(
                    f"cannot build {self.label} {self.formula!r}: {error}"
                ) from None

    def _missing_columns(self, X):
        if self.spec is not None:
            needed = self.variables
        else:
            needed = variables_in(self.formula)
        return [v for v in needed if v not in X.columns]

    def _without_intercept(self, matrix, index):
        frame = pd.DataFrame(np.asarray(matrix, dtype=float), columns=list(matrix.columns),
                             index=index)  # fmt: skip
        frame = frame.drop(columns=[_INTERCEPT], errors="ignore")
        if frame.shape[1] == 0:
            raise ValueError(
                f"the {self.label} formula {self.formula!r} has no covariate term; for no "
                "covariates leave it out."
            )
        return frame


def variables_in(formula):
    """The data columns a formula names (call names, modules, keywords and quoted text excluded).

    Read from the text, before any data are seen, so the checks of a data file (missing values,
    unknown columns) can run first.
    """
    text = re.sub(r"'[^']*'|\"[^\"]*\"", " ", formula)
    words = re.findall(r"(?<![\w.])([A-Za-z_]\w*)\b(?!\s*(?:[(.]|=(?!=)))", text)
    return list(dict.fromkeys(words))
