"""The board: every variation's flipbook side by side over a checker, labelled, to pick from.

``board.png`` shows each variation's middle frame; ``board.gif`` plays every
flipbook at once, looping (each cell loops over its own frame count). Each
cell is the variation's frames scaled to fit the cell (premultiplied linear
colour is resampled, then composited over the grey checker the previews
use), with its label underneath: the seed and each varied value, in a
14 px font on a dark band so it reads at 100 %.

Examples
--------
>>> layout = board_layout(5, cell=(96, 64), lines=2)
>>> layout.columns, layout.size
(3, (304, 220))
>>> layout.cells[4]
(104, 112, 96, 64)
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import List, Optional, Sequence, Tuple

import numpy as np
from PIL import Image, ImageDraw, ImageFont

from splatter.deliver.fileio import atomic_path
from splatter.core.colorspace import srgb_decode
from splatter.deliver.exr import read_exr
from splatter.deliver.pack import find_frames
from splatter.deliver.png import read_png_linear
from splatter.deliver.preview import over_checker, write_gif_codes

__all__ = ["BoardCell", "BoardLayout", "board_layout", "write_board", "BOARD_PNG", "BOARD_GIF"]

BOARD_PNG = "board.png"
BOARD_GIF = "board.gif"

FONT_PX = 14
"""Label font size in pixels: legible at 100 % (about 10 px capitals)."""
_LINE = FONT_PX + 4
_PAD = 4  # around each label and between cells
_BOARD_WIDTH = 1536  # cells shrink (down to _MIN_CELL) so the board stays about this wide
_MIN_CELL, _MAX_CELL = 128, 256
_GIF_FRAMES = 96  # longer clips are stepped through
_BACKGROUND = (24, 24, 24)
_LABEL_BAND = (40, 40, 40)
_TEXT = (235, 235, 235)
_DIM_TEXT = (170, 120, 120)


@dataclass(frozen=True)
class BoardCell:
    """What one cell shows: its label lines, its variation's folder, and the look's exposure."""

    label: Sequence[str]
    folder: Optional[str]
    exposure: float = 0.0


@dataclass(frozen=True)
class BoardLayout:
    """Where the cells go.

    Attributes
    ----------
    columns : int
    size : (int, int)
        Board width and height in pixels.
    cells : list of (x, y, w, h)
        Each cell's picture.
    labels : list of (x, y, w, h)
        Each cell's label band, under its picture.
    """

    columns: int
    size: Tuple[int, int]
    cells: List[Tuple[int, int, int, int]]
    labels: List[Tuple[int, int, int, int]]


def board_layout(count: int, *, cell: Tuple[int, int], lines: int) -> BoardLayout:
    """A grid of ``count`` cells of ``cell = (w, h)`` pixels, each with ``lines`` label lines under it."""
    w, h = cell
    columns = max(1, math.ceil(math.sqrt(count)))
    rows = max(1, math.ceil(count / columns))
    band = lines * _LINE + _PAD
    cells, labels = [], []
    for i in range(count):
        r, c = divmod(i, columns)
        x = _PAD + c * (w + _PAD)
        y = _PAD + r * (h + band + _PAD)
        cells.append((x, y, w, h))
        labels.append((x, y + h, w, band))
    size = (_PAD + columns * (w + _PAD), _PAD + rows * (h + band + _PAD))
    return BoardLayout(columns=columns, size=size, cells=cells, labels=labels)


def _font():
    try:
        return ImageFont.load_default(size=FONT_PX)  # Pillow >= 10.1 with FreeType: a scalable font
    except (TypeError, OSError, ImportError):  # pragma: no cover - old Pillow or no FreeType
        return ImageFont.load_default()


def _fit_text(draw, text: str, font, width: int) -> str:
    """``text``, or a shorter form that fits ``width``: the key's last part, then cut with an ellipsis."""
    if draw.textlength(text, font=font) <= width:
        return text
    key, _, value = text.partition(" ")
    short = f"{key.rsplit('.', 1)[-1]} {value}" if value else text
    while short and draw.textlength(short + "…", font=font) > width:
        short = short[:-1]
    return short + "…" if short != text else short


def _cell_size(frame_shape: Tuple[int, int], columns: int) -> Tuple[int, int]:
    h, w = frame_shape
    side = int(np.clip(_BOARD_WIDTH // max(columns, 1) - _PAD, _MIN_CELL, _MAX_CELL))
    side = min(side, max(h, w, _MIN_CELL))  # small frames are not blown up past what the label needs
    scale = side / max(h, w)
    return max(1, round(w * scale)), max(1, round(h * scale))


def _resize(rgba: np.ndarray, size: Tuple[int, int]) -> np.ndarray:
    """Resample premultiplied linear RGBA to ``size = (w, h)`` (Lanczos down, nearest up for crisp pixels)."""
    if (rgba.shape[1], rgba.shape[0]) == size:
        return rgba
    up = size[0] > rgba.shape[1]
    method = Image.Resampling.NEAREST if up else Image.Resampling.LANCZOS
    planes = [np.asarray(Image.fromarray(np.ascontiguousarray(rgba[..., c]), mode="F").resize(size, method))
              for c in range(4)]
    out = np.stack(planes, axis=-1).astype(np.float32)
    out[..., 3] = np.clip(out[..., 3], 0.0, 1.0)
    np.clip(out[..., :3], 0.0, None, out=out[..., :3])
    return out


_PNG_RGBA8 = (8, 6)  # IHDR bit depth and colour type of 8-bit RGBA
_DECODE8 = None


def _read_png8_straight(path: str) -> Optional[np.ndarray]:
    """The common case fast (Pillow's C decoder and a 256-entry sRGB table); None for any other PNG."""
    global _DECODE8
    with open(path, "rb") as f:
        head = f.read(26)
    if len(head) < 26 or (head[24], head[25]) != _PNG_RGBA8:
        return None
    with Image.open(path) as im:
        if im.info.get("splatter.alpha") == "premultiplied":
            return None
        codes = np.asarray(im.convert("RGBA"))
    if _DECODE8 is None:
        _DECODE8 = srgb_decode(np.arange(256, dtype=np.float32) / np.float32(255.0)).astype(np.float32)
    alpha = codes[..., 3].astype(np.float32) / np.float32(255.0)
    rgba = np.empty(codes.shape, dtype=np.float32)
    rgba[..., :3] = _DECODE8[codes[..., :3]] * alpha[..., None]
    rgba[..., 3] = alpha
    return rgba


def read_frame(path: str, ext: str) -> np.ndarray:
    """(H, W, 4) float32 linear premultiplied RGBA of a frame splatter wrote (PNG or EXR)."""
    if ext == "png":
        fast = _read_png8_straight(path)
        return fast if fast is not None else read_png_linear(path)
    ch = read_exr(path)
    return np.stack([ch[c] for c in "RGBA"], axis=-1).astype(np.float32)


def _frame_files(folder: Optional[str]) -> List[Tuple[str, str]]:
    """``(path, ext)`` of a variation's frames: PNG when present (what it displays as), else EXR."""
    if folder is None or not os.path.isdir(folder):
        return []
    for ext in ("png", "exr"):
        try:
            _, _, paths = find_frames(folder, ext=ext)
        except ValueError:
            continue
        return [(p, ext) for p in paths]
    return []


def _cell_frames(cell: BoardCell, size: Tuple[int, int], picks: Sequence[int]) -> Optional[List[np.ndarray]]:
    """The cell's frames ``picks`` (modulo its length) as sRGB codes over the checker, or None without frames."""
    files = _frame_files(cell.folder)
    if not files:
        return None
    square = max(4, min(size) // 12)
    cache = {}
    out = []
    for p in picks:
        k = p % len(files)
        if k not in cache:
            path, ext = files[k]
            exposure = cell.exposure if ext == "exr" else 0.0  # PNG frames carry the look's exposure already
            cache[k] = over_checker(_resize(read_frame(path, ext), size), exposure=exposure, square=square)
        out.append(cache[k])
    return out


def write_board(out_dir: str, cells: Sequence[BoardCell], *, fps: float) -> dict:
    """Write ``board.png`` and ``board.gif`` into ``out_dir``.

    Parameters
    ----------
    out_dir : str
    cells : sequence of BoardCell
        In board order (left to right, top to bottom).
    fps : float
        The GIF's playback rate.

    Returns
    -------
    dict
        ``png``, ``gif`` (file names), ``cells`` (each ``{"box": [x, y, w, h],
        "label": [x, y, w, h], "text": [...]}``), for the manifest.
    """
    if not cells:
        return {}
    files = [_frame_files(c.folder) for c in cells]
    first = next((f for f in files if f), None)
    if first is not None:
        sample = read_frame(*first[0])
        frame_shape = sample.shape[:2]
    else:
        frame_shape = (_MIN_CELL, _MIN_CELL)
    lines = max(len(c.label) for c in cells)
    columns = max(1, math.ceil(math.sqrt(len(cells))))
    size = _cell_size(frame_shape, columns)
    layout = board_layout(len(cells), cell=size, lines=lines)
    longest = max((len(f) for f in files), default=1) or 1
    step = max(1, math.ceil(longest / _GIF_FRAMES))
    gif_picks = list(range(0, longest, step))

    font = _font()
    base = Image.new("RGB", layout.size, _BACKGROUND)
    draw = ImageDraw.Draw(base)
    texts = []
    for cell, (x, y, w, h) in zip(cells, layout.labels):
        draw.rectangle([x, y, x + w - 1, y + h - 1], fill=_LABEL_BAND)
        shown = [_fit_text(draw, line, font, w - 2 * _PAD) for line in cell.label]
        for i, line in enumerate(shown):
            draw.text((x + _PAD, y + _PAD // 2 + i * _LINE), line, font=font, fill=_TEXT)
        texts.append(shown)
    base_codes = np.asarray(base).copy()

    gif = np.repeat(base_codes[None], len(gif_picks), axis=0)
    still = base_codes.copy()
    for n, (cell, (x, y, w, h)) in enumerate(zip(cells, layout.cells)):
        cw, ch = size
        # The still's middle frame rides along with the GIF's picks: one listing, one decode per frame.
        frames = _cell_frames(cell, (cw, ch), gif_picks + [len(files[n]) // 2])
        if frames is None:
            draw_missing = Image.fromarray(still)
            ImageDraw.Draw(draw_missing).text((x + _PAD, y + _PAD), "no frames", font=font, fill=_DIM_TEXT)
            still = np.asarray(draw_missing).copy()
            for t in range(len(gif)):
                gif[t, y:y + ch, x:x + cw] = still[y:y + ch, x:x + cw]
            continue
        for t, codes in enumerate(frames[:-1]):
            gif[t, y:y + ch, x:x + cw] = codes
        still[y:y + ch, x:x + cw] = frames[-1]

    png_path = os.path.join(out_dir, BOARD_PNG)
    with atomic_path(png_path, suffix=".png") as tmp:
        Image.fromarray(still).save(tmp, format="PNG", optimize=False)
    write_gif_codes(os.path.join(out_dir, BOARD_GIF), list(gif), fps)
    return {
        "png": BOARD_PNG,
        "gif": BOARD_GIF,
        "cells": [{"box": list(b), "label": list(lb), "text": t}
                  for b, lb, t in zip(layout.cells, layout.labels, texts)],
    }
