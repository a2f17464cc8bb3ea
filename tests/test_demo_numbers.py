"""The demo's numbers stay what they were before the estimand core was restructured.

External reference: ``tests/data/demo_results_before.json``, the estimates, standard errors,
bounds, sensitivity grids and distribution values of ``pscore-strata demo`` computed by the code
of main at commit 1ebb971 (before the restructuring), written by ``tests/_demo_numbers.py``. A
change that is meant to move these numbers rewrites the fixture with that script and says why in
its commit message.
"""

import json
import pathlib
import sys

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).parent))
from _demo_numbers import demo_results, numbers  # noqa: E402

FIXTURE = pathlib.Path(__file__).parent / "data" / "demo_results_before.json"


def test_demo_numbers_unchanged():
    before = json.loads(FIXTURE.read_text())
    now = numbers(demo_results())
    missing = sorted(set(before) - set(now))
    assert not missing, f"demo numbers no longer reported: {missing[:10]}"
    paths = sorted(before)
    got = np.array([now[path] for path in paths])
    expected = np.array([before[path] for path in paths])
    same = np.isclose(got, expected, rtol=1e-12, atol=1e-12, equal_nan=True)
    changed = [f"{p}: {before[p]!r} -> {now[p]!r}" for p, ok in zip(paths, same, strict=True)
               if not ok]
    assert not changed, "demo numbers changed:\n" + "\n".join(changed[:20])
