"""Shared by the example scripts: the fast setting used by the tests."""

import os
import sys


def fast_mode():
    """True with ``--fast`` on the command line or ``PSCORE_EXAMPLES_FAST=1`` in the environment.

    The fast setting shrinks samples and resamples so that every example runs in seconds (the
    tests use it); the numbers are then noisier than with the full setting.
    """
    return "--fast" in sys.argv[1:] or os.environ.get("PSCORE_EXAMPLES_FAST") == "1"
