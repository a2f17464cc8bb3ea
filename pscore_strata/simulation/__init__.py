"""Monte Carlo studies: estimators against the known SACE of simulated scenarios.

``run_study`` fits every estimator on every replicate (in parallel, resumable from a
checkpoint), ``summarize`` gives bias, RMSE, SE/SD and coverage, ``plot_summary`` draws them.
"""

from ._study import run_study
from ._summary import plot_summary, summarize

__all__ = ["run_study", "summarize", "plot_summary"]
