"""Per-frame map PNGs (``output.map_frames``): each extra map next to the frames.

One PNG per map and frame, ``{name}.{map}.{frame:04d}.png``, encoded exactly
as the map sheets are (:mod:`splatter.deliver.map_encode`) but in frame
units: motion in frame UV per frame (x right, y down) as RGB with red x,
green y and blue 0; depth as one grey channel; normals as RGB in the look's
``normal_y`` convention; light directions as two RGB files (``lightdirs_pos``
and ``lightdirs_neg``). The ranges (motion scale, depth near and far) are the
clip's, so every frame reads back with the same numbers: motion and depth
are written when the clip is done (their layers are kept until then),
normals and light directions as each frame arrives. Each file carries
them in a ``tEXt`` chunk ``splatter.map``: a JSON object like a sheet's map
entry (``map``, ``encoding``, ``channels``, and ``scale``/``units``,
``near``/``far``, ``convention``, ``axes``/``relight``), so a file read on
its own says what it holds. No colour chunks: these are data.
"""

from __future__ import annotations

import json
import os
from typing import Dict, List, Sequence

import numpy as np

from splatter.deliver.display import quantize
from splatter.deliver.map_encode import (
    MOTION_ENCODING,
    depth_range,
    encode_depth_grey,
    encode_motion_rgb,
    encode_normal,
    motion_scale,
    normal_convention,
)
from splatter.deliver.map_sheets import dilate_under, lightdir_entry
from splatter.deliver.names import LIGHTDIR_SHEETS, map_frame_file
from splatter.deliver.png import write_png_encoded

__all__ = ["write_map_frame", "write_ranged_map_frames", "is_ranged", "keeps_ranged_layers", "RANGED_MAPS",
           "MAP_TEXT_KEY"]

RANGED_MAPS = ("motion", "depth")
"""Maps encoded with the clip's ranges (motion scale, depth near and far), so kept to the end."""

MAP_TEXT_KEY = "splatter.map"
"""``tEXt`` keyword of the JSON entry that describes a per-frame map PNG."""


def is_ranged(layer: str) -> bool:
    """Whether a map layer's encoding needs the whole clip (motion scale, depth near and far).

    Examples
    --------
    >>> is_ranged("motion.x"), is_ranged("normal.y")
    (True, False)
    """
    return layer.split(".", 1)[0] in RANGED_MAPS


def keeps_ranged_layers(output) -> bool:
    """Whether a render must keep its ranged map layers to the end of the clip.

    They are kept when a ranged map is asked for and something encodes it with the
    clip's ranges: the map sheets (written with the colour sheet) or the per-frame map
    PNGs. The sink keeps the layers and ``--resume`` keeps each finished frame's share of
    them by this one rule.

    Parameters
    ----------
    output : OutputSpec
        The look's ``output`` record (``maps``, ``sheet``, ``map_frames``).

    Examples
    --------
    >>> from types import SimpleNamespace as S
    >>> keeps_ranged_layers(S(maps=("normal", "depth"), sheet=None, map_frames=True))
    True
    >>> keeps_ranged_layers(S(maps=("normal",), sheet=object(), map_frames=True))
    False
    """
    wanted = any(m in RANGED_MAPS for m in output.maps)
    return bool(wanted and (output.sheet is not None or output.map_frames))


def _write(out_dir, name, map_name, frame_numbers, frames, entry, png_bits, out):
    text = {"Software": "splatter", MAP_TEXT_KEY: json.dumps({"map": map_name, **entry})}
    for f, values in zip(frame_numbers, frames):
        path = os.path.join(os.fspath(out_dir), map_frame_file(name, map_name, f))
        write_png_encoded(path, quantize(values, png_bits), srgb=False, text=text)
        out.append(path)


def write_map_frame(out_dir, name: str, frame: int, layers: Dict[str, np.ndarray], alpha: np.ndarray, *,
                    png_bits: int = 8, y_down: bool = False) -> List[str]:
    """Write one frame's normal and light-direction map PNGs (they need no clip-wide range).

    Parameters
    ----------
    out_dir : str or os.PathLike
        Existing output folder.
    name : str
        Base name of the files.
    frame : int
    layers : dict of str to (H, W) float32 ndarray
        The frame's straight map layers (``normal.x``, ``lightdirs_pos.x``
        ...), as the EXR frames hold them; others are ignored.
    alpha : (H, W) float ndarray
        The frame's coverage.
    png_bits : {8, 16}
    y_down : bool
        The normals' convention (the layers already hold it); named in the
        metadata.

    Returns
    -------
    list of str
    """
    out: List[str] = []
    if "normal.x" in layers:
        n = np.stack([layers[f"normal.{c}"] for c in "xyz"], -1)
        _write(out_dir, name, "normal", [frame], [encode_normal(n)],
               {"encoding": "n*0.5+0.5", "channels": ["x", "y", "z"], "convention": normal_convention(y_down)},
               png_bits, out)
    if f"{LIGHTDIR_SHEETS[0]}.x" in layers:
        common = lightdir_entry([])
        for part, chans in zip(LIGHTDIR_SHEETS, common["channels"]):
            values = dilate_under(np.stack([layers[f"{part}.{c}"] for c in "xyz"], -1), alpha)
            _write(out_dir, name, part, [frame], [values], {"encoding": "linear", "channels": chans,
                                                             "axes": common["axes"], "relight": common["relight"]},
                   png_bits, out)
    return out


def write_ranged_map_frames(out_dir, name: str, frame_numbers: Sequence[int], layers: Dict[str, List[np.ndarray]],
                            alpha: Sequence[np.ndarray], *, png_bits: int = 8) -> List[str]:
    """Write the motion and depth map PNGs of every frame, encoded with the clip's ranges; return the paths.

    Parameters
    ----------
    out_dir : str or os.PathLike
    name : str
    frame_numbers : sequence of int
        The frame number of each entry of ``alpha`` and the layer lists.
    layers : dict of str to list of (H, W) float32 ndarray
        ``motion.x``, ``motion.y`` (pixels per frame), ``depth.z`` per frame;
        others are ignored.
    alpha : sequence of (H, W) float ndarray
    png_bits : {8, 16}

    Returns
    -------
    list of str
    """
    out: List[str] = []
    if "motion.x" in layers:
        h, w = alpha[0].shape
        d_uv = [np.stack([mx / w, my / h], axis=-1) for mx, my in zip(layers["motion.x"], layers["motion.y"])]
        scale = motion_scale(d_uv, alpha)
        _write(out_dir, name, "motion", frame_numbers, (encode_motion_rgb(d, a, scale) for d, a in zip(d_uv, alpha)),
               {"encoding": MOTION_ENCODING, "channels": ["x", "y", "0"], "scale": scale,
                "units": "frame uv per frame"}, png_bits, out)
    if "depth.z" in layers:
        near, far = depth_range(layers["depth.z"], alpha)
        _write(out_dir, name, "depth", frame_numbers,
               (encode_depth_grey(z, a, near, far) for z, a in zip(layers["depth.z"], alpha)),
               {"encoding": "linear", "channels": ["z"], "near": near, "far": far, "units": "world"}, png_bits, out)
    return out
