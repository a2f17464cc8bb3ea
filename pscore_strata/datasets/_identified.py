"""The identified set of the trimming bounds in a truncation scenario, by a large simulation.

The bounds without principal ignorability (Zhang & Rubin 2003; Lee 2009) trim the arm whose
survivors mix always-survivors with the helped stratum: under ``"increasing"`` monotonicity, the
treated survivors' Y(1) distribution, reweighted to the population of units with S(1) = 1,
trimmed by the share ``q = P(S(0) = 1) / P(S(1) = 1)`` from below and from above; the other
arm's survivor mean is point identified. Their population values come from potential outcomes
drawn with a fixed seed (10^6 units, fewer with many covariates), so they are what the
covariate-free (weighted) bounds estimate; covariate-adjusted bounds target a narrower set.
Where monotonicity fails, the same population values are what the estimator converges to, and
the SACE may lie outside them. Missingness does not change them.
"""

import functools
import json

import numpy as np

__all__ = ["identified_set"]

_SET_SEED = 7_340_221
_SET_DRAWS = 1_000_000
_SET_CELLS = 20_000_000  # rows x covariates drawn at most


def identified_set(draw, n_features, **params):
    """``(lower, upper)``: the population bounds on the SACE of a truncation setting.

    ``draw(n_samples, rng, **params)`` simulates the setting (the truncation family's drawer).
    """
    draws = min(_SET_DRAWS, _SET_CELLS // n_features)
    return _cached(draw, draws, json.dumps(params, sort_keys=True, default=list))


def _trimmed_means(values, share):
    ordered = np.sort(values)
    k = max(1, int(round(min(share, 1.0) * ordered.size)))
    return float(ordered[:k].mean()), float(ordered[-k:].mean())


@functools.lru_cache(maxsize=32)
def _cached(draw, draws, key):
    params = json.loads(key)
    params.pop("follow_up", None)
    params.pop("response", None)
    data = draw(draws, np.random.default_rng(_SET_SEED), **params)
    s1, s0 = data.s1 == 1, data.s0 == 1
    if params.get("monotonicity", "increasing") == "increasing":
        low, high = _trimmed_means(data.y1[s1], s0.mean() / s1.mean())
        pure = float(data.y0[s0].mean())
        return low - pure, high - pure
    low, high = _trimmed_means(data.y0[s0], s1.mean() / s0.mean())
    pure = float(data.y1[s1].mean())
    return pure - high, pure - low
