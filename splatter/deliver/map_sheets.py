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
           "lightdir_entry", "map_tile", "MapSheetStream", "ArrivalMapSheets", "dilate_under", "MAP_COVERED",
           "LIGHT_AXES"]

LIGHT_AXES = "+x right, +y up, +z toward the viewer"
_LIGHTDIR_CHANNELS = (("px", "py", "pz"), ("nx", "ny", "nz"))  # channel names of the two sheets, LIGHTDIR_SHEETS order
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
    sheet = MapSheetStream(layout, map_name, encoding=encoding, format=format, png_bits=png_bits, exr_type=exr_type,
                           channels=channels, file_suffix=file_suffix, background=background, **meta)
    alphas = None if dilate_alpha is None else iter(dilate_alpha)
    k = -1
    for k, frame in enumerate(frames):
        if k >= layout.frames:
            raise ValueError(f"frames: more than the layout's {layout.frames} frames")
        sheet.put(k, sheet.encode(k, frame, dilate_alpha=None if alphas is None else next(alphas)))
    if k + 1 != layout.frames:
        raise ValueError(f"frames: got {k + 1} frames, the layout has {layout.frames}")
    return sheet.write(dir, name)


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


class MapSheetStream:
    """One map sheet made as its frames arrive: each frame's tile encoded on its own, placed in order.

    PNG sheets are compressed cell row by cell row
    (:class:`splatter.deliver.sheet.TileSheetStream`), so memory is one cell
    row of codes; EXR sheets are held at the file's pixel type (float16 for
    ``"half"`` rounds as the writer would). Either way the file is the same,
    byte for byte, as the whole sheet assembled at once. :meth:`encode` needs
    nothing but the frame (it may run on any thread, and its tile may be kept
    and placed later, as ``render --resume`` does); :meth:`put` takes tiles in
    frame order.

    Parameters
    ----------
    layout : SheetLayout
    map_name, encoding, format, png_bits, exr_type, channels, file_suffix, background, **meta
        As for :func:`write_map_sheet`.

    Examples
    --------
    >>> import tempfile
    >>> from splatter.deliver.sheet import sheet_layout
    >>> lay = sheet_layout(2, 8, 8, columns=2)
    >>> s = MapSheetStream(lay, "depth", encoding="linear", channels=("z",), background=(1.0,))
    >>> for k in range(2):
    ...     s.put(k, s.encode(k, np.full((8, 8, 1), 0.5)))
    >>> s.write(tempfile.mkdtemp(), "quay_vent")["file"]
    'quay_vent.depth.sheet.png'
    """

    def __init__(self, layout, map_name, *, encoding, format="png", png_bits=8, exr_type="half", channels=None,
                 file_suffix=None, background=None, **meta):
        check_choice(format, "format", FRAME_FORMATS)
        check_choice(png_bits, "png_bits", PNG_BITS)
        check_choice(exr_type, "exr_type", EXR_TYPES)
        if not isinstance(map_name, str) or not map_name or not all(ch.isalnum() or ch == "_" for ch in map_name):
            raise ValueError(f"map_name: expected letters, digits and '_', got {map_name!r}")
        self.layout, self.map_name, self.format, self.png_bits = layout, map_name, format, png_bits
        self.exr_type, self.background = exr_type, background
        self._suffix = file_suffix or map_name
        self._names = None if channels is None else list(channels)
        self._encoding, self._meta = encoding, meta
        self.channels = None
        self._out = None

    def encode(self, k, frame, *, dilate_alpha=None):
        """Frame ``k``'s tile as the file stores it: PNG codes (uint8/uint16) or EXR floats (float16/float32).

        ``frame`` and ``dilate_alpha`` are as for :func:`map_tile`.
        """
        tile = map_tile(self.layout, k, frame, background=self.background, dilate_alpha=dilate_alpha)
        if self.format == "png":
            return quantize(tile, self.png_bits)
        return tile.astype(np.float16 if self.exr_type == "half" else np.float32)

    def put(self, k, tile):
        """Place frame ``k``'s tile from :meth:`encode`; tiles come in frame order 0, 1, 2, ..."""
        c = tile.shape[2]
        if self._out is None:
            if not 1 <= c <= 4:
                raise ValueError(f"frames: expected 1 to 4 channels, got {c}")
            if self._names is not None and len(self._names) != c:
                raise ValueError(f"channels: {len(self._names)} names for {c} channels")
            self.channels = c
            bg = np.zeros(c) if self.background is None else np.asarray(self.background, np.float32).reshape(-1)[:c]
            if self.format == "png":
                fill = quantize(bg, self.png_bits)
                self._out = TileSheetStream(self.layout, c, fill.dtype, srgb=False, text={"Software": "splatter"},
                                            fill=fill)
            else:
                self._out = empty_sheet(self.layout, c, background=bg, dtype=tile.dtype)
        elif c != self.channels:
            raise ValueError(f"frames[{k}]: {c} channels, frame 0 has {self.channels}")
        if self.format == "png":
            self._out.put(k, tile)
        else:
            cell, pad = self.layout.cells[k], self.layout.padding
            self._out[cell.y - pad : cell.y + cell.h + pad, cell.x - pad : cell.x + cell.w + pad] = tile

    def write(self, dir, name):
        """Write ``{name}.{map_name}.sheet.{png|exr}`` once every tile is in; return its metadata entry."""
        if self._out is None:
            raise RuntimeError(f"the {self.map_name} sheet got no frames")
        names = self._names if self._names is not None else list("xyzw"[: self.channels])
        file = map_sheet_file(name, self._suffix, self.format)
        path = os.path.join(os.fspath(dir), file)
        out, self._out = self._out, None
        if self.format == "png":
            out.write_image(path)
        else:
            write_exr(path, {f"{self.map_name}.{n}": out[..., i] for i, n in enumerate(names)},
                      pixel_type=self.exr_type)
        return {"file": file, "format": self.format, "encoding": self._encoding, "channels": names, **self._meta}


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
    for frames, suffix, chans in zip((frames_pos, frames_neg), LIGHTDIR_SHEETS, _LIGHTDIR_CHANNELS):
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


class ArrivalMapSheets:
    """The map sheets whose encodings need no clip-wide range, made as frames arrive: normals and light directions.

    Their layers are not kept to the end (the motion and depth sheets keep
    theirs, since their encodings use the clip's ranges): each frame's tiles
    are encoded by :meth:`tiles` and placed by :meth:`put`, so memory is one
    cell row of codes per sheet (or, for EXR normals, the sheet at its pixel
    type).

    Parameters
    ----------
    layout : SheetLayout
    maps : sequence of str
        The look's ``output.maps``; ``"normal"`` and ``"lightdirs"`` are taken.
    format : {"png", "exr"}
        The normal sheet's format (light-direction sheets are PNG).
    png_bits : {8, 16}
    exr_type : {"half", "float"}
    y_down : bool
        The normals' Y convention (the layers hold it already; it names the
        convention in the entry).

    Examples
    --------
    >>> import tempfile
    >>> from splatter.deliver.sheet import sheet_layout
    >>> lay = sheet_layout(1, 4, 4, columns=1)
    >>> sheets = ArrivalMapSheets(lay, ["normal"], format="png", png_bits=8, exr_type="half", y_down=False)
    >>> flat = {"normal.x": np.zeros((4, 4)), "normal.y": np.zeros((4, 4)), "normal.z": np.ones((4, 4))}
    >>> part = sheets.tiles(0, flat, np.ones((4, 4)))
    >>> part["map:normal"][0, 0].tolist()
    [128, 128, 255]
    >>> sheets.put(0, part)
    >>> sheets.write(tempfile.mkdtemp(), "quay")["normal"]["file"]
    'quay.normal.sheet.png'
    """

    def __init__(self, layout, maps, *, format, png_bits, exr_type, y_down):
        self._sheets = {}
        if "normal" in maps:
            png = format == "png"
            self._sheets["normal"] = MapSheetStream(
                layout, "normal", encoding="n*0.5+0.5" if png else "raw", format=format, png_bits=png_bits,
                exr_type=exr_type, channels=("x", "y", "z"), background=(0.5, 0.5, 1.0) if png else (0.0, 0.0, 1.0),
                convention=normal_convention(y_down))
        if "lightdirs" in maps:
            for suffix, chans in zip(LIGHTDIR_SHEETS, _LIGHTDIR_CHANNELS):
                self._sheets[suffix] = MapSheetStream(layout, suffix, encoding="linear", png_bits=png_bits,
                                                      channels=chans)

    def __bool__(self):
        return bool(self._sheets)

    def tiles(self, k, layers, alpha):
        """Frame ``k``'s encoded tiles, ``{"map:normal": ..., "map:lightdirs_pos": ...}``, from its layers.

        Parameters
        ----------
        k : int
        layers : dict of str to (H, W) float ndarray
            ``normal.x|y|z``, ``lightdirs_pos.x|y|z``, ``lightdirs_neg.x|y|z``.
        alpha : (H, W) float ndarray
            The frame's alpha; light directions are dilated under it.
        """
        out = {}
        for key, sheet in self._sheets.items():
            if key == "normal":
                n = np.stack([layers[f"normal.{c}"] for c in "xyz"], axis=-1)
                out["map:" + key] = sheet.encode(k, encode_normal(n) if sheet.format == "png" else n)
            else:
                light = np.stack([layers[f"{key}.{c}"] for c in "xyz"], axis=-1)
                out["map:" + key] = sheet.encode(k, light, dilate_alpha=alpha)
        return out

    def put(self, k, part):
        """Place frame ``k``'s tiles (from :meth:`tiles`, or kept from an earlier run); frames come in order."""
        for key, sheet in self._sheets.items():
            sheet.put(k, part["map:" + key])

    def write(self, dir, name):
        """Write the sheets; return their entries for the sheet's JSON: ``normal`` and ``lightdirs``."""
        entries = {}
        if "normal" in self._sheets:
            entries["normal"] = self._sheets["normal"].write(dir, name)
        if LIGHTDIR_SHEETS[0] in self._sheets:
            entries["lightdirs"] = lightdir_entry(self._sheets[s].write(dir, name)["file"] for s in LIGHTDIR_SHEETS)
        return entries
