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
from splatter.deliver.sheet import TileSheetStream, cell_tile, empty_sheet

__all__ = ["write_map_sheet", "write_lightdir_sheets", "write_motion_sheet", "write_depth_sheet",
           "write_normal_sheet", "write_lightdirs_map", "lightdir_entry", "map_tile", "dilate_under", "MAP_COVERED",
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
        ``layout.frames`` frames with 1 to 4 channels, consumed one at a time
        (a generator keeps memory at one frame: PNG sheets are encoded cell
        row by cell row, EXR sheets held at the file's pixel type). For PNG: values already
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
    dilate_alpha : iterable of (H, W) float ndarray, optional
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
    file = map_sheet_file(name, file_suffix or map_name, format)
    path = os.path.join(os.fspath(dir), file)
    sheet = _MapSheet(layout, format, png_bits, exr_type, background)
    alphas = None if dilate_alpha is None else iter(dilate_alpha)
    k = -1
    for k, frame in enumerate(frames):
        if k >= layout.frames:
            raise ValueError(f"frames: more than the layout's {layout.frames} frames")
        sheet.put(k, map_tile(layout, k, frame, background=background,
                              dilate_alpha=None if alphas is None else next(alphas)))
    if k + 1 != layout.frames:
        raise ValueError(f"frames: got {k + 1} frames, the layout has {layout.frames}")
    c = sheet.channels
    names = list(channels) if channels is not None else list("xyzw"[:c])
    if len(names) != c:
        raise ValueError(f"channels: {len(names)} names for {c} channels")
    sheet.write(path, [f"{map_name}.{n}" for n in names])
    entry = {"file": file, "format": format, "encoding": encoding, "channels": names}
    entry.update(meta)
    return entry


def map_tile(layout, k, frame, *, background=None, dilate_alpha=None):
    """Frame ``k``'s tile of a map sheet (its cell and gutter) as float32, as the whole sheet holds it there.

    Parameters
    ----------
    layout : SheetLayout
    k : int
    frame : (H, W, C) or (H, W) float ndarray
    background : sequence of float, optional
        The gutter's value per channel; default 0.
    dilate_alpha : (H, W) float ndarray, optional
        The frame's alpha: texels of the tile where it is 0 (the gutter
        included) take the value of the nearest covered texel.

    Returns
    -------
    (cell.h + 2 padding, cell.w + 2 padding, C) float32 ndarray

    Examples
    --------
    >>> from splatter.deliver.sheet import sheet_layout
    >>> lay = sheet_layout(1, 2, 1, columns=1, padding=1)
    >>> map_tile(lay, 0, np.array([[[0.25], [0.75]]]), background=[0.5])[..., 0].tolist()
    [[0.5, 0.5, 0.5, 0.5], [0.5, 0.25, 0.75, 0.5], [0.5, 0.5, 0.5, 0.5]]
    >>> map_tile(lay, 0, np.array([[[0.25], [0.75]]]), dilate_alpha=np.array([[1.0, 0.0]]))[..., 0].tolist()
    [[0.25, 0.25, 0.25, 0.25], [0.25, 0.25, 0.25, 0.25], [0.25, 0.25, 0.25, 0.25]]
    """
    f = np.asarray(frame, dtype=np.float32)
    if f.ndim == 2:
        f = f[..., None]
    if dilate_alpha is None:
        return cell_tile(layout, k, f, background=background, clip_alpha=False)
    both = np.concatenate([f, np.asarray(dilate_alpha, np.float32)[..., None]], axis=-1)
    bg = None if background is None else tuple(background)[: f.shape[2]] + (0.0,)
    return dilate_colour(cell_tile(layout, k, both, background=bg, clip_alpha=False))[..., :-1]


class _MapSheet:
    """Where a map sheet's tiles go: PNG codes encoded cell row by cell row, or an EXR sheet at its pixel type."""

    def __init__(self, layout, format, png_bits, exr_type, background):
        self.layout, self.format, self.png_bits = layout, format, png_bits
        self.dtype = np.float16 if exr_type == "half" else np.float32
        self.exr_type, self.background = exr_type, background
        self.channels = None
        self._out = None

    def put(self, k, tile):
        c = tile.shape[2]
        if self._out is None:
            if not 1 <= c <= 4:
                raise ValueError(f"frames: expected 1 to 4 channels, got {c}")
            self.channels = c
            if self.format == "png":
                fill = quantize(np.zeros(c) if self.background is None
                                else np.asarray(self.background, np.float32).reshape(-1)[:c], self.png_bits)
                self._out = TileSheetStream(self.layout, c, fill.dtype, srgb=False, text={"Software": "splatter"},
                                            fill=fill)
            else:  # float16 rounds as the EXR writer would
                self._out = empty_sheet(self.layout, c, background=self.background, dtype=self.dtype)
        elif c != self.channels:
            raise ValueError(f"frames[{k}]: {c} channels, frame 0 has {self.channels}")
        if self.format == "png":
            self._out.put(k, quantize(tile, self.png_bits))
        else:
            cell, pad = self.layout.cells[k], self.layout.padding
            self._out[cell.y - pad : cell.y + cell.h + pad, cell.x - pad : cell.x + cell.w + pad] = tile

    def write(self, path, exr_names):
        out, self._out = self._out, None
        if self.format == "png":
            out.write_image(path)
        else:
            write_exr(path, {n: out[..., i] for i, n in enumerate(exr_names)}, pixel_type=self.exr_type)


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
    def d_uv():  # frame by frame, twice (the scale, then the sheet), never the whole clip at once
        return (np.stack([mx * sx, my * sy], axis=-1) for mx, my in zip(layers["motion.x"], layers["motion.y"]))

    scale = motion_scale(d_uv(), alpha)
    if common["format"] == "png":
        frames = (encode_motion_rgb(d, a, scale) for d, a in zip(d_uv(), alpha))
        enc, chans, bg = MOTION_ENCODING, ("x", "y", "0"), (0.5, 0.5, 0.0)
    else:
        frames, enc, chans, bg = d_uv(), "raw", ("x", "y"), (0.0, 0.0)
    return write_map_sheet(out_dir, name, "motion", frames, layout, encoding=enc, channels=chans, background=bg,
                           scale=scale, units="sheet uv per frame", **common)


def write_depth_sheet(out_dir, name, layout, depths, alpha, common) -> dict:
    """Alpha-weighted view depth, one grey channel; PNG normalised between the clip's nearest and farthest smoke."""
    near, far = depth_range(depths, alpha)
    png = common["format"] == "png"
    if png:
        frames, enc = (encode_depth_grey(z, a, near, far) for z, a in zip(depths, alpha)), "linear"
    else:
        frames, enc = (z[..., None] for z in depths), "raw"
    return write_map_sheet(out_dir, name, "depth", frames, layout, encoding=enc, channels=("z",),
                           background=(1.0,) if png else (far,), near=near, far=far, units="world", **common)


def write_normal_sheet(out_dir, name, layout, layers, alpha, common, *, y_down) -> dict:
    """View-space normals as the layers hold them (already in the look's Y convention).

    PNG: encoded ``n * 0.5 + 0.5``; EXR: the unit vectors. ``y_down`` only
    names the convention in the entry and sets the flat background.
    """
    normals = (np.stack([layers[f"normal.{c}"][i] for c in "xyz"], axis=-1) for i in range(len(alpha)))
    png = common["format"] == "png"
    if png:
        frames, enc = (encode_normal(n) for n in normals), "n*0.5+0.5"
    else:
        frames, enc = normals, "raw"
    return write_map_sheet(out_dir, name, "normal", frames, layout, encoding=enc,
                           channels=("x", "y", "z"), background=(0.5, 0.5, 1.0) if png else (0.0, 0.0, 1.0),
                           convention=normal_convention(y_down), **common)


def write_lightdirs_map(out_dir, name, layout, layers, alpha, *, png_bits) -> dict:
    """The six light-direction factors as two RGB PNG sheets, +x +y +z and -x -y -z."""
    def pack(sign):
        return (np.stack([layers[f"lightdirs_{sign}.{c}"][i] for c in "xyz"], -1) for i in range(len(alpha)))

    return write_lightdir_sheets(out_dir, name, pack("pos"), pack("neg"), layout, png_bits=png_bits, alphas=alpha)
