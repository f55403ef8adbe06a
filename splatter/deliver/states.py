"""Particle states to a file: ``splatter simulate``'s ``.npz``.

Examples
--------
>>> import pathlib, tempfile
>>> from splatter.look.records import ClipSpec, LookSpec, SourceSpec
>>> from splatter.sim.driver import simulate
>>> look = LookSpec(name="doc", clip=ClipSpec(frames=3, fps=10), sources=(SourceSpec(rate=20.0),))
>>> path = pathlib.Path(tempfile.mkdtemp()) / "doc.npz"
>>> save_states(path, simulate(look, frames=range(3)))
>>> data = np.load(path)
>>> data["frame"].tolist(), data["frame_start"].shape, data["deform"].shape[1:]
([0, 1, 2], (4,), (3, 3))
"""

from __future__ import annotations

import os
from typing import Iterable

import numpy as np

from splatter.deliver.fileio import atomic_path
from splatter.sim.driver import PER_PUFF_FIELDS, FrameState, empty_field

__all__ = ["save_states", "save_flow_grid"]


def save_states(path, states: Iterable[FrameState]) -> None:
    """Write frame states to one ``.npz`` file, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination; written to a temporary file in the same folder, then
        moved into place with ``os.replace``.
    states : iterable of FrameState

    Notes
    -----
    Arrays: ``frame_start (F+1,) int64`` (puffs of frame j are rows
    ``frame_start[j]:frame_start[j+1]``), ``frame (F,) int64``,
    ``time (F,) float64``, and per puff ``id``, ``slot``, ``source``, ``pos``,
    ``vel``, ``age``, ``life``, ``size``, ``opacity``, ``color``, ``glow``,
    ``aspect``, ``quat``, ``stretch``, ``density``, ``deform`` (rows of (3, 3)).
    Per-puff floats are stored as float32 (7 significant digits, the
    precision point caches in the trade carry; common practice), integers as
    they are, and the file is zip-deflated: a 64-frame look of 20,000 puffs
    takes about a third of its float64, uncompressed size. The file gets the
    permissions a plain ``open()`` gives under the process umask.
    """
    path = os.fspath(path)
    cols = {name: [] for name in PER_PUFF_FIELDS}
    frame, time, counts = [], [], [0]
    for st in states:
        frame.append(st.frame)
        time.append(st.time)
        counts.append(len(st))
        for name in PER_PUFF_FIELDS:
            cols[name].append(getattr(st, name))
    arrays = {name: (np.concatenate(cols[name]) if cols[name] else empty_field(name)) for name in PER_PUFF_FIELDS}
    arrays = {name: a.astype(np.float32) if a.dtype.kind == "f" else a for name, a in arrays.items()}
    arrays["frame_start"] = np.cumsum(np.array(counts, dtype=np.int64))
    arrays["frame"] = np.array(frame, dtype=np.int64)
    arrays["time"] = np.array(time, dtype=np.float64)
    with atomic_path(path, suffix=".npz") as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(fh, **arrays)


def save_flow_grid(path, state: FrameState) -> None:
    """Write the convection flow's grid at one frame to an ``.npz`` file, atomically.

    Parameters
    ----------
    path : str or os.PathLike
    state : FrameState
        A frame of a look with a convection flow (``state.flow`` set).

    Notes
    -----
    Arrays (world units, seconds; cell ``(i, j, k)`` has its centre at
    ``origin + (i + 1/2, j + 1/2, k + 1/2) * cell``, y up):

    * ``frame ()`` int64, ``time ()`` float64, ``origin (3,)`` float64, ``cell ()`` float64;
    * ``density (nx, ny, nz)``: the frame's puff opacity per cubic world unit, laid on the cell
      centres with trilinear weights;
    * ``heat (nx, ny, nz)``: the heat per cubic world unit the last step's buoyancy used;
    * ``solid (nx, ny, nz)`` bool: cells inside obstacles;
    * ``velocity (nx, ny, nz, 3)``: the air at the cell centres (mean of opposite faces);
    * ``u (nx+1, ny, nz)``, ``v (nx, ny+1, nz)``, ``w (nx, ny, nz+1)``: the face velocities the
      solver holds (a staggered grid: ``u[i, j, k]`` sits at ``origin + (i, j + 1/2, k + 1/2) * cell``).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> from splatter.look.records import ClipSpec, ConvectionSpec, LookSpec, SourceSpec
    >>> from splatter.sim.driver import simulate
    >>> look = LookSpec(name="doc", clip=ClipSpec(frames=3, fps=10, warmup=0.5),
    ...                 sources=(SourceSpec(rate=200.0, heat=0.01),), forces=(ConvectionSpec(cells=8),))
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "grid.npz"
    >>> save_flow_grid(path, next(simulate(look, frames=[2])))
    >>> data = np.load(path)
    >>> data["velocity"].shape == data["density"].shape + (3,), int(data["frame"])
    (True, 2)
    """
    if state.flow is None:
        raise ValueError(f"frame {state.frame} has no flow grid: the look needs a convection force and a "
                         f"source with heat, and the air moves from the first step on")
    path = os.fspath(path)
    f = state.flow
    arrays = {name: np.asarray(f[name]) for name in ("origin", "cell", "density", "heat", "solid", "velocity",
                                                   "u", "v", "w")}
    arrays["frame"] = np.int64(state.frame)
    arrays["time"] = np.float64(state.time)
    with atomic_path(path, suffix=".npz") as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(fh, **arrays)
