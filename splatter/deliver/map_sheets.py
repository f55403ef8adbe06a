"""Sheets of the extra maps: motion, depth, normals and light directions.

Each map sheet shares the colour sheet's cells. PNG map sheets hold encoded
values (:mod:`splatter.deliver.map_encode`) with no colour chunks, since they
are data; EXR map sheets hold raw values in ``map.channel`` layers. Each
writer returns the metadata entry stored under ``"maps"`` in the sheet's
JSON (see :func:`splatter.deliver.sheet.write_sheet`).
"""

from __future__ import annotations

import math
import os

import numpy as np

from splatter.core.args import check_choice
from splatter.core.choices import EXR_TYPES, FRAME_FORMATS, PNG_BITS
from splatter.core.thresholds import VISIBLE_ALPHA
from splatter.deliver.display import quantize
from splatter.deliver.exr import write_exr
from splatter.deliver.map_encode import encode_depth, encode_normal, encode_signed
from splatter.deliver.names import LIGHTDIR_SHEETS, map_sheet_file
from splatter.deliver.png import write_png_encoded
from splatter.deliver.sheet import assemble_sheet

__all__ = ["write_map_sheet", "write_lightdirs_sheets", "write_motion_sheet", "write_depth_sheet",
           "write_normal_sheet", "write_lightdirs_map", "MAP_COVERED"]

MAP_COVERED = VISIBLE_ALPHA
"""Alpha above which a texel counts when a map's range (motion scale, depth near and far) is measured."""

_MAP_FADE = 1.0 / 32.0  # map texels fade to neutral below this alpha


def _fade(value, alpha, neutral):
    """Blend a straight map value toward ``neutral`` where the smoke is nearly transparent.

    A map holds each texel's alpha-weighted mean, which stays at full strength
    out to a puff's faint 3-sigma rim; fading it below alpha 1/32 keeps those
    rims from showing as hard discs in the map, where nothing can be seen.
    """
    w = np.minimum(1.0, alpha / _MAP_FADE)
    if value.ndim == 3:
        w = w[..., None]
    return (neutral + (value - neutral) * w).astype(np.float32)


def _round_up_2sig(x: float) -> float:
    """Round up to two significant digits, so the stored scale reads cleanly."""
    e = math.floor(math.log10(x)) - 1
    return math.ceil(x / 10.0**e) * 10.0**e


def write_map_sheet(
    dir,
    name,
    map_name,
    frames,
    layout,
    *,
    encoding,
    format="png",
    png_bits=8,
    exr_type="half",
    channels=None,
    file_suffix=None,
    background=None,
    **meta,
):
    """Write one data-map sheet ``{name}.{map_name}.sheet.{png|exr}``; return its metadata entry.

    Parameters
    ----------
    dir : str or os.PathLike
        Existing output folder.
    name : str
        Base name of the files.
    map_name : str
        ``"motion"``, ``"depth"``, ``"normal"`` ... (``[a-z0-9_]+``).
    frames : iterable of (H, W, C) float ndarray
        ``layout.frames`` frames with 1 to 4 channels. For PNG: values already
        encoded in [0, 1] (see :mod:`splatter.deliver.map_encode`); for EXR: any values
        (usually raw, with ``encoding="raw"``).
    layout : SheetLayout
        The colour sheet's layout; map sheets share its cells.
    encoding : str
        How to read the values back, stored in the entry (see the module docstring).
    format : {"png", "exr"}
        PNG maps get no colour chunks (they are data) and are not dilated.
    png_bits : {8, 16}
    exr_type : {"half", "float"}
    channels : sequence of str, optional
        Names of the channels, stored in the entry and used as EXR channel
        names ``{map_name}.{channel}``; default ``x, y, z, w`` (first C).
    file_suffix : str, optional
        Replaces ``map_name`` in the file name (``{name}.{file_suffix}.sheet.png``).
    background : sequence of float, optional
        Per-channel value outside the cells' content (see :func:`assemble_sheet`).
    **meta
        Extra entry keys: ``scale`` for motion, ``near``/``far`` for depth,
        ``convention`` for normals ...

    Returns
    -------
    dict
        ``{"file", "format", "encoding", "channels", **meta}`` for
        ``write_sheet(maps={map_name: entry})``.
    """
    check_choice(format, "format", FRAME_FORMATS)
    check_choice(png_bits, "png_bits", PNG_BITS)
    check_choice(exr_type, "exr_type", EXR_TYPES)
    if not isinstance(map_name, str) or not map_name or not all(ch.isalnum() or ch == "_" for ch in map_name):
        raise ValueError(f"map_name: expected letters, digits and '_', got {map_name!r}")
    sheet = assemble_sheet(frames, layout, clip_alpha=False, background=background)
    c = sheet.shape[2]
    if not 1 <= c <= 4:
        raise ValueError(f"frames: expected 1 to 4 channels, got {c}")
    names = list(channels) if channels is not None else list("xyzw"[:c])
    if len(names) != c:
        raise ValueError(f"channels: {len(names)} names for {c} channels")
    file = map_sheet_file(name, file_suffix or map_name, format)
    path = os.path.join(os.fspath(dir), file)
    if format == "png":
        write_png_encoded(path, quantize(sheet, png_bits), srgb=False, text={"Software": "splatter"})
    else:
        write_exr(path, {f"{map_name}.{n}": sheet[..., i] for i, n in enumerate(names)}, pixel_type=exr_type)
    entry = {"file": file, "format": format, "encoding": encoding, "channels": names}
    entry.update(meta)
    return entry


def write_lightdirs_sheets(dir, name, frames_rlt, frames_bfb, layout, *, png_bits=8):
    """Write the two light-direction sheets and return one metadata entry.

    Parameters
    ----------
    dir : str or os.PathLike
        Existing output folder.
    name : str
        Base name of the files.
    frames_rlt : iterable of (H, W, 3) float ndarray
        Per frame, light received from the right, left and top, in [0, 1].
    frames_bfb : iterable of (H, W, 3) float ndarray
        Per frame, light received from the bottom, front and back, in [0, 1].
    layout : SheetLayout
    png_bits : {8, 16}

    Returns
    -------
    dict
        ``{"files": [A, B], "format": "png", "encoding": "linear",
        "channels": [["right", "left", "top"], ["bottom", "front", "back"]]}``.
    """
    a = write_map_sheet(dir, name, "lightdirs", frames_rlt, layout, encoding="linear", png_bits=png_bits,
                        channels=("right", "left", "top"), file_suffix=LIGHTDIR_SHEETS[0])
    b = write_map_sheet(dir, name, "lightdirs", frames_bfb, layout, encoding="linear", png_bits=png_bits,
                        channels=("bottom", "front", "back"), file_suffix=LIGHTDIR_SHEETS[1])
    return {"files": [a["file"], b["file"]], "format": "png", "encoding": "linear",
            "channels": [a["channels"], b["channels"]]}


def write_motion_sheet(out_dir, name, layout, layers, alpha, w, h, common) -> dict:
    """Screen motion in sheet UV units per frame; the scale is the clip's largest."""
    # Pixels per frame -> sheet UV units per frame (cells may be resampled).
    sx = layout.cells[0].w / w / layout.width
    sy = layout.cells[0].h / h / layout.height
    d_uv = [np.stack([mx * sx, my * sy], axis=-1) for mx, my in zip(layers["motion.x"], layers["motion.y"])]
    peak = max((float(np.abs(d[a > MAP_COVERED]).max(initial=0.0)) for d, a in zip(d_uv, alpha)), default=0.0)
    scale = _round_up_2sig(max(peak, 1e-6))
    png = common["format"] == "png"
    if png:
        frames, enc = [encode_signed(_fade(d, a, 0.0), scale) for d, a in zip(d_uv, alpha)], "0.5+0.5*clamp(d/s,-1,1)"
    else:
        frames, enc = d_uv, "raw"
    return write_map_sheet(out_dir, name, "motion", frames, layout, encoding=enc,
                           channels=("x", "y"), background=(0.5, 0.5) if png else (0.0, 0.0), scale=scale,
                           units="sheet uv per frame", **common)

def write_depth_sheet(out_dir, name, layout, depths, alpha, common) -> dict:
    """Alpha-weighted view depth; PNG normalised between the clip's nearest and farthest smoke."""
    zs = [z[a > MAP_COVERED] for z, a in zip(depths, alpha)]
    near = min((float(z.min()) for z in zs if z.size), default=0.0)
    far = max((float(z.max()) for z in zs if z.size), default=1.0)
    far = far if far > near else near + 1.0
    png = common["format"] == "png"
    if png:
        frames = [_fade(np.where(a > 0, encode_depth(z, near, far), 1.0), a, 1.0)[..., None]
                  for z, a in zip(depths, alpha)]
        enc = "linear"
    else:
        frames, enc = [z[..., None] for z in depths], "raw"
    return write_map_sheet(out_dir, name, "depth", frames, layout, encoding=enc, channels=("z",),
                           background=(1.0,) if png else (far,), near=near, far=far, units="world", **common)

def write_normal_sheet(out_dir, name, layout, layers, alpha, common, *, y_down) -> dict:
    """View-space normals; PNG encoded n * 0.5 + 0.5 in the look's Y convention."""
    normals = [np.stack([layers[f"normal.{c}"][i] for c in "xyz"], axis=-1) for i in range(len(alpha))]
    png = common["format"] == "png"
    if png:
        frames, enc = [encode_normal(n, y_down=y_down) for n in normals], "n*0.5+0.5"
    else:
        frames, enc = normals, "raw"
    return write_map_sheet(out_dir, name, "normal", frames, layout, encoding=enc,
                           channels=("x", "y", "z"), background=(0.5, 0.5, 1.0) if png else (0.0, 0.0, 1.0),
                           convention="+y down" if y_down else "+y up", **common)

def write_lightdirs_map(out_dir, name, layout, layers, alpha, *, png_bits) -> dict:
    """Six light-direction factors packed into two RGB PNG sheets."""
    def pack(sides):
        return [_fade(np.stack([layers[f"lightdirs.{s}"][i] for s in sides], -1), a, 0.0)
                for i, a in enumerate(alpha)]

    return write_lightdirs_sheets(out_dir, name, pack(("right", "left", "top")),
                                  pack(("bottom", "front", "back")), layout, png_bits=png_bits)
