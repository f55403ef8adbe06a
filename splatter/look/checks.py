"""Checkers for look values: each takes a raw TOML value and where it sits, and
returns the canonical value or raises :class:`~splatter.core.errors.LookError`.

The records in :mod:`splatter.look.records` name a checker beside each key's
default, so a key's type, range and default are written in one place.

Examples
--------
>>> ctx = Ctx(lambda keys: "chimney.toml", ("source", 0, "rate"))
>>> number(0.0, 100.0)(40, ctx)
40.0
>>> number(0.0, 100.0)(400, ctx)
Traceback (most recent call last):
...
splatter.core.errors.LookError: chimney.toml: source[0].rate: expected a number from 0.0 to 100.0, got integer 400
>>> value_range(0.0)([0.5, 1.5], ctx)
(0.5, 1.5)
"""

from __future__ import annotations

import difflib
import math
import re
from typing import Any, Callable, Tuple

from splatter.core.colorspace import hex_to_linear
from splatter.core.errors import LookError


def describe(value: Any) -> str:
    """Format an arrived value for a message: its TOML type and its text."""
    if isinstance(value, bool):
        return f"boolean {str(value).lower()}"
    if isinstance(value, int):
        return f"integer {value}"
    if isinstance(value, float):
        return f"float {value!r}"
    if isinstance(value, str):
        return f"string {value!r}"
    if isinstance(value, dict):
        return "a table" + (f" with keys {', '.join(map(str, value))}" if value else " (empty)")
    if isinstance(value, list):
        text = repr(value)
        return "array " + (text if len(text) < 60 else text[:57] + "...")
    return type(value).__name__


def key_text(keys: Tuple) -> str:
    """``("source", 1, "rate")`` -> ``"source[1].rate"``."""
    out = ""
    for k in keys:
        out += f"[{k}]" if isinstance(k, int) else (f".{k}" if out else str(k))
    return out


class Ctx:
    """Where a value sits: its key path and the file it came from."""

    def __init__(self, origin: Callable, keys: Tuple = ()):
        self.origin = origin
        self.keys = keys

    def child(self, key) -> "Ctx":
        return Ctx(self.origin, self.keys + (key,))

    def fail(self, expected: str, got: Any, *, raw: bool = False):
        raise LookError(self.origin(self.keys), key_text(self.keys), expected, got if raw else describe(got))


# ---------------------------------------------------------------- checkers


def number(lo=None, hi=None, *, lo_open=False, integer=False):
    """A finite number (or integer) within ``[lo, hi]`` (``(lo, hi]`` if ``lo_open``)."""

    def bounds() -> str:
        if lo is not None and hi is not None:
            return f" from {lo}{' (exclusive)' if lo_open else ''} to {hi}"
        if lo is not None:
            return f" {'>' if lo_open else '>='} {lo}"
        if hi is not None:
            return f" <= {hi}"
        return ""

    want = ("an integer" if integer else "a number") + bounds()

    def check(v, ctx):
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            ctx.fail(want, v)
        if integer and not isinstance(v, int):
            ctx.fail(want, v)
        if isinstance(v, float) and not math.isfinite(v):
            ctx.fail(want + " (finite)", v)
        if lo is not None and (v <= lo if lo_open else v < lo):
            ctx.fail(want, v)
        if hi is not None and v > hi:
            ctx.fail(want, v)
        return int(v) if integer else float(v)

    check.want = want
    return check


def boolean(v, ctx):
    if not isinstance(v, bool):
        ctx.fail("true or false", v)
    return v


def choice(*options):
    want = "one of " + ", ".join(f'"{o}"' for o in options)

    def check(v, ctx):
        if not isinstance(v, str) or v not in options:
            hint = ""
            if isinstance(v, str):
                close = difflib.get_close_matches(v, options, n=1)
                hint = f' (did you mean "{close[0]}"?)' if close else ""
            ctx.fail(want, describe(v) + hint, raw=True)
        return v

    return check


def vec3(*, nonzero=False):
    want = "an array of 3 finite numbers" + (", not all zero" if nonzero else "")

    def check(v, ctx):
        if not isinstance(v, list) or len(v) != 3:
            ctx.fail(want, v)
        out = tuple(number()(x, ctx.child(i)) for i, x in enumerate(v))
        if nonzero and not any(out):
            ctx.fail(want, v)
        return out

    return check


def value_range(lo=None, hi=None, *, lo_open=False):
    """A number, or ``[min, max]`` with min <= max, every value within bounds."""
    elem = number(lo, hi, lo_open=lo_open)
    want = f"{elem.want[2:]} or [min, max] of such numbers"

    def check(v, ctx):
        if isinstance(v, list):
            if len(v) != 2:
                ctx.fail("[min, max] (2 numbers), or " + elem.want, v)
            a, b = (elem(x, ctx.child(i)) for i, x in enumerate(v))
            if a > b:
                ctx.fail("[min, max] with min <= max", v)
            return (a, b)
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            x = elem(v, ctx)
            return (x, x)
        ctx.fail(want, v)

    return check


def _keys_of(v, ctx, value_check, what):
    """Parse an array of ``[age, value]`` keys, sorted by age."""
    want = f"{what}, or an array of [age, value] keys"
    if not isinstance(v, list) or not v:
        ctx.fail(want, v)
    keys = []
    for i, key in enumerate(v):
        kc = ctx.child(i)
        if not isinstance(key, list) or len(key) != 2:
            kc.fail("an [age, value] key", key)
        age = number()(key[0], kc.child(0))
        keys.append((age, value_check(key[1], kc.child(1))))
    ages = [k[0] for k in keys]
    if ages != sorted(ages):
        ctx.fail("keys in increasing order of age", [a for a in ages])
    return tuple(keys)


def ramp(lo=None, hi=None):
    """A number (constant) or an array of ``[age, value]`` keys."""
    elem = number(lo, hi)

    def check(v, ctx):
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            return ((0.0, elem(v, ctx)),)
        return _keys_of(v, ctx, elem, elem.want)

    return check


def color(v, ctx):
    """``"#rrggbb"`` (sRGB, decoded to linear) or ``[r, g, b]`` linear floats >= 0."""
    want = '"#rrggbb" (sRGB) or [r, g, b] linear numbers >= 0'
    if isinstance(v, str):
        rgb = hex_to_linear(v)
        if rgb is None:
            ctx.fail(want, v)
        return rgb
    if isinstance(v, list) and len(v) == 3 and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v):
        return tuple(number(0.0)(x, ctx.child(i)) for i, x in enumerate(v))
    ctx.fail(want, v)


def _is_colour(v) -> bool:
    return isinstance(v, str) or (isinstance(v, list) and len(v) == 3 and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v))


def color_ramp(v, ctx):
    if _is_colour(v):
        return ((0.0, color(v, ctx)),)
    return _keys_of(v, ctx, color, 'a colour ("#rrggbb" or [r, g, b])')


def text_or_number(word: str, lo=None, hi=None, *, lo_open=False, integer=False):
    """``word`` (returned as ``None``) or a number (an integer if ``integer``) within the bounds."""
    elem = number(lo, hi, lo_open=lo_open, integer=integer)

    def check(v, ctx):
        if v == word:
            return None
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            try:
                return elem(v, ctx)
            except LookError:
                pass  # say the whole choice, word included, whatever was wrong with the number
        ctx.fail(f'"{word}" or {elem.want}', v)

    return check


def list_of(*options):
    item = choice(*options)

    def check(v, ctx):
        if not isinstance(v, list):
            ctx.fail("an array of " + ", ".join(f'"{o}"' for o in options), v)
        out = tuple(item(x, ctx.child(i)) for i, x in enumerate(v))
        if len(set(out)) != len(out):
            ctx.fail("each entry at most once", v)
        return out

    return check


def name_text(v, ctx):
    if not isinstance(v, str) or not re.fullmatch(r"[a-z0-9_-]+", v):
        ctx.fail("a name of lower-case letters, digits, _ and - ([a-z0-9_-]+)", v)
    return v


def dir_text(v, ctx):
    if not isinstance(v, str) or not v:
        ctx.fail("a folder path (string)", v)
    stray = [p for p in re.findall(r"\{([^}]*)\}", v) if p not in ("name", "seed")]
    if stray or v.count("{") != v.count("}"):
        ctx.fail("a folder path whose only placeholders are {name} and {seed}", v)
    return v


def stem_text(v, ctx):
    """A file-name stem: letters, digits, ``_``, ``-`` and the placeholders ``{name}``, ``{seed}``.

    No dots (frame files are ``{stem}.0000.png``, so a dot would make them
    ambiguous) and no folder separators (the folder is ``output.dir``).
    """
    if not isinstance(v, str) or not re.fullmatch(r"(?:[A-Za-z0-9_-]|\{name\}|\{seed\})+", v):
        ctx.fail("a file-name stem of letters, digits, _ and - with the placeholders {name} and {seed}, "
                 'no dots or folders (for example "{name}_{seed}")', v)
    return v


def png_bits(v, ctx):
    if isinstance(v, bool) or v not in (8, 16):
        ctx.fail("8 or 16", v)
    return int(v)
