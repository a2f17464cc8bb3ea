"""How a fitted SACE estimator shows in a notebook, and its summary as a manuscript table."""

from __future__ import annotations

from ..tables import NotebookDisplay, number_text, result_card
from ._summary import SCALE_LABELS

__all__ = ["EstimatorDisplay"]

MAX_WARNINGS = 5
CARD_CAUTION = (
    "The always-survivor stratum is latent and monotonicity and principal ignorability cannot be "
    "tested: read the estimate with the bounds and a sensitivity analysis; population-level, not "
    "for decisions about individual patients."
)


class EstimatorDisplay(NotebookDisplay):
    """The result card (``_repr_html_``) and :meth:`to_table` of the SACE estimators."""

    def _card(self):
        from ..diagnostics import diagnostic_warnings

        low, high = self.conf_int(0.95)
        data = self.training_data_
        fields = [
            (f"SACE ({SCALE_LABELS[self.scale]})", number_text(self.effect_)),
            ("95% confidence interval", f"{number_text(low)} to {number_text(high)}"),
            ("Standard error", f"{number_text(self.std_error_)} ({self.std_error_method_})"),
            ("Always-survivor means", f"treated {number_text(self.mean_treated_)}, control "
                                      f"{number_text(self.mean_control_)}"),  # fmt: skip
            ("Rows", f"{data.n_samples:,} ({int(data.treatment.sum()):,} treated)"),
        ]
        warnings = list(diagnostic_warnings(self))
        if len(warnings) > MAX_WARNINGS:
            warnings = warnings[:MAX_WARNINGS] + [
                f"... and {len(warnings) - MAX_WARNINGS} more (pscore_strata.diagnostic_warnings)."
            ]
        return result_card(
            f"{type(self).__name__}: survivor average causal effect",
            fields, warnings=warnings, notes=[CARD_CAUTION],
            details=self.summary(0.95)._repr_html_(),
        )  # fmt: skip

    def to_table(self, format=None, path=None, *, level=0.95, caption=None):
        """The summary as a manuscript table: Word, LaTeX (booktabs), Markdown or HTML.

        Parameters
        ----------
        format : {"docx", "tex", "md", "html"}, optional
            Without ``path``: return the rendered table (text, or a python-docx ``Document``
            for ``"docx"``). With ``path``: the file's format (by default from its extension).
        path : str or path-like, optional
            Write the table to this file and return its path.
        level : float, default=0.95
            Confidence level of the interval column.
        caption : str, optional
            By default names the estimator and the estimand.

        Returns
        -------
        pscore_strata.tables.Table, str, docx.Document or pathlib.Path
            The :class:`~pscore_strata.tables.Table` itself when neither ``format`` nor
            ``path`` is given.

        Examples
        --------
        >>> import pscore_strata as ps
        >>> data = ps.datasets.make_truncation(500, random_state=0)
        >>> est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
        ...                               survival=data.survival)
        >>> print(est.to_table("md").splitlines()[0])
        Table: MultiplyRobust: survivor average causal effect
        """
        summary = self.summary(level)
        return summary.to_table(format, path, caption=caption or summary.title)
