"""Shared by the example scripts: the fast setting used by the tests and the documentation build."""

import os
import sys


def fast_mode():
    """True with ``--fast`` on the command line or ``PSCORE_STRATA_FAST=1`` in the environment.

    The fast setting shrinks samples and resamples so that every example runs in seconds (the
    tests and the documentation build use it); the numbers are then noisier than with the full
    setting. ``PSCORE_EXAMPLES_FAST=1``, the older name of the variable, is still honoured.
    """
    return (
        "--fast" in sys.argv[1:]
        or os.environ.get("PSCORE_STRATA_FAST") == "1"
        or os.environ.get("PSCORE_EXAMPLES_FAST") == "1"
    )


def show():
    """Show the figures when run by hand with an interactive matplotlib backend.

    Under the documentation build (and in the tests) the backend is non-interactive: the figures
    stay open for the gallery to capture, and nothing is shown.
    """
    import matplotlib
    import matplotlib.pyplot as plt

    if matplotlib.get_backend().lower() not in ("agg", "pdf", "svg", "ps", "cairo", "template"):
        plt.show()
