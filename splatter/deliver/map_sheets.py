"""Sheets of the extra maps: motion, depth, normals and light directions.

Each map sheet shares the colour sheet's cells. PNG map sheets hold encoded
values (:mod:`splatter.deliver.map_encode`) with no colour chunks, since they
are data, in the channels an engine samples: motion RGB (red x, green y,
blue 0), depth one grey channel, normals RGB, light directions RGB; EXR map
sheets hold raw values in ``map.channel`` layers. Each
writer returns the metadata entry stored under ``"maps"`` in the sheet's
JSON (see :func:`splatter.deliver.sheet.write_sheet`).
"""

from __future__ import annotations

import os

import numpy as np

from splatter.core.args import check_choice
from splatter.core.choices import EXR_TYPES, FRAME_FORMATS, PNG_BITS
from splatter.deliver.dilate import dilate_colour
from splatter.deliver.display import quantize
from splatter.deliver.exr import write_exr
from splatter.deliver.map_encode import (
    LIGHT_RELIGHT,
    MAP_COVERED,
    MOTION_ENCODING,
    depth_range,
    encode_depth_grey,
    encode_motion_rgb,
    encode_normal,
    motion_scale,
    normal_convention,
)
from splatter.deliver.names import LIGHTDIR_SHEETS, map_sheet_file
from splatter.deliver.png import write_png_encoded
from splatter.deliver.sheet import assemble_sheet

__all__ = ["write_map_sheet", "write_lightdir_sheets", "write_motion_sheet", "write_depth_sheet",
           "write_normal_sheet", "write_lightdirs_map", "lightdir_entry", "dilate_under", "MAP_COVERED",
           "LIGHT_AXES"]

LIGHT_AXES = "+x right, +y up, +z toward the viewer"
"""The camera axes of the light-direction maps and of the normal map."""


def dilate_under(values, alpha):
    """Fill texels where ``alpha == 0`` with the values of the nearest covered texel.

    Parameters
    ----------
    values : (H, W, C) float ndarray
    alpha : (H, W) float ndarray

    Returns
    -------
    (H, W, C) float32 ndarray
        Covered texels unchanged (see :func:`splatter.deliver.dilate.dilate_colour`).
    """
    v = np.asarray(values, dtype=np.float32)
    both = np.concatenate([v, np.asarray(alpha, dtype=np.float32)[..., None]], axis=-1)
    return dilate_colour(both)[..., :-1]


def lightdir_entry(files, format="png"):
    """The metadata entry of the two light-direction maps (sheets or frames)."""
    return {"files": list(files), "format": format, "encoding": "linear",
            "channels": [["+x", "+y", "+z"], ["-x", "-y", "-z"]], "axes": LIGHT_AXES, "relight": LIGHT_RELIGHT}


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
    dilate_alpha=None,
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
        PNG maps get no colour chunks (they are data).
    png_bits : {8, 16}
    exr_type : {"half", "float"}
    channels : sequence of str, optional
        Names of the channels, stored in the entry and used as EXR channel
        names ``{map_name}.{channel}``; default ``x, y, z, w`` (first C).
    file_suffix : str, optional
        Replaces ``map_name`` in the file name (``{name}.{file_suffix}.sheet.png``).
    background : sequence of float, optional
        Per-channel value outside the cells' content (see :func:`assemble_sheet`).
    dilate_alpha : sequence of (H, W) float ndarray, optional
        The frames' alpha: within each cell's tile (content and gutter),
        texels where it is 0 take the value of the nearest covered texel, as
        colour sheets do; for maps that are filtered like colour (light).
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
    if dilate_alpha is not None:
        frames = [np.concatenate([np.asarray(f, np.float32), np.asarray(a, np.float32)[..., None]], axis=-1)
                  for f, a in zip(frames, dilate_alpha)]
        background = None if background is None else tuple(background) + (0.0,)
    sheet = assemble_sheet(frames, layout, clip_alpha=False, background=background)
    if dilate_alpha is not None:
        sheet = _dilate_tiles(sheet, layout)
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


def _dilate_tiles(sheet, layout):
    """Dilate each cell's tile (content and gutter) on its own; drop the alpha channel last."""
    out = sheet[..., :-1].copy()
    pad = layout.padding
    for cell in layout.cells:
        ys = slice(max(cell.y - pad, 0), cell.y + cell.h + pad)
        xs = slice(max(cell.x - pad, 0), cell.x + cell.w + pad)
        out[ys, xs] = dilate_colour(sheet[ys, xs])[..., :-1]
    return out


def write_lightdir_sheets(dir, name, frames_pos, frames_neg, layout, *, png_bits=8, alphas=None):
    """Write the two light-direction sheets and return one metadata entry.

    Parameters
    ----------
    dir : str or os.PathLike
        Existing output folder.
    name : str
        Base name of the files.
    frames_pos : iterable of (H, W, 3) float ndarray
        Per frame, light arriving from the camera's +x (right), +y (up) and
        +z (toward the viewer) sides, in [0, 1], as red, green and blue.
    frames_neg : iterable of (H, W, 3) float ndarray
        The same from -x (left), -y (down) and -z (away from the viewer).
    layout : SheetLayout
    png_bits : {8, 16}
    alphas : sequence of (H, W) float ndarray, optional
        The frames' alpha; texels where it is 0 take the nearest covered
        texel's light (dilation), so filtering never darkens the rim.

    Returns
    -------
    dict
        :func:`lightdir_entry`: ``files`` ``[pos, neg]``, ``channels``
        ``[["+x", "+y", "+z"], ["-x", "-y", "-z"]]``, ``axes``, ``relight``.
    """
    files = []
    for frames, suffix, chans in ((frames_pos, LIGHTDIR_SHEETS[0], ("px", "py", "pz")),
                                  (frames_neg, LIGHTDIR_SHEETS[1], ("nx", "ny", "nz"))):
        e = write_map_sheet(dir, name, suffix, frames, layout, encoding="linear", png_bits=png_bits,
                            channels=chans, dilate_alpha=alphas)
        files.append(e["file"])
    return lightdir_entry(files)


def write_motion_sheet(out_dir, name, layout, layers, alpha, w, h, common) -> dict:
    """Screen motion in sheet UV units per frame; the scale is the clip's largest.

    PNG: red = x, green = y, blue 0 (an RGB image, 8 or 16 bit); EXR:
    layers ``motion.x``, ``motion.y`` holding the displacement itself.
    """
    # Pixels per frame -> sheet UV units per frame (cells may be resampled).
    sx = layout.cells[0].w / w / layout.width
    sy = layout.cells[0].h / h / layout.height
    d_uv = [np.stack([mx * sx, my * sy], axis=-1) for mx, my in zip(layers["motion.x"], layers["motion.y"])]
    scale = motion_scale(d_uv, alpha)
    if common["format"] == "png":
        frames = [encode_motion_rgb(d, a, scale) for d, a in zip(d_uv, alpha)]
        enc, chans, bg = MOTION_ENCODING, ("x", "y", "0"), (0.5, 0.5, 0.0)
    else:
        frames, enc, chans, bg = d_uv, "raw", ("x", "y"), (0.0, 0.0)
    return write_map_sheet(out_dir, name, "motion", frames, layout, encoding=enc, channels=chans, background=bg,
                           scale=scale, units="sheet uv per frame", **common)


def write_depth_sheet(out_dir, name, layout, depths, alpha, common) -> dict:
    """Alpha-weighted view depth, one grey channel; PNG normalised between the clip's nearest and farthest smoke."""
    near, far = depth_range(depths, alpha)
    png = common["format"] == "png"
    if png:
        frames, enc = [encode_depth_grey(z, a, near, far) for z, a in zip(depths, alpha)], "linear"
    else:
        frames, enc = [z[..., None] for z in depths], "raw"
    return write_map_sheet(out_dir, name, "depth", frames, layout, encoding=enc, channels=("z",),
                           background=(1.0,) if png else (far,), near=near, far=far, units="world", **common)


def write_normal_sheet(out_dir, name, layout, layers, alpha, common, *, y_down) -> dict:
    """View-space normals as the layers hold them (already in the look's Y convention).

    PNG: encoded ``n * 0.5 + 0.5``; EXR: the unit vectors. ``y_down`` only
    names the convention in the entry and sets the flat background.
    """
    normals = [np.stack([layers[f"normal.{c}"][i] for c in "xyz"], axis=-1) for i in range(len(alpha))]
    png = common["format"] == "png"
    if png:
        frames, enc = [encode_normal(n) for n in normals], "n*0.5+0.5"
    else:
        frames, enc = normals, "raw"
    return write_map_sheet(out_dir, name, "normal", frames, layout, encoding=enc,
                           channels=("x", "y", "z"), background=(0.5, 0.5, 1.0) if png else (0.0, 0.0, 1.0),
                           convention=normal_convention(y_down), **common)


def write_lightdirs_map(out_dir, name, layout, layers, alpha, *, png_bits) -> dict:
    """The six light-direction factors as two RGB PNG sheets, +x +y +z and -x -y -z."""
    def pack(sign):
        return [np.stack([layers[f"lightdirs_{sign}.{c}"][i] for c in "xyz"], -1) for i in range(len(alpha))]

    return write_lightdir_sheets(out_dir, name, pack("pos"), pack("neg"), layout, png_bits=png_bits, alphas=alpha)
