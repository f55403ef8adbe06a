"""Ramps: values over a puff's life, keyed by age fraction (0 at birth, 1 at death).

A ramp from :mod:`splatter.look.records` is a tuple of ``(age, value)`` keys sorted by
age; colour ramps have ``(age, (r, g, b))`` keys.  Between keys the value is
linear; before the first key and after the last it is held flat.
"""

from __future__ import annotations

import numpy as np


def _keys(ramp, name: str, width: int):
    if len(ramp) == 0:
        raise ValueError(f"{name} must have at least one key")
    ages = np.array([float(k[0]) for k in ramp])
    values = np.array([k[1] for k in ramp], dtype=np.float64).reshape(len(ramp), width)
    if np.any(np.diff(ages) < 0):
        raise ValueError(f"{name} keys must be sorted by age, got {ages.tolist()}")
    return ages, values


def evaluate_ramp(ramp, x) -> np.ndarray:
    """Evaluate a scalar ramp.

    Parameters
    ----------
    ramp : tuple of (float, float)
        Keys ``(age, value)`` sorted by age.
    x : (n,) float64 array_like
        Age fractions (any real; outside the keys the end value is held).

    Returns
    -------
    (n,) float64 ndarray
    """
    ages, values = _keys(ramp, "ramp", 1)
    return np.interp(np.asarray(x, dtype=np.float64), ages, values[:, 0])


def evaluate_color_ramp(ramp, x) -> np.ndarray:
    """Evaluate a colour ramp channel by channel.

    Parameters
    ----------
    ramp : tuple of (float, (float, float, float))
        Keys ``(age, (r, g, b))`` sorted by age, linear light.
    x : (n,) float64 array_like
        Age fractions.

    Returns
    -------
    (n, 3) float64 ndarray
    """
    ages, values = _keys(ramp, "color ramp", 3)
    x = np.asarray(x, dtype=np.float64)
    out = np.empty((x.size, 3))
    for c in range(3):
        out[:, c] = np.interp(x, ages, values[:, c])
    return out
