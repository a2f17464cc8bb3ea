"""How fitted bounds show in a notebook (their result card)."""

from __future__ import annotations

from ..tables import NotebookDisplay, number_text, result_card

__all__ = ["BoundsDisplay"]

CARD_CAUTION = (
    "The bounds drop principal ignorability but keep monotonicity and, with covariates, no "
    "unmeasured confounding of treatment; these are untestable. The always-survivor stratum is "
    "latent: population-level, not for decisions about individual patients."
)


class BoundsDisplay(NotebookDisplay):
    """The result card (``_repr_html_``) of :class:`TrimmingBounds`."""

    _fitted_attribute = "lower_"

    def _card(self):
        low, high = self.conf_int(0.95)
        fields = [
            ("Bounds on the SACE", f"{number_text(self.lower_)} to {number_text(self.upper_)}"),
            ("95% Imbens-Manski interval", f"{number_text(low)} to {number_text(high)}"),
            ("Standard errors", f"lower {number_text(self.std_error_lower_)}, upper "
                                f"{number_text(self.std_error_upper_)}"),  # fmt: skip
            ("Trimmed share of the mixed arm's survivors", f"{self.trimming_share_:.1%}"),
        ]
        details = self.summary(0.95)._repr_html_()
        return result_card("TrimmingBounds: bounds without principal ignorability", fields,
                           notes=[CARD_CAUTION], details=details)
