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
from typing import Dict, List

import numpy as np

from splatter.encode import encode_depth, encode_normal, encode_signed
from splatter.look import LookSpec
from splatter.preview import write_contact_sheet, write_gif, write_mp4
from splatter.sheet import sheet_layout, write_lightdirs_sheets, write_map_sheet, write_sheet
from splatter.write_exr import rgba_channels, write_exr
from splatter.write_png import write_png

__all__ = ["OutputSink", "planned_files"]

_PREVIEW_MAX = 512
_MAX_PENDING = 3
_COVERED = 1.0 / 255.0
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


def planned_files(look: LookSpec, out_dir: str, frames) -> List[str]:
    """The files a render of ``frames`` would write, for ``splatter check``."""
    name, out = look.name, look.output
    files = [os.path.join(out_dir, f"{name}.{f:04d}.{ext}") for ext in out.frames for f in frames]
    if out.sheet is not None:
        fmt = out.sheet.format
        files += [os.path.join(out_dir, f"{name}.sheet.{fmt}"), os.path.join(out_dir, f"{name}.sheet.json")]
        for m in out.maps:
            if m == "lightdirs":
                files += [os.path.join(out_dir, f"{name}.lightdirs_{s}.sheet.png") for s in ("rlt", "bfb")]
            else:
                files.append(os.path.join(out_dir, f"{name}.{m}.sheet.{fmt}"))
    for p in out.preview:
        files.append(os.path.join(out_dir, f"{name}.contact.png" if p == "contact" else f"{name}.preview.{p}"))
    return files


class OutputSink:
    """Write what the look's ``[output]`` asks for, frame by frame.

    Parameters
    ----------
    look : LookSpec
    out_dir : str
        Existing output folder.
    """

    def __init__(self, look: LookSpec, out_dir: str):
        self.look = look
        self.out_dir = out_dir
        self.files: List[str] = []
        self.write_seconds = 0.0
        self._lock = threading.Lock()
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="splatter-writer")
        self._pending: List[Future] = []
        self._sheet_frames: List[np.ndarray] = []
        self._sheet_layers: Dict[str, List[np.ndarray]] = {}
        self._preview: List[np.ndarray] = []
        self._frame_numbers: List[int] = []

    # ------------------------------------------------------------ per frame

    def add(self, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        """Queue one frame: premultiplied linear ``rgba (H, W, 4) float32`` and straight map ``layers``."""
        out = self.look.output
        self._frame_numbers.append(frame)
        if out.sheet is not None:
            self._sheet_frames.append(rgba)
            for k, v in layers.items():
                self._sheet_layers.setdefault(k, []).append(v)
        if out.preview:
            self._preview.append(_shrink(rgba, _PREVIEW_MAX))
        if out.frames:
            while len(self._pending) >= _MAX_PENDING:
                self._pending.pop(0).result()
            self._pending.append(self._pool.submit(self._write_frame, frame, rgba, layers))

    def _write_frame(self, frame: int, rgba: np.ndarray, layers: Dict[str, np.ndarray]) -> None:
        start = time.perf_counter()
        out, name = self.look.output, self.look.name
        written = []
        for ext in out.frames:
            path = os.path.join(self.out_dir, f"{name}.{frame:04d}.{ext}")
            if ext == "png":
                write_png(path, rgba, bits=out.png_bits, alpha=out.png_alpha, exposure=self.look.shading.exposure)
            else:
                channels = rgba_channels(rgba)
                channels.update(layers)
                write_exr(path, channels, pixel_type=out.exr_type)
            written.append(path)
        with self._lock:
            self.files.extend(written)
            self.write_seconds += time.perf_counter() - start

    # ------------------------------------------------------------ the end

    def finish(self) -> List[str]:
        """Wait for frame files, then write sheets and previews; return every file written."""
        for fut in self._pending:
            fut.result()
        self._pending.clear()
        self._pool.shutdown(wait=True)
        start = time.perf_counter()
        if self.look.output.sheet is not None and self._sheet_frames:
            self._write_sheets()
        if self._preview:
            self._write_previews()
        self.write_seconds += time.perf_counter() - start
        return sorted(self.files)

    def abort(self) -> None:
        """Stop the writer thread without writing sheets or previews."""
        for fut in self._pending:
            fut.cancel()
        self._pool.shutdown(wait=True, cancel_futures=True)

    def _write_sheets(self) -> None:
        look, spec = self.look, self.look.output.sheet
        h, w = self._sheet_frames[0].shape[:2]
        layout = sheet_layout(
            len(self._sheet_frames), w, h, columns=spec.columns, rows=spec.rows, padding=spec.padding, pow2=spec.pow2
        )
        layers = self._sheet_layers
        alpha = [f[..., 3] for f in self._sheet_frames]
        common = dict(format=spec.format, png_bits=look.output.png_bits, exr_type=look.output.exr_type)
        maps = {}
        if "motion.x" in layers:
            maps["motion"] = self._motion_sheet(layout, layers, alpha, w, h, common)
        if "depth.z" in layers:
            maps["depth"] = self._depth_sheet(layout, layers["depth.z"], alpha, common)
        if "normal.x" in layers:
            maps["normal"] = self._normal_sheet(layout, layers, alpha, common)
        if "lightdirs.right" in layers:
            maps["lightdirs"] = self._lightdirs_sheets(layout, layers, alpha)
        for entry in maps.values():
            for f in entry.get("files", [entry.get("file")]):
                self.files.append(os.path.join(self.out_dir, f))
        self.files += write_sheet(
            self.out_dir, look.name, self._sheet_frames, layout, format=spec.format, alpha=look.output.png_alpha,
            png_bits=look.output.png_bits, exr_type=look.output.exr_type, fps=look.clip.fps, loop=look.clip.loop,
            maps=maps, exposure=look.shading.exposure,
        )

    def _motion_sheet(self, layout, layers, alpha, w, h, common) -> dict:
        """Screen motion in sheet UV units per frame; the scale is the clip's largest."""
        # Pixels per frame -> sheet UV units per frame (cells may be resampled).
        sx = layout.cells[0].w / w / layout.width
        sy = layout.cells[0].h / h / layout.height
        d_uv = [np.stack([mx * sx, my * sy], axis=-1) for mx, my in zip(layers["motion.x"], layers["motion.y"])]
        peak = max((float(np.abs(d[a > _COVERED]).max(initial=0.0)) for d, a in zip(d_uv, alpha)), default=0.0)
        scale = _round_up_2sig(max(peak, 1e-6))
        png = common["format"] == "png"
        if png:
            frames, enc = [encode_signed(_fade(d, a, 0.0), scale) for d, a in zip(d_uv, alpha)], "0.5+0.5*clamp(d/s,-1,1)"
        else:
            frames, enc = d_uv, "raw"
        return write_map_sheet(self.out_dir, self.look.name, "motion", frames, layout, encoding=enc,
                               channels=("x", "y"), background=(0.5, 0.5) if png else (0.0, 0.0), scale=scale,
                               units="sheet uv per frame", **common)

    def _depth_sheet(self, layout, depths, alpha, common) -> dict:
        """Alpha-weighted view depth; PNG normalised between the clip's nearest and farthest smoke."""
        zs = [z[a > _COVERED] for z, a in zip(depths, alpha)]
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
        return write_map_sheet(self.out_dir, self.look.name, "depth", frames, layout, encoding=enc, channels=("z",),
                               background=(1.0,) if png else (far,), near=near, far=far, units="world", **common)

    def _normal_sheet(self, layout, layers, alpha, common) -> dict:
        """View-space normals; PNG encoded n * 0.5 + 0.5 in the look's Y convention."""
        y_down = self.look.output.normal_y == "down"
        normals = [np.stack([layers[f"normal.{c}"][i] for c in "xyz"], axis=-1) for i in range(len(alpha))]
        png = common["format"] == "png"
        if png:
            frames, enc = [encode_normal(n, y_down=y_down) for n in normals], "n*0.5+0.5"
        else:
            frames, enc = normals, "raw"
        return write_map_sheet(self.out_dir, self.look.name, "normal", frames, layout, encoding=enc,
                               channels=("x", "y", "z"), background=(0.5, 0.5, 1.0) if png else (0.0, 0.0, 1.0),
                               convention="+y down" if y_down else "+y up", **common)

    def _lightdirs_sheets(self, layout, layers, alpha) -> dict:
        """Six light-direction factors packed into two RGB PNG sheets."""
        def pack(sides):
            return [_fade(np.stack([layers[f"lightdirs.{s}"][i] for s in sides], -1), a, 0.0)
                    for i, a in enumerate(alpha)]

        return write_lightdirs_sheets(self.out_dir, self.look.name, pack(("right", "left", "top")),
                                      pack(("bottom", "front", "back")), layout, png_bits=self.look.output.png_bits)

    def _write_previews(self) -> None:
        look, d, name = self.look, self.out_dir, self.look.name
        exp = look.shading.exposure
        for kind in look.output.preview:
            if kind == "gif":
                path = os.path.join(d, f"{name}.preview.gif")
                write_gif(path, self._preview, look.clip.fps, exposure=exp)
            elif kind == "mp4":
                path = os.path.join(d, f"{name}.preview.mp4")
                write_mp4(path, self._preview, look.clip.fps, exposure=exp)
            else:
                path = os.path.join(d, f"{name}.contact.png")
                write_contact_sheet(path, self._preview, numbers=self._frame_numbers, exposure=exp)
            self.files.append(path)


def _round_up_2sig(x: float) -> float:
    """Round up to two significant digits, so the stored scale reads cleanly."""
    e = math.floor(math.log10(x)) - 1
    return math.ceil(x / 10.0**e) * 10.0**e


def _shrink(rgba: np.ndarray, limit: int) -> np.ndarray:
    """Box-filter a premultiplied frame down by a whole factor until it fits ``limit``."""
    h, w = rgba.shape[:2]
    f = max(1, math.ceil(max(h, w) / limit))
    if f == 1:
        return rgba
    h2, w2 = h // f, w // f
    return rgba[: h2 * f, : w2 * f].reshape(h2, f, w2, f, 4).mean(axis=(1, 3)).astype(np.float32)
