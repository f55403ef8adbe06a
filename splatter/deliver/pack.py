"""Pack a folder of rendered frames into a sprite sheet and its metadata.

Frames are files ``{name}.{frame:04d}.png`` or ``{name}.{frame:04d}.exr``
(``name`` without dots, frame numbers of four or more digits). PNG frames are
read as straight-alpha sRGB and turned back into linear premultiplied RGBA;
EXR frames are read as linear premultiplied RGBA (the OpenEXR convention).
The sheet is written by :func:`splatter.deliver.sheet.write_sheet`.
"""

from __future__ import annotations

import contextlib
import json
import os

import numpy as np
import OpenEXR
from PIL import Image

from splatter.core.args import check_choice
from splatter.core.choices import FRAME_FORMATS, LOOP_MODES
from splatter.deliver.exr import read_exr
from splatter.deliver.folder import note_files, read_manifest
from splatter.deliver.names import FRAME_FILE, manifest_file, sheet_meta_file
from splatter.deliver.png import read_png_linear
from splatter.deliver.sheet import sheet_layout, write_sheet

__all__ = ["find_frames", "pack_folder"]



def find_frames(folder, *, name=None, ext=None):
    """Find the numbered frames in a folder; where a render manifest lists them, only those.

    Frame files that the manifest ``{name}.render.json`` of their name does
    not list as complete (left by another take, or by an interrupted write)
    are ignored.

    Parameters
    ----------
    folder : str or os.PathLike
    name : str, optional
        Base name; required when the folder holds frames of several names.
    ext : {"png", "exr"}, optional
        File type; default EXR when both kinds exist (lossless and already
        premultiplied linear), else the kind present.

    Returns
    -------
    name : str
    ext : str
    paths : list of str
        In frame order, numbering contiguous.

    Raises
    ------
    ValueError
        No frames, several names, or gaps in the numbering (the message says
        which frames are missing).
    """
    folder = os.fspath(folder)
    if not os.path.isdir(folder):
        raise ValueError(f"folder: {folder!r} is not a folder")
    found = {}  # (name, ext) -> {frame: file}
    for entry in sorted(os.listdir(folder)):
        m = FRAME_FILE.match(entry)
        if m:
            found.setdefault((m["name"], m["ext"]), {})[int(m["frame"])] = entry
    names = sorted({n for n, _ in found})
    if name is None:
        if not names:
            raise ValueError(f"folder: no frames NAME.0000.png or NAME.0000.exr in {folder!r}")
        if len(names) > 1:
            raise ValueError(f"folder: {folder!r} holds frames of several names ({', '.join(names)}); pass name")
        name = names[0]
    elif name not in names:
        have = f" (it has {', '.join(names)})" if names else ""
        raise ValueError(f"name: no frames {name}.0000.png or {name}.0000.exr in {folder!r}{have}")
    kinds = sorted(e for n, e in found if n == name)
    if ext is None:
        ext = "exr" if "exr" in kinds else kinds[0]
    elif ext not in kinds:
        raise ValueError(f"format: no {ext.upper()} frames of {name!r} in {folder!r} (found {', '.join(kinds)})")
    frames = found[(name, ext)]
    manifest = read_manifest(folder, name)
    if manifest is not None:
        listed = set(manifest.get("frames", []))
        frames = {k: v for k, v in frames.items() if k in listed}
        if not frames:
            raise ValueError(f"folder: no {ext.upper()} frames of {name!r} that {manifest_file(name)} lists as "
                             f"complete in {folder!r}")
    first, last = min(frames), max(frames)
    missing = [k for k in range(first, last + 1) if k not in frames]
    if missing:
        shown = ", ".join(f"{k:04d}" for k in missing[:10]) + (" ..." if len(missing) > 10 else "")
        raise ValueError(
            f"folder: frames of {name!r} run {first:04d} to {last:04d} with {len(missing)} missing: {shown}"
        )
    return name, ext, [os.path.join(folder, frames[k]) for k in range(first, last + 1)]


def _size(path, ext):
    """(width, height) from the file header only."""
    if ext == "png":
        with Image.open(path) as im:
            return im.size
    with OpenEXR.File(path, header_only=True) as f:
        lo, hi = f.header()["dataWindow"]
        return int(hi[0] - lo[0] + 1), int(hi[1] - lo[1] + 1)


def _read(path, ext):
    """(H, W, 4) float32 linear premultiplied RGBA of one frame file."""
    if ext == "png":
        return read_png_linear(path)
    ch = read_exr(path)
    if not {"R", "G", "B"} <= set(ch) and "Y" not in ch:
        raise ValueError(f"folder: {path!r} has no R, G, B channels (has {', '.join(sorted(ch))})")
    h, w = next(iter(ch.values())).shape
    out = np.empty((h, w, 4), dtype=np.float32)
    for i, c in enumerate("RGB"):
        out[..., i] = ch[c] if c in ch else ch["Y"]
    out[..., 3] = ch["A"] if "A" in ch else 1.0
    return out


def pack_folder(folder, *, name=None, columns=None, rows=None, padding=0, pow2=False, format=None, fps=None,
                loop=None, force=False):
    """Build ``{name}.sheet.{png|exr}`` and ``{name}.sheet.json`` from numbered frames.

    Parameters
    ----------
    folder : str or os.PathLike
        Folder holding the frames; the sheet is written there too.
    name : str, optional
        Which frames, when the folder holds several names.
    columns, rows, padding, pow2
        Sheet layout, see :func:`splatter.deliver.sheet.sheet_layout`.
    format : {"png", "exr"}, optional
        Sheet format. Default: that of the frames; when both PNG and EXR
        frames exist the EXR frames are read and a PNG sheet is written.
        PNG sheets from 16-bit PNG frames are 16-bit.
    fps : float, optional
        Stored in the metadata. Default: that of the sheet metadata already
        in the folder, else the render manifest's, else 30.
    loop : {"none", "exact", "crossfade"}, optional
        Stored in the metadata. Default: the render manifest's clip loop when
        the frames packed are the whole clip, else that of the sheet metadata
        already in the folder when it holds the same frames, else "none".
    force : bool
        Overwrite a sheet whose metadata lists map sheets when the new layout
        differs from theirs: the map sheets are removed (they would no longer
        match). Without it that is refused; with the same layout the map
        entries are kept.

    Returns
    -------
    list of str
        Paths written: the sheet image and its JSON.

    Raises
    ------
    ValueError
        Empty folder, several names, gaps in the numbering, frames of
        different sizes, bad layout options, map sheets a new layout would
        leave wrong (without ``force``).
    """
    if format is not None:
        check_choice(format, "format", FRAME_FORMATS)
    if loop is not None:
        check_choice(loop, "loop", LOOP_MODES)
    folder = os.fspath(folder)
    name, ext, paths = find_frames(folder, name=name)
    kinds = {e for e in FRAME_FORMATS if os.path.exists(paths[0][: -len(ext)] + e)}
    out_format = format or (ext if len(kinds) == 1 else "png")
    sizes = [_size(p, ext) for p in paths]
    if len(set(sizes)) > 1:
        w0, h0 = sizes[0]
        bad = next(p for p, s in zip(paths, sizes) if s != sizes[0])
        bw, bh = sizes[paths.index(bad)]
        raise ValueError(
            f"folder: frames differ in size: {os.path.basename(paths[0])} is {w0} x {h0}, "
            f"{os.path.basename(bad)} is {bw} x {bh}"
        )
    fw, fh = sizes[0]
    png_bits = 8
    if ext == "png" and out_format == "png":
        png_bits = 16 if any(read_png_depth(p) == 16 for p in paths) else 8
    numbers = [int(FRAME_FILE.match(os.path.basename(p))["frame"]) for p in paths]
    layout = sheet_layout(len(paths), fw, fh, columns=columns, rows=rows, padding=padding, pow2=pow2,
                          numbers=numbers)
    fps, loop, maps, drop = _kept_metadata(folder, name, layout, numbers, fps, loop, force)
    frames = (_read(p, ext) for p in paths)  # one at a time: memory O(sheet)
    written = write_sheet(folder, name, frames, layout, format=out_format, png_bits=png_bits, fps=fps, loop=loop,
                          maps=maps)
    for f in drop:
        with contextlib.suppress(FileNotFoundError):
            os.remove(os.path.join(folder, f))
    note_files(folder, name, added=written, removed=drop)
    return written


def _kept_metadata(folder, name, layout, numbers, fps, loop, force):
    """fps, loop and map entries for the new sheet, from what the folder already says; map files to remove."""
    old = None
    with contextlib.suppress(OSError, ValueError):
        with open(os.path.join(folder, sheet_meta_file(name)), encoding="utf-8") as f:
            old = json.load(f)
    if not isinstance(old, dict):
        old = None
    manifest = read_manifest(folder, name)
    if fps is None:
        fps = (old or {}).get("fps") or (manifest or {}).get("fps") or 30.0
    if loop is None:
        loop = "none"
        if manifest is not None and numbers == list(range(manifest.get("clip_frames", -1))):
            loop = manifest.get("loop", "none")
        elif old is not None and [c.get("frame") for c in old.get("cells", [])] == numbers:
            loop = old.get("loop", "none")
    maps = dict((old or {}).get("maps") or {})
    drop = []
    if maps:
        new = layout.to_json()
        if all(old.get(k) == v for k, v in new.items() if k != "resampled"):
            return fps, loop, maps, drop
        if not force:
            raise ValueError(
                f"{sheet_meta_file(name)} lists map sheets ({', '.join(sorted(maps))}) laid out as "
                f"{old.get('columns')} x {old.get('rows')} cells of {old.get('cell_width')} x {old.get('cell_height')} "
                f"px; the new layout ({layout.columns} x {layout.rows} cells of {layout.cell_width} x "
                f"{layout.cell_height} px) would leave them wrong. Pack with the same layout to keep them, or pass "
                "--force to write the sheet without them (the map sheets are removed)")
        for entry in maps.values():
            drop += [f for f in entry.get("files", [entry.get("file")]) if isinstance(f, str) and "/" not in f]
        maps = {}
    return fps, loop, maps, drop


def read_png_depth(path):
    """Bit depth from a PNG's IHDR chunk (8 or 16 for the files we read)."""
    with open(path, "rb") as f:
        head = f.read(26)
    if head[:8] != b"\x89PNG\r\n\x1a\n" or head[12:16] != b"IHDR":
        raise ValueError(f"folder: {path!r} is not a PNG file")
    return head[24]
