"""The task runner: joblib execution of replicate blocks with an optional progress bar."""

from __future__ import annotations

import sys

from joblib import Parallel

__all__ = ["run_tasks"]


def run_tasks(tasks, sizes, n_jobs, progress, label):
    """Run the tasks through joblib, moving a progress bar as blocks finish."""
    bar = _progress_bar(progress, sum(sizes), label)
    try:
        parallel = Parallel(n_jobs=n_jobs, return_as="generator")
    except ValueError:  # a backend that cannot stream results (Ray's): the bar jumps at the end
        parallel = Parallel(n_jobs=n_jobs)
    out = []
    for size, result in zip(sizes, parallel(tasks), strict=True):
        out.append(result)
        if bar is not None:
            bar.update(size)
    if bar is not None:
        bar.close()
    return out


def _progress_bar(progress, total, label):
    notebook = _in_notebook()
    if progress is False or (progress is None and not (notebook or _stderr_is_terminal())):
        return None
    try:
        # tqdm.auto draws a notebook widget in Jupyter and a text bar elsewhere; the package
        # itself is imported first so that its absence is always noticed.
        import tqdm as _tqdm_package  # noqa: F401
        from tqdm.auto import tqdm
    except ImportError:
        if progress:
            raise ImportError("`progress=True` needs tqdm: pip install tqdm.") from None
        return None
    # In automatic mode the bar appears only once the run has taken a few seconds.
    options = dict(
        total=total, desc=label, unit="replicate", delay=3.0 if progress is None else 0.0
    )
    if not notebook:
        options["file"] = sys.stderr
    return tqdm(**options)


def _in_notebook():
    """Whether the code runs in a Jupyter kernel (where standard error is not a terminal)."""
    shell = sys.modules.get("IPython")
    if shell is None or "ipykernel" not in sys.modules:
        return False
    try:
        return shell.get_ipython() is not None and "IPKernelApp" in shell.get_ipython().config
    except Exception:  # an unusual IPython setup: behave as outside a notebook
        return False


def _stderr_is_terminal():
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False
