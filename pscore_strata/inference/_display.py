"""How a bootstrap result shows in a notebook (its result card)."""

from __future__ import annotations

import pandas as pd

from ..tables import NotebookDisplay, number_text, result_card

__all__ = ["BootstrapDisplay"]


class BootstrapDisplay(NotebookDisplay):
    """The result card (``_repr_html_``) of :class:`BootstrapResult`."""

    _fitted_attribute = "replicates"

    def _card(self):
        fields = []
        estimate, se = self.estimate, self.std_error
        if len(self.replicates) >= 2:
            interval = self.conf_int(0.95, kind="percentile")
            if isinstance(interval, tuple):
                estimate, se = pd.Series({"effect": estimate}), pd.Series({"effect": se})
                interval = pd.DataFrame([interval], columns=["low", "high"], index=["effect"])
            for name in estimate.index:
                fields.append((str(name), f"{number_text(estimate[name])} (SE "
                               f"{number_text(se[name])}; 95% percentile interval "
                               f"{number_text(interval.loc[name, 'low'])} to "
                               f"{number_text(interval.loc[name, 'high'])})"))  # fmt: skip
        fields.append(("Replicates", f"{len(self.replicates):,} of {self.n_resamples:,} "
                                     f"({self.n_failed:,} failed)"))  # fmt: skip
        fields.append(("Method", str(self.method)))
        warnings = [] if len(self.replicates) >= 2 else ["Fewer than 2 replicates succeeded."]
        return result_card("BootstrapResult", fields, warnings=warnings, notes=list(self.notes),
                           details=self.summary(0.95)._repr_html_())  # fmt: skip
