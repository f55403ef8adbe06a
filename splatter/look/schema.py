"""The look file's schema: walk the records' fields to validate TOML and build records.

Every key's checker and default sit beside each other in
:mod:`splatter.look.records`; this module only walks them: sub-tables,
arrays of tables, tables picked by ``kind``, unknown keys (with a "did you
mean" hint), and the checks that need more than one key.

Examples
--------
>>> spec = build_spec({"clip": {"frames": 8}, "source": [{"rate": 20}]}, lambda keys: "quay.toml",
...                   default_name="Quay Vent", path=None)
>>> spec.name, spec.clip.frames, spec.sources[0].rate
('quay-vent', 8, 20.0)
>>> build_spec({"clip": {"frmaes": 8}}, lambda keys: "quay.toml", default_name="q", path=None)
Traceback (most recent call last):
...
splatter.core.errors.LookError: quay.toml: clip.frmaes: expected one of the keys crossfade, fps, frames, integrator, loop, substeps, warmup, got unknown key "frmaes" (did you mean "frames"?)
"""

from __future__ import annotations

import difflib
import math
import re
import warnings
from dataclasses import fields
from typing import Any, Callable, Dict, Optional

from splatter.core.errors import LookWarning
from splatter.core.sheet_grid import sheet_layout
from splatter.look import records as L
from splatter.look.checks import Ctx, choice, describe, key_text
from splatter.look.records import MAX_LIVE_PUFFS, MAX_SHEET

__all__ = ["build_spec", "describe", "key_text", "look_keys"]


def look_keys(record) -> Dict[str, Any]:
    """The look keys of a record class: TOML key -> dataclass field (fields without a key are left out)."""
    out = {}
    for f in fields(record):
        if "check" in f.metadata or "table" in f.metadata:
            out[f.name] = f
        elif "toml" in f.metadata:
            out[f.metadata["toml"]] = f
    return out


def _unknown(ctx: Ctx, key: str, known) -> None:
    close = difflib.get_close_matches(key, list(known), n=1, cutoff=0.6)
    hint = f' (did you mean "{close[0]}"?)' if close else ""
    ctx.child(key).fail("one of the keys " + ", ".join(sorted(known)), f'unknown key "{key}"{hint}', raw=True)


def _value(f, v, ctx: Ctx):
    """Check one key's value by what its field says it holds."""
    meta = f.metadata
    if "check" in meta:
        return meta["check"](v, ctx)
    if "table" in meta:
        if meta.get("optional"):
            if v is False:
                return None
            if not isinstance(v, dict):
                ctx.fail("a table, or false to switch it off", v)
        return _record(v, ctx, meta["table"])
    if meta.get("kinds"):
        return _array_of_tables(v, ctx, lambda x, c: _kind_table(x, c, meta["kinds"]))
    return _array_of_tables(v, ctx, lambda x, c: _record(x, c, meta["record"]))


def _record(v, ctx: Ctx, record, *, skip=()):
    """Check a TOML table against ``record``'s keys and build it."""
    if not isinstance(v, dict):
        ctx.fail("a table", v)
    keys = look_keys(record)
    kwargs = {}
    for k, value in v.items():
        if k in skip:
            continue
        if k not in keys:
            _unknown(ctx, k, list(keys) + list(skip))
        kwargs[keys[k].name] = _value(keys[k], value, ctx.child(k))
    missing = [k for k in getattr(record, "required", ()) if k not in v]
    if missing:
        ctx.fail("a table with " + " and ".join(getattr(record, "required")), v)
    return record(**kwargs)


def _kind_table(v, ctx: Ctx, kinds: Dict[str, type]):
    if not isinstance(v, dict):
        ctx.fail("a table with a kind", v)
    if "kind" not in v:
        ctx.child("kind").fail("one of " + ", ".join(f'"{k}"' for k in kinds), "nothing (kind is required)", raw=True)
    kind = choice(*kinds)(v["kind"], ctx.child("kind"))
    return _record(v, ctx, kinds[kind], skip=("kind",))


def _array_of_tables(v, ctx: Ctx, each):
    if isinstance(v, dict):
        v = [v]  # a single [source] table is taken as one source
    if not isinstance(v, list):
        ctx.fail("an array of tables ([[...]])", v)
    return tuple(each(item, ctx.child(i)) for i, item in enumerate(v))


def build_spec(data: Dict[str, Any], origin: Callable, *, default_name: str, path: Optional[str]) -> L.LookSpec:
    """Check merged look data and build a :class:`~splatter.look.records.LookSpec`.

    Parameters
    ----------
    data : dict
        Merged TOML tables (``base`` already resolved).
    origin : callable
        Maps a key-path tuple to the file that supplied it.
    default_name : str
        The file stem, used when the look has no ``name``.
    path : str or None
        The look file, kept on the record for later messages.

    Returns
    -------
    LookSpec

    Raises
    ------
    LookError
        Naming the file, the key path, what was expected and what arrived.
    """
    ctx = Ctx(origin)
    if not isinstance(data, dict):
        ctx.fail("a TOML document", data)
    keys = look_keys(L.LookSpec)
    kwargs: Dict[str, Any] = {}
    for k, value in data.items():
        if k not in keys:
            close = difflib.get_close_matches(k, list(keys) + ["base"], n=1, cutoff=0.6)
            hint = f' (did you mean "{close[0]}"?)' if close else ""
            ctx.child(k).fail(
                "one of the top-level keys " + ", ".join(sorted(list(keys) + ["base"])),
                f'unknown key "{k}"{hint}',
                raw=True,
            )
        kwargs[keys[k].name] = _value(keys[k], value, ctx.child(k))
    if "name" not in kwargs:
        kwargs["name"] = re.sub(r"[^a-z0-9_-]+", "-", default_name.lower()).strip("-") or "look"
    spec = L.LookSpec(path=path, **kwargs)
    _cross_checks(spec, ctx)
    return spec


def _warn_inherited_grid(spec: L.LookSpec, ctx: Ctx, lay) -> None:
    """Warn when a sheet grid pieced together from several files (or ``--set``) leaves cells empty.

    A derived look's ``sheet = { columns = 4 }`` keeps the base's ``rows = 8``
    (tables merge key by key), and a ``clip.frames`` set elsewhere may no
    longer fill the grid; one file that asks for empty cells means it.
    """
    empty = lay.columns * lay.rows - lay.frames
    sheet = spec.output.sheet
    if empty <= 0 or sheet.columns is None or sheet.rows is None:
        return
    keys = {"output.sheet.columns": ("output", "sheet", "columns"), "output.sheet.rows": ("output", "sheet", "rows"),
            "clip.frames": ("clip", "frames")}
    where = {name: ctx.origin(k) for name, k in keys.items()}
    if len(set(where.values())) == 1:
        return
    said = ", ".join(f"{name} = {value} from {where[name]}" for name, value in (
        ("output.sheet.columns", sheet.columns), ("output.sheet.rows", sheet.rows), ("clip.frames", spec.clip.frames)))
    warnings.warn(f"output.sheet: the grid is pieced together ({said}): {lay.columns} x {lay.rows} cells for "
                  f"{lay.frames} frames leaves {empty} cells empty. Set both columns and rows where clip.frames "
                  "is set, or only columns (rows then follow the frames).", LookWarning, stacklevel=2)


def _cross_checks(spec: L.LookSpec, ctx: Ctx) -> None:
    """Checks that need more than one key."""
    if not spec.sources:
        ctx.child("source").fail("at least one [[source]]", "an empty array", raw=True)
    cam = spec.camera
    view = [t - e for t, e in zip(cam.target, cam.eye)]
    if not any(view):
        ctx.child("camera").child("target").fail("a target different from camera.eye", list(cam.target))
    cross = (
        view[1] * cam.up[2] - view[2] * cam.up[1],
        view[2] * cam.up[0] - view[0] * cam.up[2],
        view[0] * cam.up[1] - view[1] * cam.up[0],
    )
    norm = math.sqrt(sum(c * c for c in cross)) / (math.sqrt(sum(v * v for v in view)) * math.sqrt(sum(u * u for u in cam.up)))
    if norm < 1e-6:
        ctx.child("camera").child("up").fail("an up vector not parallel to the view direction", list(cam.up))
    for i, src in enumerate(spec.sources):
        sctx = ctx.child("source").child(i)
        if src.stop is not None and src.stop <= src.start:
            sctx.child("stop").fail(f'"never" or a time after start ({src.start} s)', src.stop)
        if src.rate == 0 and not src.bursts:
            sctx.child("rate").fail("a rate > 0, or bursts (this source would emit nothing)", src.rate)
        live = src.rate * src.life[1] + sum(b.count for b in src.bursts)
        if live > MAX_LIVE_PUFFS:
            sctx.child("rate").fail(
                f"at most {MAX_LIVE_PUFFS:,} puffs alive at once (rate x longest life + bursts)", f"{live:,.0f}", raw=True
            )
    flows = [i for i, f in enumerate(spec.forces) if f.kind == "convection"]
    if len(flows) > 1:
        ctx.child("force").child(flows[1]).child("kind").fail(
            'at most one force of kind "convection" (the puffs share one flow)', "convection")
    sheet = spec.output.sheet
    if sheet is not None:
        n = spec.clip.frames
        octx = ctx.child("output").child("sheet")
        if sheet.columns and sheet.rows and sheet.columns * sheet.rows < n:
            octx.child("rows").fail(f"columns x rows >= clip.frames ({n})", f"{sheet.columns} x {sheet.rows}", raw=True)
        if sheet.cell and sheet.cell <= 2 * sheet.padding:
            octx.child("cell").fail(f"a cell wider than twice the padding ({2 * sheet.padding} px)", sheet.cell)
        for flag in ("columns", "rows"):
            v = getattr(sheet, flag)
            if sheet.pow2 and v is not None and v & (v - 1):
                octx.child(flag).fail("a power of two (1, 2, 4, 8 ...) with pow2 = true, so cells are whole pixels",
                                      v)
        try:
            lay = sheet_layout(n, spec.image.width, spec.image.height, columns=sheet.columns, rows=sheet.rows,
                               padding=sheet.padding, pow2=sheet.pow2, cell=sheet.cell)
        except ValueError as err:
            octx.fail("a sheet layout that holds every frame", str(err), raw=True)
        if max(lay.width, lay.height) > MAX_SHEET:
            octx.fail(f"a sheet at most {MAX_SHEET} px on a side", f"{lay.width} x {lay.height} px", raw=True)
        _warn_inherited_grid(spec, ctx, lay)
    if not spec.output.frames and spec.output.sheet is None and not spec.output.preview:
        ctx.child("output").child("frames").fail("something to write: frames, a sheet or a preview", [], raw=False)
