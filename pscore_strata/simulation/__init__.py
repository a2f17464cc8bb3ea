"""Monte Carlo studies: estimators against the known SACE of simulated scenarios.

``run_study`` fits every estimator on every replicate (in parallel, resumable from a
fingerprinted checkpoint, over sample sizes and scenario parameter settings), ``simulate_cell``
redraws one replicate's data, ``summarize`` gives bias, SD, RMSE, SE/SD, coverage, relative
efficiency and their Monte Carlo standard errors, ``plot_summary`` draws them and
``summary_table`` prints them for a manuscript.
"""

from ._cells import simulate_cell
from ._export import summary_table
from ._plot import plot_summary
from ._study import run_study
from ._summary import summarize

__all__ = ["run_study", "simulate_cell", "summarize", "plot_summary", "summary_table"]
