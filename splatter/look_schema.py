"""The look file's schema: every key, what it accepts, and how it becomes a record.

Each table is described by a dict of *checkers*; a checker takes the raw TOML
value and a :class:`_Ctx` (which knows the key path and the file that
supplied it) and returns the canonical value or raises
:class:`~splatter.errors.LookError`.  Defaults come from the dataclasses in
:mod:`splatter.look`, so they are written down only once.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import fields
from typing import Any, Callable, Dict, Optional, Tuple

from splatter import look as L
from splatter.colorspace import hex_to_linear
from splatter.errors import LookError

MAX_IMAGE = 8192
MIN_IMAGE = 8
MAX_FRAMES = 10000
MAX_SHEET = 16384
MAX_LIVE_PUFFS = 2_000_000


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


class _Ctx:
    """Where a value sits: its key path and the file it came from."""

    def __init__(self, origin: Callable, keys: Tuple = ()):
        self.origin = origin
        self.keys = keys

    def child(self, key) -> "_Ctx":
        return _Ctx(self.origin, self.keys + (key,))

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


def text_or_number(word: str, lo=None, *, lo_open=False):
    """``word`` (returned as ``None``) or a number."""
    elem = number(lo, lo_open=lo_open)

    def check(v, ctx):
        if v == word:
            return None
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            return elem(v, ctx)
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


# ---------------------------------------------------------------- tables


def _check_table(v, ctx, spec_cls, checkers: Dict[str, Callable], *, skip=()):
    """Check a TOML table against ``checkers`` and build ``spec_cls``."""
    if not isinstance(v, dict):
        ctx.fail("a table", v)
    known = list(checkers) + list(skip)
    kwargs = {}
    for key, value in v.items():
        if key in skip:
            continue
        if key not in checkers:
            close = difflib.get_close_matches(key, known, n=1, cutoff=0.6)
            hint = f' (did you mean "{close[0]}"?)' if close else ""
            ctx.child(key).fail(
                "one of the keys " + ", ".join(sorted(known)), f'unknown key "{key}"{hint}', raw=True
            )
        kwargs[key] = checkers[key](value, ctx.child(key))
    names = {f.name for f in fields(spec_cls)}
    return spec_cls(**{k: v for k, v in kwargs.items() if k in names})


def _bursts(v, ctx):
    if not isinstance(v, list):
        ctx.fail("an array of { time = seconds, count = n } tables", v)
    out = []
    for i, b in enumerate(v):
        c = ctx.child(i)
        out.append(
            _check_table(b, c, L.BurstSpec, {"time": number(0.0), "count": number(0, 1_000_000, integer=True)})
        )
        if "time" not in b or "count" not in b:
            c.fail("a burst with both time and count", b)
    return tuple(out)


_CLIP = {
    "frames": number(1, MAX_FRAMES, integer=True),
    "fps": number(0.0, 240.0, lo_open=True),
    "substeps": number(1, 64, integer=True),
    "integrator": choice(*L.INTEGRATORS),
    "warmup": text_or_number("auto", 0.0),
    "loop": choice(*L.LOOP_MODES),
    "crossfade": number(0.0, 0.5, lo_open=True),
}
_IMAGE = {"width": number(MIN_IMAGE, MAX_IMAGE, integer=True), "height": number(MIN_IMAGE, MAX_IMAGE, integer=True)}
_CAMERA = {
    "projection": choice(*L.PROJECTIONS),
    "eye": vec3(),
    "target": vec3(),
    "up": vec3(nonzero=True),
    "view_width": number(0.0, 1e6, lo_open=True),
    "fov": number(0.0, 170.0, lo_open=True),
    "fit": boolean,
    "margin": number(0.0, 0.45),
}
_SOURCE = {
    "shape": choice(*L.SHAPES),
    "center": vec3(),
    "radius": number(0.0),
    "extent": vec3(),
    "normal": vec3(nonzero=True),
    "rate": number(0.0, 100_000.0),
    "bursts": _bursts,
    "start": number(0.0),
    "stop": text_or_number("never", 0.0),
    "direction": vec3(nonzero=True),
    "speed": value_range(0.0),
    "spread": number(0.0, 180.0),
    "life": value_range(0.0, 1e4, lo_open=True),
    "size": value_range(0.0, 1e4, lo_open=True),
    "grow": ramp(0.0, 1e4),
    "opacity": ramp(0.0, 1.0),
    "fade": number(0.0),
    "color": color_ramp,
    "glow": color_ramp,
    "aspect": value_range(0.0, 1.0, lo_open=True),
    "stretch": number(0.0, 100.0),
    "density": number(0.0, 1e4),
}
_FORCES = {
    "gravity": (L.GravitySpec, {"accel": vec3()}),
    "wind": (
        L.WindSpec,
        {"velocity": vec3(), "gust": number(0.0, 1.0), "gust_period": number(0.0, 1e4, lo_open=True), "grip": number(0.0, 1e3)},
    ),
    "drag": (L.DragSpec, {"rate": number(0.0, 1e3)}),
    "lift": (L.LiftSpec, {"accel": number(-1e3, 1e3), "cooling": number(0.0, 1e3), "direction": vec3(nonzero=True)}),
    "swirl": (
        L.SwirlSpec,
        {
            "strength": number(0.0, 1e3),
            "scale": number(0.0, 1e6, lo_open=True),
            "octaves": number(1, 6, integer=True),
            "evolve": number(0.0, 1e6, lo_open=True),
        },
    ),
    "vortex": (
        L.VortexSpec,
        {"center": vec3(), "axis": vec3(nonzero=True), "strength": number(-1e3, 1e3), "radius": number(0.0, 1e6, lo_open=True)},
    ),
}
_CONTACT = {"bounce": number(0.0, 1.0), "friction": number(0.0, 1.0), "kill": boolean}
_OBSTACLES = {
    "plane": (L.PlaneSpec, {"point": vec3(), "normal": vec3(nonzero=True), **_CONTACT}),
    "sphere": (L.SphereSpec, {"center": vec3(), "radius": number(0.0, 1e6, lo_open=True), **_CONTACT}),
}
_LIGHT = {"direction": vec3(nonzero=True), "color": color, "intensity": number(0.0, 1e4), "shadow": number(0.0, 1.0)}
_SHEET = {
    "columns": number(1, 1024, integer=True),
    "rows": number(1, 1024, integer=True),
    "padding": number(0, 256, integer=True),
    "pow2": boolean,
    "format": choice(*L.FRAME_FORMATS),
}


def _kind_table(v, ctx, kinds: Dict[str, Tuple]):
    if not isinstance(v, dict):
        ctx.fail("a table with a kind", v)
    if "kind" not in v:
        ctx.child("kind").fail("one of " + ", ".join(f'"{k}"' for k in kinds), "nothing (kind is required)", raw=True)
    kind = choice(*kinds)(v["kind"], ctx.child("kind"))
    cls, checkers = kinds[kind]
    return _check_table(v, ctx, cls, checkers, skip=("kind",))


def _array_of_tables(v, ctx, each):
    if isinstance(v, dict):
        v = [v]  # a single [source] table is taken as one source
    if not isinstance(v, list):
        ctx.fail("an array of tables ([[...]])", v)
    return tuple(each(item, ctx.child(i)) for i, item in enumerate(v))


def _shading(v, ctx):
    checkers = {
        "blend": choice(*L.BLENDS),
        "ambient": number(0.0, 1.0),
        "ambient_color": color,
        "exposure": number(-32.0, 32.0),
        "light": lambda x, c: _check_table(x, c, L.LightSpec, _LIGHT),
    }
    return _check_table(v, ctx, L.ShadingSpec, checkers)


def _output(v, ctx):
    checkers = {
        "dir": dir_text,
        "frames": list_of(*L.FRAME_FORMATS),
        "png_bits": _png_bits,
        "png_alpha": choice("straight", "premultiplied"),
        "exr_type": choice("half", "float"),
        "sheet": lambda x, c: _check_table(x, c, L.SheetSpec, _SHEET),
        "preview": list_of(*L.PREVIEWS),
        "maps": list_of(*L.MAPS),
        "normal_y": choice("up", "down"),
    }
    return _check_table(v, ctx, L.OutputSpec, checkers)


def _png_bits(v, ctx):
    if isinstance(v, bool) or v not in (8, 16):
        ctx.fail("8 or 16", v)
    return int(v)


_seed = number(0, 2**63 - 1, integer=True)


def build_spec(data: Dict[str, Any], origin: Callable, *, default_name: str, path: Optional[str]) -> L.LookSpec:
    """Check merged look data and build a :class:`~splatter.look.LookSpec`.

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
    """
    ctx = _Ctx(origin)
    tables = {
        "name": name_text,
        "seed": _seed,
        "clip": lambda v, c: _check_table(v, c, L.ClipSpec, _CLIP),
        "image": lambda v, c: _check_table(v, c, L.ImageSpec, _IMAGE),
        "camera": lambda v, c: _check_table(v, c, L.CameraSpec, _CAMERA),
        "source": lambda v, c: _array_of_tables(v, c, lambda x, cc: _check_table(x, cc, L.SourceSpec, _SOURCE)),
        "force": lambda v, c: _array_of_tables(v, c, lambda x, cc: _kind_table(x, cc, _FORCES)),
        "obstacle": lambda v, c: _array_of_tables(v, c, lambda x, cc: _kind_table(x, cc, _OBSTACLES)),
        "shading": _shading,
        "output": _output,
    }
    if not isinstance(data, dict):
        ctx.fail("a TOML document", data)
    kwargs: Dict[str, Any] = {}
    rename = {"source": "sources", "force": "forces", "obstacle": "obstacles"}
    for key, value in data.items():
        if key not in tables:
            close = difflib.get_close_matches(key, list(tables) + ["base"], n=1, cutoff=0.6)
            hint = f' (did you mean "{close[0]}"?)' if close else ""
            ctx.child(key).fail(
                "one of the top-level keys " + ", ".join(sorted(list(tables) + ["base"])),
                f'unknown key "{key}"{hint}',
                raw=True,
            )
        kwargs[rename.get(key, key)] = tables[key](value, ctx.child(key))
    if "name" not in kwargs:
        kwargs["name"] = re.sub(r"[^a-z0-9_-]+", "-", default_name.lower()).strip("-") or "look"
    spec = L.LookSpec(path=path, **kwargs)
    _cross_checks(spec, ctx)
    return spec


def _cross_checks(spec: L.LookSpec, ctx: _Ctx) -> None:
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
    sheet = spec.output.sheet
    if sheet is not None:
        n = spec.clip.frames
        octx = ctx.child("output").child("sheet")
        if sheet.columns and sheet.rows and sheet.columns * sheet.rows < n:
            octx.child("rows").fail(f"columns x rows >= clip.frames ({n})", f"{sheet.columns} x {sheet.rows}", raw=True)
        cols = sheet.columns or (math.ceil(n / sheet.rows) if sheet.rows else math.ceil(math.sqrt(n)))
        rows = sheet.rows or math.ceil(n / cols)
        w = cols * (spec.image.width + 2 * sheet.padding)
        h = rows * (spec.image.height + 2 * sheet.padding)
        if max(w, h) > MAX_SHEET:
            octx.fail(f"a sheet at most {MAX_SHEET} px on a side", f"{w} x {h} px", raw=True)
    if not spec.output.frames and spec.output.sheet is None and not spec.output.preview:
        ctx.child("output").child("frames").fail("something to write: frames, a sheet or a preview", [], raw=False)
