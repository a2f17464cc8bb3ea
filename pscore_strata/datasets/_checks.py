"""Argument checks shared by the simulators; every error message is written here."""

import numbers

import numpy as np


def check_positive_int(value, name, minimum=1):
    """Return ``value`` as an int, or raise if it is not an integer >= ``minimum``."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Integral):
        raise TypeError(
            f"{name} must be an integer >= {minimum}; got {value!r} of type "
            f"{type(value).__name__}. Pass a whole number such as {max(minimum, 2000)}."
        )
    if value < minimum:
        raise ValueError(f"{name} must be an integer >= {minimum}; got {value}.")
    return int(value)


def check_real(value, name, *, low=None, high=None, high_open=False):
    """Return ``value`` as a finite float inside ``[low, high]`` (or ``[low, high)``)."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise TypeError(
            f"{name} must be a real number; got {value!r} of type {type(value).__name__}."
        )
    value = float(value)
    if not np.isfinite(value):
        raise ValueError(f"{name} must be finite; got {value}.")
    closing = ")" if high_open else "]"
    interval = f"[{'-inf' if low is None else low}, {'inf' if high is None else high}{closing}"
    too_high = high is not None and (value >= high if high_open else value > high)
    if (low is not None and value < low) or too_high:
        raise ValueError(f"{name} must lie in {interval}; got {value}.")
    return value


def check_choice(value, name, allowed):
    """Return ``value`` if it is one of ``allowed``; the error lists the allowed values."""
    if not isinstance(value, str) or value not in allowed:
        options = ", ".join(repr(option) for option in allowed)
        raise ValueError(f"{name} must be one of {options}; got {value!r}.")
    return value


def resolve_rng(random_state):
    """Turn ``random_state`` into a :class:`numpy.random.Generator`.

    ``None`` gives fresh entropy and an int seeds a new generator. A ``Generator`` is used
    as is, so it advances, as scikit-learn does with a shared ``RandomState``. A legacy
    ``RandomState`` advances too: one 63-bit seed is drawn from it to seed the generator.
    """
    if random_state is None or isinstance(random_state, np.random.Generator):
        return np.random.default_rng(random_state)
    if isinstance(random_state, np.random.RandomState):
        return np.random.default_rng(int(random_state.randint(0, 2**63 - 1, dtype=np.int64)))
    if isinstance(random_state, numbers.Integral) and not isinstance(
        random_state, (bool, np.bool_)
    ):
        if random_state < 0:
            raise ValueError(f"random_state must be a non-negative integer; got {random_state}.")
        return np.random.default_rng(int(random_state))
    raise TypeError(
        "random_state must be None, a non-negative int, a numpy.random.Generator or a "
        f"numpy.random.RandomState; got {random_state!r} of type {type(random_state).__name__}."
    )
