"""Every file name a render writes, written down once.

``render`` writes through these functions, ``check`` lists through
:func:`planned_files`, and ``pack`` recognises frames through
:data:`FRAME_FILE`, so the three can never disagree about a name.

Examples
--------
>>> frame_file("quay_vent", 7, "png")
'quay_vent.0007.png'
>>> sheet_file("quay_vent", "exr"), sheet_meta_file("quay_vent")
('quay_vent.sheet.exr', 'quay_vent.sheet.json')
>>> map_sheet_file("quay_vent", "motion", "png")
'quay_vent.motion.sheet.png'
>>> map_frame_file("quay_vent", "lightdirs_pos", 7)
'quay_vent.lightdirs_pos.0007.png'
>>> FRAME_FILE.match("quay_vent.0007.exr").group("name", "frame", "ext")
('quay_vent', '0007', 'exr')
"""

from __future__ import annotations

import os
import re
from typing import Iterable, List

from splatter.look.records import LookSpec

__all__ = [
    "FRAME_FILE", "file_stem", "frame_file", "sheet_file", "sheet_meta_file", "map_sheet_file", "map_frame_file",
    "map_files", "LIGHTDIR_SHEETS", "preview_file", "manifest_file", "planned_files",
]

FRAME_FILE = re.compile(r"^(?P<name>[^.]+)\.(?P<frame>\d{4,})\.(?P<ext>png|exr)$")
"""A frame file: ``{name}.{frame:04d}.{ext}``, name without dots."""

LIGHTDIR_SHEETS = ("lightdirs_pos", "lightdirs_neg")
"""The two light-direction maps: light from the camera's +x, +y, +z sides, and from -x, -y, -z."""


def file_stem(look: LookSpec) -> str:
    """The look's ``output.stem`` with ``{name}`` and ``{seed}`` filled in: the start of every file name.

    Examples
    --------
    >>> from splatter.look.records import LookSpec, OutputSpec
    >>> file_stem(LookSpec(name="quay_dust", seed=7))
    'quay_dust'
    >>> file_stem(LookSpec(name="quay_dust", seed=7, output=OutputSpec(stem="{name}_s{seed}")))
    'quay_dust_s7'
    """
    return look.output.stem.format(name=look.name, seed=look.seed)


def frame_file(name: str, frame: int, ext: str) -> str:
    """``{name}.{frame:04d}.{ext}``: one frame of the sequence."""
    return f"{name}.{frame:04d}.{ext}"


def sheet_file(name: str, fmt: str) -> str:
    """``{name}.sheet.{fmt}``: the sprite sheet."""
    return f"{name}.sheet.{fmt}"


def sheet_meta_file(name: str) -> str:
    """``{name}.sheet.json``: the sheet's metadata."""
    return f"{name}.sheet.json"


def map_sheet_file(name: str, map_name: str, fmt: str) -> str:
    """``{name}.{map_name}.sheet.{fmt}``: a sheet of one extra map."""
    return f"{name}.{map_name}.sheet.{fmt}"


def map_frame_file(name: str, map_name: str, frame: int) -> str:
    """``{name}.{map_name}.{frame:04d}.png``: one frame of one extra map (``output.map_frames``)."""
    return f"{name}.{map_name}.{frame:04d}.png"


def map_files(map_name: str) -> List[str]:
    """The file-name parts one entry of ``output.maps`` writes: two for ``"lightdirs"``, else itself."""
    return list(LIGHTDIR_SHEETS) if map_name == "lightdirs" else [map_name]


def preview_file(name: str, kind: str) -> str:
    """``{name}.preview.gif``, ``{name}.preview.mp4`` or ``{name}.contact.png``."""
    return f"{name}.contact.png" if kind == "contact" else f"{name}.preview.{kind}"


def manifest_file(name: str) -> str:
    """``{name}.render.json``: the render's manifest (see :mod:`splatter.deliver.folder`)."""
    return f"{name}.render.json"


def planned_files(look: LookSpec, out_dir: str, frames: Iterable[int]) -> List[str]:
    """The paths a render of ``frames`` writes, in the order ``check`` lists them.

    Parameters
    ----------
    look : LookSpec
    out_dir : str
        The output folder, placeholders already filled in.
    frames : iterable of int
        Frame numbers rendered.

    Returns
    -------
    list of str
    """
    name, out = file_stem(look), look.output
    frames = list(frames)
    files = [frame_file(name, f, ext) for ext in out.frames for f in frames]
    if out.sheet is not None and frames:
        fmt = out.sheet.format
        files += [sheet_file(name, fmt), sheet_meta_file(name)]
        for m in out.maps:
            files += [map_sheet_file(name, part, "png" if m == "lightdirs" else fmt) for part in map_files(m)]
    if out.map_frames:
        files += [map_frame_file(name, part, f) for m in out.maps for part in map_files(m) for f in frames]
    if frames:
        files += [preview_file(name, p) for p in out.preview]
    files.append(manifest_file(name))
    return [os.path.join(out_dir, f) for f in files]
