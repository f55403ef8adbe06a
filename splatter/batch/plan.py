"""What a batch renders: seeds and sweeps crossed into variations, each checked up front.

A batch is one look, a list of seeds and a sweep (look keys with lists of
values). The sweep's keys are crossed as a grid, or paired value by value
with ``zip``; every seed is crossed with every combination. Each variation
is the look with ``--set`` overrides; its folder is named after its seed and
its varied values.

Examples
--------
>>> parse_seeds("3:6"), parse_seeds("1,5,9"), parse_seeds("7")
([3, 4, 5], [1, 5, 9], [7])
>>> parse_sweep("source.0.rate=40,80")
('source.0.rate', ['40', '80'])
>>> parse_sweep("shading.exposure=-1:1:5")
('shading.exposure', ['-1.0', '-0.5', '0.0', '0.5', '1.0'])
>>> parse_sweep("clip.frames=16:64:4")
('clip.frames', ['16', '32', '48', '64'])
>>> parse_sweep("shading.light.color=[1,0.5,0],[0,0.5,1]")
('shading.light.color', ['[1,0.5,0]', '[0,0.5,1]'])
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Dict, List, Optional, Sequence, Tuple

from splatter.core.errors import LookError
from splatter.look.load import build_look, parse_override, read_raw
from splatter.look.records import LookSpec

__all__ = ["Variation", "Batch", "parse_seeds", "parse_sweep", "toml_value", "read_batch_file", "is_batch_file",
           "plan_batch", "MAX_VARIATIONS"]

MAX_VARIATIONS = 10_000
"""Most variations one batch may hold (a typo in a range should not queue a million renders)."""

DEFAULT_OUT = "renders/{name}-vary"


@dataclass(frozen=True)
class Variation:
    """One variation of the batch.

    Attributes
    ----------
    name : str
        Its folder's name under the batch's output folder, from the seed and
        the varied values (``seed3_source.0.rate-80``).
    seed : int
    varied : dict of str to str
        The swept keys and their values (TOML text), in sweep order.
    sets : tuple of str
        Every ``KEY=VALUE`` override it renders with: the batch's own, then
        the varied ones.
    digest : str
        SHA-256 of the merged look it renders (base chain, overrides and seed
        applied) and the splatter version: a changed look file or override
        changes it, so a re-run renders it again.
    look : LookSpec
        The validated look.
    """

    name: str
    seed: int
    varied: Dict[str, str]
    sets: Tuple[str, ...]
    digest: str
    look: LookSpec = field(repr=False, compare=False)

    def label(self) -> List[str]:
        """Lines telling this variation apart: the seed, then each varied value."""
        return [f"seed {self.seed}"] + [f"{k} {v}" for k, v in self.varied.items()]


@dataclass
class Batch:
    """A planned batch: the look, the output folder and its variations, all checked."""

    look: Any  # the look file's path (str) or the look as a dict
    name: str
    out: str
    seeds: List[int]
    sweep: Dict[str, List[str]]
    zip: bool
    sets: List[str]
    variations: List[Variation]


def parse_seeds(text, *, where: str = "--seeds") -> List[int]:
    """Seeds from ``A:B`` (A to B-1), ``A,B,C`` or one number; a list of ints passes through."""
    if isinstance(text, bool):
        raise LookError(where, "", "seeds as A:B, A,B,C or a list of integers >= 0", repr(text))
    if isinstance(text, int):
        seeds = [text]
    elif isinstance(text, list):
        if not all(isinstance(s, int) and not isinstance(s, bool) for s in text):
            raise LookError(where, "", "a list of integers >= 0", repr(text))
        seeds = list(text)
    else:
        text = str(text).strip()
        try:
            parts = [int(p) for p in text.split(":" if ":" in text else ",")]
        except ValueError:
            raise LookError(where, "", "seeds as A:B (A to B-1), A,B,C or one integer", repr(text)) from None
        if ":" in text:
            if len(parts) != 2 or parts[1] <= parts[0]:
                raise LookError(where, "", "A:B with A < B (seeds A to B-1)", repr(text))
            parts = list(range(parts[0], parts[1]))
        seeds = parts
    if not seeds or any(s < 0 for s in seeds):
        raise LookError(where, "", "integers >= 0", repr(text))
    if len(set(seeds)) != len(seeds):
        raise LookError(where, "", "each seed once", repr(text))
    return seeds


def _split_values(text: str) -> List[str]:
    """Split ``V1,V2,...`` at the commas outside brackets, braces and quotes."""
    parts, depth, quote, cur = [], 0, None, []
    for ch in text:
        if quote:
            quote = None if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
        elif ch == "," and depth == 0:
            parts.append("".join(cur).strip())
            cur = []
            continue
        cur.append(ch)
    parts.append("".join(cur).strip())
    return parts


_INT = re.compile(r"^\s*[-+]?\d+\s*$")
_RANGE = re.compile(r"^\s*([-+]?[0-9.eE+-]+)\s*:\s*([-+]?[0-9.eE+-]+)\s*:\s*(\d+)\s*$")


def _spaced(lo: float, hi: float, count: int, *, where: str, key: str) -> List[str]:
    """``count`` evenly spaced numbers from ``lo`` to ``hi`` (both ends included) as TOML text."""
    if not 2 <= count <= MAX_VARIATIONS:
        raise LookError(where, key, f"LO:HI:COUNT with COUNT from 2 to {MAX_VARIATIONS}", str(count))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise LookError(where, key, "finite LO and HI", f"{lo}:{hi}")
    # lo + i * step, exact at both ends (no accumulated rounding).
    return [repr(float(lo + (hi - lo) * i / (count - 1))) if i < count - 1 else repr(float(hi))
            for i in range(count)]


def parse_sweep(text: str, *, where: str = "--sweep") -> Tuple[str, List[str]]:
    """``KEY=V1,V2,...`` or ``KEY=LO:HI:COUNT`` into the key and its values as TOML text."""
    if "=" not in text:
        raise LookError(where, text, "KEY=V1,V2,... or KEY=LO:HI:COUNT, for example source.0.rate=40,80",
                        repr(text))
    key, values = text.split("=", 1)
    key = key.strip()
    m = _RANGE.match(values)
    if m:
        try:
            lo, hi = float(m.group(1)), float(m.group(2))
        except ValueError:
            raise LookError(where, key, "LO:HI:COUNT with numbers LO and HI", repr(values)) from None
        out = _spaced(lo, hi, int(m.group(3)), where=where, key=key)
        if _INT.match(m.group(1)) and _INT.match(m.group(2)) and all(float(v).is_integer() for v in out):
            out = [str(int(float(v))) for v in out]  # whole numbers between whole ends stay integers (clip.frames)
    else:
        out = _split_values(values)
    if not out or any(v == "" for v in out):
        raise LookError(where, key, "a comma-separated list of values, none empty", repr(values))
    for v in out:
        parse_override(f"{key}={v}")  # the key's shape, checked here (its value with the look, later)
    return key, out


def toml_value(value) -> str:
    """A Python value (from a TOML file) as TOML text for an override.

    >>> toml_value([1, 0.5, "x"]), toml_value({"kind": "drag", "rate": 1}), toml_value(True)
    ('[1, 0.5, "x"]', '{ kind = "drag", rate = 1 }', 'true')
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # a JSON string is a TOML basic string for these characters
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"no TOML text for {value!r}")


def _flatten_sweep(table: Dict, prefix: str, out: Dict[str, Any]) -> None:
    # [sweep] source.0.rate = [...] arrives as nested tables; their dotted path is the key.
    for k, v in table.items():
        key = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, dict):
            _flatten_sweep(v, key, out)
        else:
            out[key] = v


_BATCH_KEYS = ("look", "seeds", "sweep", "zip", "out", "set")


def is_batch_file(path) -> bool:
    """True when ``path`` is a TOML file with a top-level ``look`` string (a look file never has one)."""
    try:
        with open(path, "rb") as f:
            data = tomllib.load(f)
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return False
    return isinstance(data.get("look"), str)


def read_batch_file(path) -> Dict[str, Any]:
    """Read a batch file into the keyword arguments of :func:`plan_batch`.

    The file's keys: ``look`` (path relative to the batch file), ``seeds``
    (``"A:B"``, a list, or one integer), ``[sweep]`` (key to a list of values
    or a ``"LO:HI:COUNT"`` string), ``zip`` (bool), ``out`` (output folder,
    relative to the working folder like ``--out``) and ``set`` (a list of
    ``KEY=VALUE`` overrides).
    """
    path = Path(path)
    with open(path, "rb") as f:
        try:
            data = tomllib.load(f)
        except tomllib.TOMLDecodeError as err:
            raise LookError(path, "", "valid TOML", f"a syntax error: {err}") from None
    for k in data:
        if k not in _BATCH_KEYS:
            raise LookError(path, k, "a batch key (" + ", ".join(_BATCH_KEYS) + ")", repr(k))
    kwargs: Dict[str, Any] = {"look": str(Path(os.path.normpath(path.parent / data["look"])))}
    if "seeds" in data:
        kwargs["seeds"] = parse_seeds(data["seeds"], where=f"{path}: seeds")
    sweep: Dict[str, List[str]] = {}
    if "sweep" in data:
        if not isinstance(data["sweep"], dict):
            raise LookError(path, "sweep", "a table of look keys to lists of values", repr(data["sweep"]))
        flat: Dict[str, Any] = {}
        _flatten_sweep(data["sweep"], "", flat)
        for key, values in flat.items():
            if isinstance(values, str) and _RANGE.match(values):
                sweep.update([parse_sweep(f"{key}={values}", where=str(path))])
            elif isinstance(values, list) and values:
                sweep[key] = [toml_value(v) for v in values]
            else:
                raise LookError(path, f"sweep.{key}", "a non-empty list of values or \"LO:HI:COUNT\"",
                                repr(values))
    kwargs["sweep"] = sweep
    if "zip" in data:
        if not isinstance(data["zip"], bool):
            raise LookError(path, "zip", "true or false", repr(data["zip"]))
        kwargs["zip"] = data["zip"]
    if "out" in data:
        if not isinstance(data["out"], str) or not data["out"]:
            raise LookError(path, "out", "a folder path", repr(data["out"]))
        kwargs["out"] = data["out"]
    if "set" in data:
        sets = data["set"]
        if not isinstance(sets, list) or not all(isinstance(s, str) for s in sets):
            raise LookError(path, "set", "a list of \"KEY=VALUE\" strings", repr(sets))
        kwargs["sets"] = list(sets)
    return kwargs


def _folder_value(text: str) -> str:
    """A value as a folder-name part: runs of other characters become "-"; a minus sign stays."""
    part = re.sub(r"[^A-Za-z0-9.+-]+", "-", text).rstrip("-")
    return (part if text.startswith("-") else part.lstrip("-")) or "x"


def _digest(raw_data: Dict) -> str:
    from splatter import __version__

    blob = json.dumps({"look": raw_data, "splatter": __version__}, sort_keys=True, default=repr)
    return hashlib.sha256(blob.encode("utf-8")).hexdigest()


def _combinations(sweep: Dict[str, List[str]], zipped: bool) -> List[Dict[str, str]]:
    keys = list(sweep)
    if not keys:
        return [{}]
    if zipped:
        lengths = {k: len(v) for k, v in sweep.items()}
        if len(set(lengths.values())) > 1:
            shown = ", ".join(f"{k} has {n}" for k, n in lengths.items())
            raise LookError("--zip", "", "sweeps of equal length to pair value by value", shown)
        return [dict(zip(keys, vals)) for vals in zip(*(sweep[k] for k in keys))]
    return [dict(zip(keys, vals)) for vals in itertools.product(*(sweep[k] for k in keys))]


def plan_batch(look, *, seeds: Optional[Sequence[int]] = None, sweep: Optional[Dict[str, List[str]]] = None,
               zip: bool = False, sets: Sequence[str] = (), out: Optional[str] = None) -> Batch:
    """Every variation of the batch, each look loaded and validated; nothing is written.

    Parameters
    ----------
    look : str, os.PathLike or dict
        The look file, or a look as a dict.
    seeds : sequence of int, optional
        Default: the look's own seed.
    sweep : dict of str to list of str, optional
        Look key (dotted, as ``--set``) to its values as TOML text.
    zip : bool
        Pair the sweep's values by position instead of crossing them.
    sets : sequence of str
        ``KEY=VALUE`` overrides every variation shares.
    out : str, optional
        The batch folder (``{name}`` filled in); default ``renders/{name}-vary``.

    Returns
    -------
    Batch

    Raises
    ------
    LookError
        For any bad input; a bad variation's message starts with
        ``variation NAME:`` and names the key.
    """
    sweep = dict(sweep or {})
    sets = list(sets)
    base = build_look(read_raw(look, sets))  # the batch's own overrides, checked once
    if seeds is None:
        seeds = [base.seed]
    combos = _combinations(sweep, zip)
    total = len(seeds) * len(combos)
    if total > MAX_VARIATIONS:
        raise LookError("vary", "", f"at most {MAX_VARIATIONS} variations", str(total))
    template = out if out is not None else DEFAULT_OUT
    try:
        out_dir = template.format(name=base.name, seed=base.seed)
    except (KeyError, IndexError, ValueError):
        raise LookError("--out", "", "a folder path whose only placeholder is {name}", repr(template)) from None
    variations: List[Variation] = []
    used: Dict[str, int] = {}
    for seed in seeds:
        for combo in combos:
            name = "_".join([f"seed{seed}"] + [f"{k}-{_folder_value(v)}" for k, v in combo.items()])
            if name in used:  # two values that read the same in a folder name
                used[name] += 1
                name = f"{name}-{used[name]}"
            else:
                used[name] = 1
            var_sets = tuple(sets) + tuple(f"{k}={v}" for k, v in combo.items()) + (f"seed={seed}",)
            try:
                raw = read_raw(look, var_sets)
                spec = build_look(raw)
            except LookError as err:
                raise LookError(f"variation {name}: {err.file}", err.key, err.expected, err.got, err.line) from None
            variations.append(Variation(name=name, seed=seed, varied=dict(combo), sets=var_sets,
                                        digest=_digest(raw.data), look=spec))
    look_ref = look if isinstance(look, dict) else str(look)
    return Batch(look=look_ref, name=base.name, out=out_dir, seeds=list(seeds), sweep=sweep, zip=zip, sets=sets,
                 variations=variations)

