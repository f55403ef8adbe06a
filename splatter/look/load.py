"""Read a look file: TOML, ``base`` inheritance, ``--set`` overrides, validation.

This is the only module that reads TOML.  It works in two steps, so that a
message can always name where a value came from:

1. :func:`read_raw` merges the file with its ``base`` chain and the command
   line overrides into one plain dict, remembering for every key path the
   file (or ``--set``) that supplied it;
2. :func:`build_look` checks every value against the schema in
   :mod:`splatter.look.schema` and builds the frozen records of
   :mod:`splatter.look.records`.

Every problem raises :class:`~splatter.core.errors.LookError` naming the file, the
key path, what was expected and what arrived.
"""

from __future__ import annotations

import os
import re
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Dict, Iterable, List, Optional, Sequence, Tuple

from splatter.core.errors import LookError
from splatter.look.records import LookSpec
from splatter.look.schema import build_spec, describe

__all__ = ["load_look", "read_raw", "build_look", "parse_override", "RawLook"]

_MAX_BASE_DEPTH = 16


@dataclass
class RawLook:
    """A merged but unvalidated look.

    Attributes
    ----------
    data : dict
        The merged TOML tables.
    origins : dict
        Maps key-path tuples to the file (or ``"--set"``) that supplied them.
    path : Path
        The look file that was asked for.
    """

    data: Dict[str, Any]
    origins: Dict[Tuple, str]
    path: Path

    def origin(self, keys: Sequence) -> str:
        """The file that supplied ``keys`` (the longest known prefix)."""
        keys = tuple(keys)
        for n in range(len(keys), -1, -1):
            if keys[:n] in self.origins:
                return self.origins[keys[:n]]
        return str(self.path)


def _read_toml(path: Path, *, named_by: Optional[str] = None, key: str = "") -> Dict[str, Any]:
    try:
        text = path.read_bytes()
    except FileNotFoundError:
        raise LookError(named_by or path, key, "an existing look file", f"no file at {path}") from None
    except IsADirectoryError:
        raise LookError(named_by or path, key, "a look file", f"{path} is a folder") from None
    except OSError as err:
        raise LookError(named_by or path, key, "a readable look file", str(err)) from None
    try:
        return tomllib.loads(text.decode("utf-8"))
    except UnicodeDecodeError as err:
        raise LookError(path, "", "UTF-8 text (TOML 1.0)", f"undecodable bytes ({err.reason})") from None
    except tomllib.TOMLDecodeError as err:
        msg = str(err)
        match = re.search(r"line (\d+)", msg)
        line = int(match.group(1)) if match else None
        raise LookError(path, "", "valid TOML", f"a syntax error: {msg}", line=line) from None


def _note_origins(data: Any, prefix: Tuple, source: str, origins: Dict[Tuple, str]) -> None:
    origins[prefix] = source
    if isinstance(data, dict):
        for k, v in data.items():
            _note_origins(v, prefix + (k,), source, origins)
    elif isinstance(data, list):
        for i, v in enumerate(data):
            _note_origins(v, prefix + (i,), source, origins)


def _merge(base: Dict, top: Dict, prefix: Tuple, top_source: str, origins: Dict[Tuple, str]) -> Dict:
    """Tables merge key by key; everything else (arrays included) replaces."""
    out = dict(base)
    for k, v in top.items():
        key = prefix + (k,)
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v, key, top_source, origins)
        else:
            # Forget what the replaced value's children came from.
            for stale in [p for p in origins if p[: len(key)] == key]:
                del origins[stale]
            out[k] = v
            _note_origins(v, key, top_source, origins)
    return out


DICT_SOURCE = "<dict>"
"""How messages name a look given as a dict (where they would name the file)."""


def _load_chain(path: Path, seen: List[Path], origins: Dict[Tuple, str], data: Optional[Dict] = None) -> Dict:
    if data is None:
        data = _read_toml(path)
    base = data.pop("base", None)
    if base is None:
        _note_origins(data, (), str(path), origins)
        return data
    if not isinstance(base, str) or not base:
        raise LookError(path, "base", "a path to another look file (a string)", describe(base))
    # A dict's base is relative to the working folder (its "file" is not on disk).
    base_path = Path(os.path.normpath((Path.cwd() if str(path) == DICT_SOURCE else path.parent) / base))
    if base_path.resolve() in seen:
        chain = " -> ".join(str(p) for p in seen + [base_path.resolve()])
        raise LookError(path, "base", "a chain of looks without a cycle", f"a cycle: {chain}")
    if len(seen) >= _MAX_BASE_DEPTH:
        raise LookError(path, "base", f"at most {_MAX_BASE_DEPTH} levels of base looks", "more")
    if not base_path.is_file():
        raise LookError(path, "base", "an existing look file", f"no file at {base_path}")
    merged = _load_chain(base_path, seen + [base_path.resolve()], origins)
    return _merge(merged, data, (), str(path), origins)


def parse_override(text: str) -> Tuple[List[Any], Any]:
    """Split one ``KEY=VALUE`` override into a key path and a value.

    The key is a dotted path with integer parts indexing arrays of tables
    (``source.0.rate``); the value is parsed as a TOML value, and taken as a
    plain string when it is not one (so ``--set camera.projection=perspective``
    works without quotes).

    Returns
    -------
    keys : list of str or int
    value : object
    """
    if "=" not in text:
        raise LookError("--set", text, "KEY=VALUE, for example source.0.rate=80", repr(text))
    key, value_text = text.split("=", 1)
    key = key.strip()
    if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*(\.([A-Za-z_][A-Za-z0-9_]*|\d+))*", key):
        raise LookError("--set", key, "a dotted key path such as clip.frames or source.0.rate", repr(key))
    keys: List[Any] = [int(p) if p.isdigit() else p for p in key.split(".")]
    try:
        value = tomllib.loads(f"v = {value_text}")["v"]
    except tomllib.TOMLDecodeError:
        value = value_text.strip()
    return keys, value


def _apply_override(data: Dict, keys: List[Any], value: Any, origins: Dict[Tuple, str]) -> None:
    node: Any = data
    for depth, k in enumerate(keys[:-1]):
        nxt = keys[depth + 1]
        shown = ".".join(str(p) for p in keys[: depth + 1])
        if isinstance(k, int):
            if not isinstance(node, list):
                raise LookError("--set", shown, "a key name here (this is a table)", f"index {k}")
            if k == len(node):
                node.append({})  # --set source.1.rate=5 adds a second source
            if not 0 <= k < len(node):
                raise LookError("--set", shown, f"an index from 0 to {len(node)}", str(k))
            node = node[k]
        else:
            if not isinstance(node, dict):
                raise LookError("--set", shown, "an index here (this is an array)", repr(k))
            if k not in node:
                node[k] = [] if isinstance(nxt, int) else {}
                origins[tuple(keys[: depth + 1])] = "--set"  # a table --set made: its errors blame --set
            node = node[k]
    last = keys[-1]
    shown = ".".join(map(str, keys))
    if isinstance(last, int):
        # --set 'force.2={kind="drag", rate=1}' replaces (or appends) a whole table.
        if not isinstance(node, list) or not isinstance(value, dict):
            raise LookError("--set", shown, "a key name, or a {...} table for an array index", describe(value))
        if not 0 <= last <= len(node):
            raise LookError("--set", shown, f"an index from 0 to {len(node)}", str(last))
        if last == len(node):
            node.append(value)
        else:
            node[last] = value
    elif not isinstance(node, dict):
        raise LookError("--set", shown, "an index here (this is an array)", repr(last))
    else:
        node[last] = value
    _note_origins(value, tuple(keys), "--set", origins)


def read_raw(path, overrides: Iterable[str] = ()) -> RawLook:
    """Read ``path`` and its ``base`` chain and apply ``--set`` overrides.

    Parameters
    ----------
    path : str, Path or dict
        The look file, or the look's tables as a dict (a ``base`` in it is
        relative to the working folder).
    overrides : iterable of str
        ``KEY=VALUE`` strings, applied in order after inheritance.

    Returns
    -------
    RawLook
    """
    origins: Dict[Tuple, str] = {}
    if isinstance(path, dict):
        data = _plain_tables(path)
        path = Path(DICT_SOURCE)
        data = _load_chain(path, [], origins, data)
    else:
        path = Path(path)
        data = _load_chain(path, [path.resolve()], origins)
    for text in overrides:
        keys, value = parse_override(text)
        _apply_override(data, keys, value, origins)
    return RawLook(data=data, origins=origins, path=path)


def _plain_tables(data: Dict) -> Dict:
    """A deep copy of a look dict with tuples as lists (TOML arrays), so the caller's dict is never changed."""
    if isinstance(data, dict):
        return {k: _plain_tables(v) for k, v in data.items()}
    if isinstance(data, (list, tuple)):
        return [_plain_tables(v) for v in data]
    return data


def build_look(raw: RawLook) -> LookSpec:
    """Validate a :class:`RawLook` and build its :class:`~splatter.look.records.LookSpec`."""
    default_name = "look" if str(raw.path) == DICT_SOURCE else raw.path.stem
    return build_spec(raw.data, raw.origin, default_name=default_name, path=str(raw.path))


def load_look(path, *, overrides: Iterable[str] = (), seed: Optional[int] = None) -> LookSpec:
    """Load, merge, override and validate a look file.

    Parameters
    ----------
    path : str, Path or dict
        The look file (TOML 1.0), or the same tables as a dict (checked the
        same way; messages name ``<dict>`` where they would name the file; a
        look without ``name`` is called ``look``).
    overrides : iterable of str
        ``KEY=VALUE`` overrides (the command line's ``--set``).
    seed : int, optional
        Replaces the look's ``seed`` (the command line's ``--seed``).

    Returns
    -------
    LookSpec

    Raises
    ------
    LookError
        For any bad input, naming the file and the key.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "harbour_mist.toml"
    >>> _ = path.write_text('seed = 4\\n[clip]\\nframes = 12\\n[[source]]\\nrate = 30\\n')
    >>> look = load_look(path, overrides=["source.0.rate=45"])
    >>> look.name, look.seed, look.clip.frames, look.sources[0].rate
    ('harbour_mist', 4, 12, 45.0)
    >>> load_look(path, overrides=["clip.frames=0"])
    Traceback (most recent call last):
    ...
    splatter.core.errors.LookError: --set: clip.frames: expected an integer from 1 to 10000, got integer 0
    >>> load_look({"name": "quay_mist", "clip": {"frames": 12}}).clip.frames
    12
    >>> load_look({"clip": {"frames": "many"}})
    Traceback (most recent call last):
    ...
    splatter.core.errors.LookError: <dict>: clip.frames: expected an integer from 1 to 10000, got string 'many'
    """
    look = build_look(read_raw(path, list(overrides)))
    if seed is None:
        return look
    if isinstance(seed, bool) or int(seed) != seed or not 0 <= seed <= 2**63 - 1:
        raise LookError("--seed", "", f"an integer from 0 to {2**63 - 1}", str(seed))
    return replace(look, seed=int(seed))


