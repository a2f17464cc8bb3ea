"""Every example script runs to the end with its fast setting (``--fast``).

External references: the NSW employment shares (recalled from memory: in the Dehejia & Wahba
1999 subsample, 24.3% of trained and 35.4% of control men had zero 1978 earnings), and the
simulated truth of the scenarios the examples analyse.
"""

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def run_example(name):
    # One OpenMP thread: the fast settings fit small data, where more threads only contend.
    env = {**os.environ, "OMP_NUM_THREADS": "1", "PSCORE_EXAMPLES_FAST": "1"}
    result = subprocess.run(
        [sys.executable, str(EXAMPLES / name), "--fast"],
        capture_output=True, text=True, timeout=300, cwd=EXAMPLES, env=env,
    )  # fmt: skip
    assert result.returncode == 0, result.stderr
    assert "Traceback" not in result.stderr
    return result.stdout


def test_every_example_is_tested():
    scripts = {p.name for p in EXAMPLES.glob("*.py") if not p.name.startswith("_")}
    assert scripts == {
        "quickstart.py", "nsw_job_training.py", "cross_fitting.py", "simulation_study.py",
        "missing_data.py",
    }  # fmt: skip


def test_quickstart():
    out = run_example("quickstart.py")
    # Simulated truth of the invented registry: SACE 4 points.
    robust = float(re.search(r"multiply robust: SACE\s+([-\d.]+)", out).group(1))
    low, high = map(float, re.search(r"multiply robust: .*CI ([-\d.]+) to ([-\d.]+)", out).groups())
    assert low < 4.0 < high and abs(robust - 4.0) < 1.0
    assert "latent" in out


def test_nsw_job_training():
    out = run_example("nsw_job_training.py")
    assert "445 men, 185 trained" in out  # Dehejia & Wahba 1999 sample sizes
    assert "trained 75.7%, control 64.6%" in out  # 1 - 0.243 and 1 - 0.354 (from memory)
    assert "Trimming bounds" in out and "Bootstrap (99 refits)" in out


def test_cross_fitting():
    out = run_example("cross_fitting.py")
    line = next(row for row in out.splitlines() if "boosting" in row and "CI" in row)
    low, high = map(float, re.search(r"CI ([-\d.]+) to ([-\d.]+)", line).groups())
    assert low < 1.0 < high  # simulated truth of the "nonlinear" scenario: SACE 1


@pytest.mark.filterwarnings("ignore")
def test_simulation_study():
    out = run_example("simulation_study.py")
    assert "pi_violated" in out and "coverage" in out


def test_missing_data():
    out = run_example("missing_data.py")
    # Simulated truth of the "missing_outcomes" scenario (printed by the example).
    truth = float(re.search(r"true SACE ([-\d.]+)", out).group(1))
    effect, se = map(float, re.search(r"MultiplyRobust\s+([-\d.]+) \(SE ([\d.]+)\)", out).groups())
    assert abs(effect - truth) < 4 * se
    assert 'missing="at_random"' in out and "Outcome shift" in out
