"""Argument checks for the public Python functions, with one message style.

Every message reads ``name: expected ..., got ...``, the same shape as a
:class:`~splatter.core.errors.LookError` for look files. Checks raise
before any work is done.

Examples
--------
>>> check_choice("over", "blend", ("over", "add"))
'over'
>>> check_choice("ovr", "blend", ("over", "add"))
Traceback (most recent call last):
...
ValueError: blend: expected one of 'over', 'add', got 'ovr'
>>> check_int(0, "columns")
Traceback (most recent call last):
...
ValueError: columns: expected an integer >= 1, got 0
"""

from __future__ import annotations

import math
import numbers

import numpy as np

__all__ = ["fail", "check_choice", "check_int", "check_positive", "check_image"]


def fail(name: str, expected: str, got, *, kind=ValueError):
    """Raise ``kind("name: expected ..., got ...")``; ``got`` is shown with ``repr`` unless it is a str."""
    raise kind(f"{name}: expected {expected}, got {got if isinstance(got, str) else repr(got)}")



def check_choice(value, name: str, options):
    """``value`` if it is one of ``options``."""
    if isinstance(value, bool) or value not in options:
        fail(name, "one of " + ", ".join(repr(o) for o in options), repr(value))
    return value


def check_int(value, name: str, minimum: int = 1) -> int:
    """``value`` as an int if it is an integer >= ``minimum`` (bools refused)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        fail(name, f"an integer >= {minimum}", repr(value))
    return int(value)


def check_positive(value, name: str) -> float:
    """``value`` as a float if it is a finite number > 0."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not (math.isfinite(value) and value > 0):
        fail(name, "a number > 0", repr(value))
    return float(value)


def check_image(value, name: str, channels=4) -> np.ndarray:
    """A float ``(H, W, channels)`` array as float32 (no copy when it already is)."""
    a = np.asarray(value)
    if a.ndim != 3 or a.shape[2] != channels:
        fail(name, f"an (H, W, {channels}) array", f"shape {a.shape}")
    if not np.issubdtype(a.dtype, np.floating):
        fail(name, "a float array", str(a.dtype), kind=TypeError)
    return a.astype(np.float32, copy=False)
