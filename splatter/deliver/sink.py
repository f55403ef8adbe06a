"""Where finished frames go: frame files, sprite sheets, previews, map sheets.

:class:`OutputSink` receives each composited frame in order and writes its
frame files on a background thread (so encoding and writing overlap the
compositing of the next frame); at :meth:`OutputSink.finish` it writes the
sheets and previews, which need the whole clip.  Frames kept for sheets cost
about one sheet of memory (every frame is a cell of it); previews keep a copy
no larger than 512 px on a side.
"""

from __future__ import annotations

import math
import os
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Dict, List, Optional

import numpy as np

from splatter.deliver.exr import rgba_channels, write_exr
from splatter.deliver.map_sheets import (
    write_depth_sheet,
    write_lightdirs_map,
    write_motion_sheet,
    write_normal_sheet,
)
from splatter.deliver.names import frame_file, preview_file
from splatter.deliver.png import write_png
from splatter.deliver.preview import (
    over_checker,
    write_contact_codes,
    write_gif_codes,
    write_mp4_codes,
)
from splatter.deliver.sheet import (
    empty_codes,
    empty_sheet,
    place_frame,
    put_cell_codes,
    sheet_layout,
    write_sheet_codes,
    write_sheet_image,
)
from splatter.core.errors import LookError
from splatter.look.records import LookSpec

__all__ = ["OutputSink", "check_outputs"]

_PREVIEW_MAX = 512  # GIF and MP4 frames fit this many pixels on a side
_CONTACT_MAX = 256  # contact-sheet thumbnails fit this
_MAX_PENDING = 3


def check_outputs(look: LookSpec, n_frames: int):
    """Lay out the sheet for ``n_frames`` frames as the render will, before any frame is rendered.

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
    try:
        return sheet_layout(max(1, n_frames), look.image.width, look.image.height, columns=spec.columns,
                            rows=spec.rows, padding=spec.padding, pow2=spec.pow2, cell=spec.cell)
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
    loop : str, optional
        What the clip really is, for the sheet metadata (the plan's
        ``effective_loop``: ``"none"`` when an exact loop is broken);
        default ``clip.loop``.

    Notes
    -----
    Work that needs only one frame happens on the writer thread as frames
    arrive, overlapping the compositing of the next: frame files, the frame's
    sheet cell (PNG sheets are encoded cell by cell, so memory is one 8/16-bit
    sheet, not every frame), and the preview frames over the checker. Map sheets keep their layers and the
    frames' alpha until the end, since their encodings use clip-wide ranges.
    """

    def __init__(self, look: LookSpec, out_dir: str, n_frames: int, loop: Optional[str] = None):
        self.look = look
        self.loop = look.clip.loop if loop is None else loop
        check_outputs(look, n_frames)  # a bad sheet fails here, before the first frame is rendered
        self.out_dir = out_dir
        self.n_frames = n_frames
        self.files: List[str] = []
        self.write_seconds = 0.0
        self._lock = threading.Lock()
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="splatter-writer")
        self._pending: List[Future] = []
        self._layout = None
        self._sheet = None
        self._sheet_alpha: List[np.ndarray] = []
        self._sheet_layers: Dict[str, List[np.ndarray]] = {}
        self._anim: List[np.ndarray] = []
        self._thumbs: List[np.ndarray] = []
        self._frame_numbers: List[int] = []

    # ------------------------------------------------------------ per frame

    def add(self, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        """Queue one frame: premultiplied linear ``rgba (H, W, 4) float32`` and straight map ``layers``."""
        out = self.look.output
        index = len(self._frame_numbers)
        self._frame_numbers.append(frame)
        if out.sheet is not None:
            if self._layout is None:
                spec = out.sheet
                h, w = rgba.shape[:2]
                self._layout = sheet_layout(max(self.n_frames, 1), w, h, columns=spec.columns, rows=spec.rows,
                                            padding=spec.padding, pow2=spec.pow2, cell=spec.cell)
                if spec.format == "png":  # encoded cell by cell as frames arrive: memory one 8/16-bit sheet
                    self._sheet = empty_codes(self._layout, out.png_bits)
                else:
                    self._sheet = empty_sheet(self._layout, 4)
            if layers:
                self._sheet_alpha.append(rgba[..., 3])
            for k, v in layers.items():
                self._sheet_layers.setdefault(k, []).append(v)
        while len(self._pending) >= _MAX_PENDING:
            self._pending.pop(0).result()
        self._pending.append(self._pool.submit(self._take_frame, index, frame, rgba, layers))

    def _take_frame(self, index: int, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        """On the writer thread: everything one frame alone decides."""
        start = time.perf_counter()
        out = self.look.output
        if out.frames:
            self._write_frame(frame, rgba, layers)
        if self._sheet is not None:
            if out.sheet.format == "png":
                put_cell_codes(self._sheet, self._layout, index, rgba, alpha=out.png_alpha, png_bits=out.png_bits,
                               exposure=self.look.shading.exposure)
            else:
                place_frame(self._sheet, self._layout, index, rgba)
        if out.preview:
            exp = self.look.shading.exposure
            if set(out.preview) - {"contact"}:
                anim = _shrink(rgba, _PREVIEW_MAX)
                if "mp4" in out.preview and (anim.shape[0] % 2 or anim.shape[1] % 2):
                    # yuv420p needs even sizes: extend with transparent texels (the checker shows).
                    anim = np.pad(anim, ((0, anim.shape[0] % 2), (0, anim.shape[1] % 2), (0, 0)))
                self._anim.append(over_checker(anim, exposure=exp))
            if "contact" in out.preview:
                self._thumbs.append(over_checker(_shrink(rgba, _CONTACT_MAX), exposure=exp))
        with self._lock:
            self.write_seconds += time.perf_counter() - start

    def _write_frame(self, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        out, name = self.look.output, self.look.name
        written = []
        for ext in out.frames:
            path = os.path.join(self.out_dir, frame_file(name, frame, ext))
            if ext == "png":
                write_png(path, rgba, bits=out.png_bits, alpha=out.png_alpha, exposure=self.look.shading.exposure)
            else:
                channels = rgba_channels(rgba)
                channels.update(layers)
                write_exr(path, channels, pixel_type=out.exr_type)
            written.append(path)
        with self._lock:
            self.files.extend(written)

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
        if self._frame_numbers and self.look.output.preview:
            self._write_previews()
        self.write_seconds += time.perf_counter() - start
        return sorted(self.files)

    def abort(self) -> None:
        """Stop the writer thread without writing sheets or previews."""
        for fut in self._pending:
            fut.cancel()
        self._pool.shutdown(wait=True, cancel_futures=True)

    def _write_sheets(self) -> None:
        look, spec, layout = self.look, self.look.output.sheet, self._layout
        if len(self._frame_numbers) != layout.frames:
            raise RuntimeError(f"the sheet was laid out for {layout.frames} frames, {len(self._frame_numbers)} came")
        w, h = layout.frame_width, layout.frame_height
        layers = self._sheet_layers
        alpha = self._sheet_alpha
        common = dict(format=spec.format, png_bits=look.output.png_bits, exr_type=look.output.exr_type)
        maps = {}
        d, name = self.out_dir, look.name
        if "motion.x" in layers:
            maps["motion"] = write_motion_sheet(d, name, layout, layers, alpha, w, h, common)
        if "depth.z" in layers:
            maps["depth"] = write_depth_sheet(d, name, layout, layers["depth.z"], alpha, common)
        if "normal.x" in layers:
            maps["normal"] = write_normal_sheet(d, name, layout, layers, alpha, common,
                                                y_down=look.output.normal_y == "down")
        if "lightdirs.right" in layers:
            maps["lightdirs"] = write_lightdirs_map(d, name, layout, layers, alpha, png_bits=look.output.png_bits)
        for entry in maps.values():
            for f in entry.get("files", [entry.get("file")]):
                self.files.append(os.path.join(self.out_dir, f))
        sheet, self._sheet = self._sheet, None
        if spec.format == "png":
            self.files += write_sheet_codes(self.out_dir, look.name, sheet, layout, alpha=look.output.png_alpha,
                                            fps=look.clip.fps, loop=self.loop, maps=maps)
            return
        self.files += write_sheet_image(
            self.out_dir, look.name, sheet, layout, format=spec.format, alpha=look.output.png_alpha,
            png_bits=look.output.png_bits, exr_type=look.output.exr_type, fps=look.clip.fps, loop=self.loop,
            maps=maps, exposure=look.shading.exposure,
        )

    def _write_previews(self) -> None:
        look, d, name = self.look, self.out_dir, self.look.name
        for kind in look.output.preview:
            path = os.path.join(d, preview_file(name, kind))
            if kind == "gif":
                write_gif_codes(path, self._anim, look.clip.fps)
            elif kind == "mp4":
                write_mp4_codes(path, self._anim, look.clip.fps)
            else:
                write_contact_codes(path, self._thumbs, numbers=self._frame_numbers)
            self.files.append(path)


def _shrink(rgba: np.ndarray, limit: int) -> np.ndarray:
    """Box-filter a premultiplied frame down by a whole factor until it fits ``limit``."""
    h, w = rgba.shape[:2]
    f = max(1, math.ceil(max(h, w) / limit))
    if f == 1:
        return rgba
    h2, w2 = h // f, w // f
    return rgba[: h2 * f, : w2 * f].reshape(h2, f, w2, f, 4).mean(axis=(1, 3)).astype(np.float32)
