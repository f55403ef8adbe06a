"""Where finished frames go: frame files, sprite sheets, previews, map sheets, map frames.

:class:`OutputSink` receives each composited frame in order and writes its
frame files on a background thread (so encoding and writing overlap the
compositing of the next frame); at :meth:`OutputSink.finish` it writes the
sheets and previews, which need the whole clip.  Frames kept for sheets cost
little memory: PNG sheets are encoded cell row by cell row as frames come
(:class:`~splatter.deliver.sheet.CodeSheetStream`), EXR sheets are held at
their file's pixel type, the normal and light-direction map sheets are
encoded like the colour sheet
(:class:`~splatter.deliver.map_sheets.ArrivalMapSheets`), GIF frames kept as
palette images (one byte a pixel), MP4 frames encoded as they come and the
contact sheet kept as its finished 8-bit image. Only the motion and depth
layers (and alpha) of every frame wait for the end, for their clip-wide
ranges.
"""

from __future__ import annotations

import math
import os
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Callable, Dict, List, Optional, Sequence

import numpy as np

from splatter.core.sheet_grid import partial_grid
from splatter.deliver.exr import rgba_channels, write_exr
from splatter.deliver.map_encode import normal_convention
from splatter.deliver.map_frames import is_ranged, keeps_ranged_layers, write_map_frame, write_ranged_map_frames
from splatter.deliver.map_sheets import ArrivalMapSheets, write_depth_sheet, write_motion_sheet
from splatter.deliver.names import file_stem, frame_file, preview_file
from splatter.deliver.png import write_png
from splatter.deliver.preview import (
    ContactSheet,
    gif_frame,
    over_checker,
    write_gif_codes,
    Mp4Stream,
)
from splatter.deliver.sheet import (
    CodeSheetStream,
    empty_sheet,
    encode_cell,
    place_frame,
    sheet_layout,
    write_sheet_image,
)
from splatter.core.errors import LookError
from splatter.look.records import LookSpec

__all__ = ["OutputSink", "NORMAL_ATTRIBUTE", "check_outputs"]

_PREVIEW_MAX = 512  # GIF and MP4 frames fit this many pixels on a side
_CONTACT_MAX = 256  # contact-sheet thumbnails fit this
_MAX_PENDING = 3

NORMAL_ATTRIBUTE = "splatter.normal_convention"
"""EXR header attribute of frames with normal layers: ``"+y up"`` or ``"+y down"``, what ``normal.y`` holds."""


def _convention(out) -> str:
    return normal_convention(out.normal_y == "down")


def check_outputs(look: LookSpec, n_frames: int, frames: Optional[Sequence[int]] = None):
    """Lay out the sheet for ``n_frames`` frames (numbered ``frames``, default ``0 .. n_frames - 1``)
    as the render will, before any frame is rendered.

    Returns
    -------
    SheetLayout or None
        None when the look asks for no sheet.

    Raises
    ------
    LookError
        The sheet options cannot hold these frames (for example padding
        that leaves no room in a power-of-two cell of 16 px frames).
    """
    spec = look.output.sheet
    if spec is None:
        return None
    n = max(1, n_frames)
    numbers = list(range(n)) if frames is None else [int(f) for f in frames][:n]
    cols, rows = (spec.columns, spec.rows) if numbers == list(range(look.clip.frames)) else partial_grid(
        n, spec.columns, spec.rows, spec.pow2)
    try:
        return sheet_layout(n, look.image.width, look.image.height, columns=cols, rows=rows, padding=spec.padding,
                            pow2=spec.pow2, cell=spec.cell, numbers=numbers if len(numbers) == n else None)
    except ValueError as err:
        raise LookError(look.path, "output.sheet",
                        f"sheet options that fit {n_frames} frames of {look.image.width} x {look.image.height} px",
                        str(err)) from None


class OutputSink:
    """Write what the look's ``[output]`` asks for, frame by frame.

    Parameters
    ----------
    look : LookSpec
    out_dir : str
        Existing output folder.
    n_frames : int
        How many frames will be added (the sheet's grid is laid out for them).
    frames : sequence of int, optional
        The frame numbers that will be added, in order (default ``0 ..
        n_frames - 1``). The sheet's cells carry them, and a sheet that does
        not hold the whole clip ``0 .. clip.frames - 1`` is laid out for the
        frames it holds and says ``loop: "none"`` (it does not loop).
    loop : str, optional
        What the clip really is, for the sheet metadata (the plan's
        ``effective_loop``: ``"none"`` when an exact loop is broken);
        default ``clip.loop``.

    Notes
    -----
    Work that needs only one frame happens on the writer thread as frames
    arrive, overlapping the compositing of the next: frame files, the frame's
    sheet cell (PNG sheets are encoded cell by cell, so memory is one 8/16-bit
    sheet, not every frame), the preview frames over the checker, and the normal and
    light-direction map PNGs of ``output.map_frames``, and the frame's tiles of the
    normal and light-direction sheets (encoded on their own, like the colour
    sheet's cells). The motion and depth sheets and map PNGs keep their layers
    and the frames' alpha until the end, since their encodings use clip-wide
    ranges; they are then written one cell row at a time.

    :attr:`on_frame`, when set, is called on the writer thread once a
    frame's files are in place, with the frame number, the paths written
    and the frame's share of the sheets, previews and clip-wide map files (a
    dict of arrays that :meth:`add_kept` takes back): a render keeps it so
    ``--resume`` can skip the frame.
    """

    def __init__(self, look: LookSpec, out_dir: str, n_frames: int, frames: Optional[Sequence[int]] = None,
                 loop: Optional[str] = None):
        self.look = look
        self.loop = look.clip.loop if loop is None else loop
        self.numbers = list(range(n_frames)) if frames is None else [int(f) for f in frames]
        check_outputs(look, n_frames, self.numbers)  # a bad sheet fails here, before the first frame is rendered
        self.out_dir = out_dir
        self.n_frames = n_frames
        self.whole_clip = self.numbers == list(range(look.clip.frames))
        self.files: List[str] = []
        self.write_seconds = 0.0
        self._lock = threading.Lock()
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="splatter-writer")
        self._pending: List[Future] = []
        self._layout = None
        self._sheet = None
        self._arrival: Optional[ArrivalMapSheets] = None  # normal and light-direction sheets
        self._sheet_alpha: List[np.ndarray] = []
        self._sheet_layers: Dict[str, List[np.ndarray]] = {}
        self._gif: List = []  # palette images (gif_frame)
        self._mp4: Optional[Mp4Stream] = None  # opened at the first frame, frames piped to ffmpeg as they come
        self._contact: Optional[ContactSheet] = None
        self._frame_numbers: List[int] = []
        self.on_frame: Optional[Callable[[int, List[str], Dict[str, np.ndarray]], None]] = None

    # ------------------------------------------------------------ per frame

    def add(self, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        """Queue one frame: premultiplied linear ``rgba (H, W, 4) float32`` and straight map ``layers``."""
        index = self._start(frame, rgba.shape[:2])
        keep = self._kept_layers(layers)
        if keep:
            self._sheet_alpha.append(rgba[..., 3].copy())  # a view would keep the whole RGBA frame alive
            for k, v in keep.items():
                self._sheet_layers.setdefault(k, []).append(v)
        self._submit(self._take_frame, index, frame, rgba, layers)

    def add_kept(self, frame: int, kept: Dict[str, np.ndarray]) -> None:
        """Queue one frame an earlier run of the same render finished (``render --resume``).

        ``kept`` is what :attr:`on_frame` was given for it: its frame files
        exist, so only its share of the sheets and previews is merged, which
        gives the same bytes as rendering it again.
        """
        index = self._start(frame, tuple(kept["shape"]))
        names = [k[len("layer:"):] for k in kept if k.startswith("layer:")]
        if names:
            self._sheet_alpha.append(kept["alpha"])
        for k in names:
            self._sheet_layers.setdefault(k, []).append(kept["layer:" + k])
        self._submit(self._merge, index, kept)

    def _kept_layers(self, layers: Dict[str, np.ndarray]) -> Dict[str, np.ndarray]:
        """The map layers kept to the end: the motion and depth layers of the map sheets and
        ``map_frames``, whose encodings use clip-wide ranges (normal and light-direction
        sheets are encoded as frames arrive)."""
        if not keeps_ranged_layers(self.look.output):
            return {}
        return {k: v for k, v in layers.items() if is_ranged(k)}

    def _start(self, frame: int, shape) -> int:
        """Record ``frame``; lay the sheet out on the first one. Returns its index (its cell)."""
        out = self.look.output
        index = len(self._frame_numbers)
        self._frame_numbers.append(frame)
        if out.sheet is not None and self._layout is None:
            spec = out.sheet
            h, w = int(shape[0]), int(shape[1])
            n = max(self.n_frames, 1)
            cols, rows = (spec.columns, spec.rows) if self.whole_clip else partial_grid(
                n, spec.columns, spec.rows, spec.pow2)
            self._layout = sheet_layout(n, w, h, columns=cols, rows=rows, padding=spec.padding, pow2=spec.pow2,
                                        cell=spec.cell, numbers=self.numbers[:n])
            if spec.format == "png":  # encoded cell row by cell row as frames arrive
                self._sheet = CodeSheetStream(self._layout, out.png_bits, alpha=out.png_alpha)
            else:  # held at the file's pixel type: float16 rounds as the EXR writer would
                self._sheet = empty_sheet(self._layout, 4, dtype=np.float16 if out.exr_type == "half" else np.float32)
            self._arrival = ArrivalMapSheets(self._layout, out.maps, format=spec.format, png_bits=out.png_bits,
                                             exr_type=out.exr_type, y_down=out.normal_y == "down") or None
        return index

    def _submit(self, fn, *args) -> None:
        while len(self._pending) >= _MAX_PENDING:
            self._pending.pop(0).result()
        self._pending.append(self._pool.submit(fn, *args))

    def _take_frame(self, index: int, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        """On the writer thread: everything one frame alone decides."""
        start = time.perf_counter()
        out = self.look.output
        written = self._write_frame(frame, rgba, layers) if out.frames else []
        if out.map_frames and layers:
            files = write_map_frame(self.out_dir, file_stem(self.look), frame, layers, rgba[..., 3],
                                    png_bits=out.png_bits, y_down=out.normal_y == "down")
            with self._lock:
                self.files.extend(files)
            written += files
        part = {"shape": np.array(rgba.shape[:2])}
        if self._sheet is not None:
            if out.sheet.format == "png":
                part["tile"] = encode_cell(self._layout, index, rgba, alpha=out.png_alpha, png_bits=out.png_bits,
                                           exposure=self.look.shading.exposure)
            else:
                place_frame(self._sheet, self._layout, index, rgba)
                c = self._layout.cells[index]
                part["tile"] = self._sheet[c.y : c.y + c.h, c.x : c.x + c.w].copy()
        if self._arrival is not None:
            part.update(self._arrival.tiles(index, layers, rgba[..., 3]))
        if out.preview:
            exp = self.look.shading.exposure
            if set(out.preview) - {"contact"}:
                anim = _shrink(rgba, _PREVIEW_MAX)
                if "mp4" in out.preview and (anim.shape[0] % 2 or anim.shape[1] % 2):
                    # yuv420p needs even sizes: extend with transparent texels (the checker shows).
                    anim = np.pad(anim, ((0, anim.shape[0] % 2), (0, anim.shape[1] % 2), (0, 0)))
                part["anim"] = over_checker(anim, exposure=exp)
            if "contact" in out.preview:
                part["thumb"] = over_checker(_shrink(rgba, _CONTACT_MAX), exposure=exp)
        self._merge(index, part)
        if self.on_frame is not None:
            keep = self._kept_layers(layers)
            if keep:
                part["alpha"] = rgba[..., 3]
                part.update(("layer:" + k, v) for k, v in keep.items())
            self.on_frame(frame, written, part)
        with self._lock:
            self.write_seconds += time.perf_counter() - start

    def _merge(self, index: int, part: Dict[str, np.ndarray]) -> None:
        """On the writer thread: put one frame's share into the sheet and previews (frames arrive in order)."""
        if self._sheet is not None:
            if self.look.output.sheet.format == "png":
                self._sheet.put(index, part["tile"])
            else:
                c = self._layout.cells[index]
                self._sheet[c.y : c.y + c.h, c.x : c.x + c.w] = part["tile"]
        if self._arrival is not None:
            self._arrival.put(index, part)
        if "anim" in part:
            if "gif" in self.look.output.preview:
                self._gif.append(gif_frame(part["anim"]))
            if "mp4" in self.look.output.preview:
                if self._mp4 is None:
                    self._mp4 = Mp4Stream(os.path.join(self.out_dir, preview_file(file_stem(self.look), "mp4")),
                                          self.look.clip.fps)
                self._mp4.add(part["anim"])
        if "thumb" in part:
            if self._contact is None:
                self._contact = ContactSheet(self.numbers[: self.n_frames], *part["thumb"].shape[:2])
            self._contact.put(index, part["thumb"])

    def _write_frame(self, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> List[str]:
        out, name = self.look.output, file_stem(self.look)
        written = []
        for ext in out.frames:
            path = os.path.join(self.out_dir, frame_file(name, frame, ext))
            if ext == "png":
                write_png(path, rgba, bits=out.png_bits, alpha=out.png_alpha, exposure=self.look.shading.exposure,
                          dilate=out.dilate)
            else:
                channels = rgba_channels(rgba)
                channels.update(layers)
                attrs = {NORMAL_ATTRIBUTE: _convention(out)} if "normal.x" in layers else None
                write_exr(path, channels, pixel_type=out.exr_type, attributes=attrs)
            written.append(path)
        with self._lock:
            self.files.extend(written)
        return written

    # ------------------------------------------------------------ the end

    def finish(self) -> List[str]:
        """Wait for frame files, then write sheets and previews; return every file written."""
        for fut in self._pending:
            fut.result()
        self._pending.clear()
        self._pool.shutdown(wait=True)
        start = time.perf_counter()
        if self._sheet is not None:
            self._write_sheets()
        if self.look.output.map_frames and self._sheet_layers:
            self.files += write_ranged_map_frames(self.out_dir, file_stem(self.look), self._frame_numbers,
                                                  self._sheet_layers, self._sheet_alpha,
                                                  png_bits=self.look.output.png_bits)
        if self._frame_numbers and self.look.output.preview:
            self._write_previews()
        self.write_seconds += time.perf_counter() - start
        return sorted(self.files)

    def abort(self) -> None:
        """Stop the writer thread without writing sheets or previews (the unfinished MP4 is removed)."""
        for fut in self._pending:
            fut.cancel()
        self._pool.shutdown(wait=True, cancel_futures=True)
        mp4, self._mp4 = self._mp4, None
        if mp4 is not None:
            mp4.abort()

    def _write_sheets(self) -> None:
        look, spec, layout = self.look, self.look.output.sheet, self._layout
        if [c.frame for c in layout.cells] != self._frame_numbers:
            raise RuntimeError(f"the sheet was laid out for frames {[c.frame for c in layout.cells]}, "
                               f"frames {self._frame_numbers} came")
        w, h = layout.frame_width, layout.frame_height
        layers = self._sheet_layers
        alpha = self._sheet_alpha
        common = dict(format=spec.format, png_bits=look.output.png_bits, exr_type=look.output.exr_type)
        maps = {}
        d, name = self.out_dir, file_stem(look)
        if "motion.x" in layers:
            maps["motion"] = write_motion_sheet(d, name, layout, layers, alpha, w, h, common)
        if "depth.z" in layers:
            maps["depth"] = write_depth_sheet(d, name, layout, layers["depth.z"], alpha, common)
        if self._arrival is not None:
            maps.update(self._arrival.write(d, name))
            self._arrival = None
        for entry in maps.values():
            for f in entry.get("files", [entry.get("file")]):
                self.files.append(os.path.join(self.out_dir, f))
        sheet, self._sheet = self._sheet, None
        loop = self.loop if self.whole_clip else "none"  # a part of a loop does not loop
        if spec.format == "png":
            self.files += sheet.write(self.out_dir, name, fps=look.clip.fps, loop=loop, maps=maps)
            return
        self.files += write_sheet_image(
            self.out_dir, name, sheet, layout, format=spec.format, alpha=look.output.png_alpha,
            png_bits=look.output.png_bits, exr_type=look.output.exr_type, fps=look.clip.fps, loop=loop,
            maps=maps, exposure=look.shading.exposure,
        )

    def _write_previews(self) -> None:
        look, d, name = self.look, self.out_dir, file_stem(self.look)
        for kind in look.output.preview:
            path = os.path.join(d, preview_file(name, kind))
            if kind == "gif":
                frames, self._gif = self._gif, []
                write_gif_codes(path, _drain(frames), look.clip.fps, n_frames=len(frames))
            elif kind == "mp4":
                mp4, self._mp4 = self._mp4, None
                mp4.write()
            else:
                contact, self._contact = self._contact, None
                contact.write(path)
            self.files.append(path)


def _shrink(rgba: np.ndarray, limit: int) -> np.ndarray:
    """Box-filter a premultiplied frame down by a whole factor until it fits ``limit``."""
    h, w = rgba.shape[:2]
    f = max(1, math.ceil(max(h, w) / limit))
    if f == 1:
        return rgba
    h2, w2 = h // f, w // f
    return rgba[: h2 * f, : w2 * f].reshape(h2, f, w2, f, 4).mean(axis=(1, 3)).astype(np.float32)


def _drain(items: list):
    """Yield the items of ``items`` first to last, dropping each from the list as it goes."""
    items.reverse()
    while items:
        yield items.pop()
