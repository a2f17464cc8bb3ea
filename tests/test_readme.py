"""The README's quickstart runs as written and its numbers agree with the simulated truth."""

import re
import warnings
from pathlib import Path

README = Path(__file__).resolve().parents[1] / "README.md"


def test_quickstart_runs_and_recovers_truth():
    text = README.read_text()
    block = re.search(r"## Quickstart\n\n```python\n(.*?)```", text, re.S).group(1)
    namespace = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        exec(compile(block, "README quickstart", "exec"), namespace)
    data, robust, bounds = namespace["data"], namespace["robust"], namespace["bounds"]
    # Source: simulated truth (make_truncation's SACE is exactly 1 here).
    assert abs(robust.effect_ - data.true_effect) < 4 * robust.std_error_
    assert bounds.lower_ <= data.true_effect <= bounds.upper_
    low, high = namespace["boot"].conf_int(0.95, kind="bca")
    assert low < robust.effect_ < high
    # The stratum model's scores are sums of stratum probabilities, so they cannot cross.
    joint = namespace["joint"]
    assert joint.n_monotonicity_violations_ == 0
    assert abs(joint.effect_ - data.true_effect) < 4 * joint.std_error_
