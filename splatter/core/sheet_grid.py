"""Where frames go on a sprite sheet: the grid, the sheet size, the cells.

Pure arithmetic, shared by the look's checks (a sheet too large is refused
before anything renders) and by every sheet writer in :mod:`splatter.deliver`.
The rules are described in :mod:`splatter.deliver.sheet`.
"""

from __future__ import annotations

import dataclasses
import math
from typing import NamedTuple

from splatter.core.args import check_int

__all__ = ["Cell", "SheetLayout", "sheet_layout", "partial_grid"]


class Cell(NamedTuple):
    """Content rectangle of one frame in the sheet, pixels from the top-left."""

    frame: int
    x: int
    y: int
    w: int
    h: int


@dataclasses.dataclass(frozen=True)
class SheetLayout:
    """Where every frame goes in a sprite sheet (see the module docstring).

    Attributes
    ----------
    frames : int
        Number of frames.
    frame_width, frame_height : int
        Size of the source frames.
    columns, rows : int
        Grid size.
    padding : int
        Gutter on each side of a cell's content.
    pow2 : bool
        Sheet sized to powers of two.
    width, height : int
        Sheet size in pixels.
    cell_width, cell_height : int
        Cell size (content plus padding).
    cells : tuple of Cell
        Content rectangle of each frame, in frame order.
    """

    frames: int
    frame_width: int
    frame_height: int
    columns: int
    rows: int
    padding: int
    pow2: bool
    width: int
    height: int
    cell_width: int
    cell_height: int
    cells: tuple

    @property
    def resampled(self) -> bool:
        """True when frames are resampled to fit the cells' content area."""
        c = self.cells[0]
        return (c.w, c.h) != (self.frame_width, self.frame_height)

    def to_json(self) -> dict:
        """The layout part of the metadata (plain JSON types)."""
        return {
            "width": self.width,
            "height": self.height,
            "columns": self.columns,
            "rows": self.rows,
            "frames": self.frames,
            "frame_width": self.frame_width,
            "frame_height": self.frame_height,
            "cell_width": self.cell_width,
            "cell_height": self.cell_height,
            "padding": self.padding,
            "pow2": self.pow2,
            "resampled": self.resampled,
            "cells": [c._asdict() for c in self.cells],
        }


def _next_pow2(n):
    return 1 << max(0, (int(n) - 1).bit_length())


def _is_pow2(n):
    return n >= 1 and n & (n - 1) == 0


def _nearest_pow2(n):
    """The power of two nearest to ``n`` on a log scale; a tie goes up (keep detail rather than lose it)."""
    lo = _next_pow2(n) // 2 if not _is_pow2(n) else n
    hi = _next_pow2(n)
    return hi if lo == 0 or n * n >= lo * hi else lo


def _grid(n, columns, rows):
    """Columns and rows holding ``n`` cells, as asked (see :func:`sheet_layout`)."""
    if columns is None and rows is None:
        cols = math.isqrt(n - 1) + 1 if n > 1 else 1  # ceil(sqrt(n)), exact in integers
        return cols, -(-n // cols)
    if rows is None:
        cols = check_int(columns, "columns")
        return cols, -(-n // cols)
    if columns is None:
        rws = check_int(rows, "rows")
        return -(-n // rws), rws
    cols, rws = check_int(columns, "columns"), check_int(rows, "rows")
    if cols * rws < n:
        raise ValueError(f"columns, rows: a {cols} x {rws} grid holds {cols * rws} frames, need {n}")
    return cols, rws


def _pow2_grid(n, columns, rows, cw, ch):
    """Power-of-two columns and rows holding ``n`` cells: fewest cells, then squarest sheet, then wider."""
    for flag, v in (("columns", columns), ("rows", rows)):
        if v is not None and not _is_pow2(check_int(v, flag)):
            raise ValueError(f"{flag}: a power-of-two sheet needs a power of two (1, 2, 4, 8 ...), got {v}")
    if columns is not None and rows is not None:
        if columns * rows < n:
            raise ValueError(f"columns, rows: a {columns} x {rows} grid holds {columns * rows} frames, need {n}")
        return columns, rows
    col_choices = [columns] if columns is not None else [1 << k for k in range(_next_pow2(n).bit_length())]
    best = None
    for cols in col_choices:
        rws = rows if rows is not None else _next_pow2(-(-n // cols))
        if cols * rws < n:
            continue
        squareness = abs(math.log2(cols * cw) - math.log2(rws * ch))
        key = (cols * rws, squareness, -cols)
        if best is None or key < best[0]:
            best = (key, cols, rws)
    return best[1], best[2]


def sheet_layout(n_frames, frame_w, frame_h, *, columns=None, rows=None, padding=0, pow2=False, cell=None,
                 numbers=None):
    """Compute the grid, sheet size and cell rectangles for a flipbook.

    Parameters
    ----------
    n_frames : int
        Number of frames, >= 1.
    frame_w, frame_h : int
        Frame size in pixels.
    columns, rows : int, optional
        Grid size; a missing one is derived from the other, both missing give
        the near-square default ``columns = ceil(sqrt(n))``,
        ``rows = ceil(n / columns)``. ``columns * rows`` must hold every frame.
        With ``pow2`` they must be powers of two (a missing one is chosen).
    padding : int
        Gutter in pixels on each side of every cell's content, >= 0; it lies
        inside the cell.
    pow2 : bool
        Power-of-two sheet with whole-pixel cells; frames are resampled only
        on an axis where frame plus padding is not a power of two (see the
        module docstring).
    cell : int, optional
        Cell width in pixels, padding included; the cell height follows the
        frame's aspect. Frames are resampled to fit (for example 512 px
        frames in 256 px cells). Default: the frame plus its padding.
    numbers : sequence of int, optional
        The frame number each cell shows, in order (``Cell.frame``); default
        ``0 .. n_frames - 1``. A render of frames 4 to 7 numbers its cells 4 to 7.

    Returns
    -------
    SheetLayout

    Examples
    --------
    64 frames of 256 px with a 2 px gutter fill an 8 x 8 grid row by row from
    the top-left, so frame 10 sits in column 2 of row 1; the sheet is exactly
    8 cells of 260 px:

    >>> layout = sheet_layout(64, 256, 256, columns=8, padding=2)
    >>> layout.columns, layout.rows, layout.width, layout.height
    (8, 8, 2080, 2080)
    >>> layout.cells[10]
    Cell(frame=10, x=522, y=262, w=256, h=256)

    A power-of-two sheet of 32 such frames without padding keeps them unscaled:

    >>> p2 = sheet_layout(32, 256, 256, pow2=True)
    >>> p2.columns, p2.rows, p2.width, p2.height, p2.resampled
    (8, 4, 2048, 1024, False)
    """
    n = check_int(n_frames, "n_frames")
    fw = check_int(frame_w, "frame_w")
    fh = check_int(frame_h, "frame_h")
    pad = check_int(padding, "padding", minimum=0)
    if cell is not None:
        cw = check_int(cell, "cell")
        ch = max(1, round(cw * fh / fw))
    else:
        cw, ch = fw + 2 * pad, fh + 2 * pad
    if pow2:
        cw, ch = _nearest_pow2(cw), _nearest_pow2(ch)
        cols, rws = _pow2_grid(n, columns, rows, cw, ch)
    else:
        cols, rws = _grid(n, columns, rows)
    width, height = cols * cw, rws * ch
    iw, ih = cw - 2 * pad, ch - 2 * pad
    if iw < 1 or ih < 1:
        raise ValueError(f"padding: {pad} px on each side leaves no room in a {cw} x {ch} cell")
    numbers = list(range(n)) if numbers is None else [int(f) for f in numbers]
    if len(numbers) != n:
        raise ValueError(f"numbers: expected {n} frame numbers, got {len(numbers)}")
    cells = tuple(Cell(f, (k % cols) * cw + pad, (k // cols) * ch + pad, iw, ih) for k, f in enumerate(numbers))
    return SheetLayout(n, fw, fh, cols, rws, pad, bool(pow2), width, height, cw, ch, cells)


def partial_grid(n_frames, columns, rows, pow2=False):
    """The grid a sheet of only ``n_frames`` of a clip asks for: the look's, shrunk to the frames rendered.

    A look's ``columns`` and ``rows`` are chosen for the whole clip; a render
    of a few of its frames keeps the column count (at most the frames
    rendered) and lets the rows follow, so no rows of empty cells are
    written. With only ``rows`` given, the same the other way round.

    Parameters
    ----------
    n_frames : int
        Frames rendered, >= 1.
    columns, rows : int or None
        The look's grid.
    pow2 : bool
        Keep the counts powers of two.

    Returns
    -------
    (columns, rows) : tuple of int or None
        To pass to :func:`sheet_layout`.

    Examples
    --------
    An 8 x 8 look rendered from frame 60 of 64 (4 frames): 4 x 1, not 8 x 8.

    >>> partial_grid(4, 8, 8)
    (4, None)
    >>> partial_grid(20, 8, 8)
    (8, None)
    >>> partial_grid(3, 8, None, pow2=True)
    (4, None)
    """
    n = check_int(n_frames, "n_frames")
    cap = _next_pow2(n) if pow2 else n
    if columns is not None:
        return min(columns, cap), None
    if rows is not None:
        return None, min(rows, cap)
    return None, None
