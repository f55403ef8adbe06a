"""The simulate stage: puffs born, moved and aged, frame by frame.

Public: :func:`plan_simulation` and :class:`SimPlan` (from
:mod:`splatter.sim.plan`), :func:`simulate`, :func:`save_states` and
:class:`FrameState`.

Time is counted in whole steps of ``dt = 1 / (fps * substeps)`` from the
start of the warm-up (step 0); frame ``f`` is the state at step boundary
``W + f * substeps`` (``W`` warm-up steps), clip time ``f / fps``.  At each
boundary the puffs are first advanced by one step, then the puffs due at
that boundary are born, then puffs whose age reached their life (or that hit
a ``kill`` obstacle) are removed.

Source times (``start``, ``stop``, burst ``time``) are clip times, 0 at
frame 0.  A source with ``start <= 0`` has been emitting since the start of
the warm-up, so frame 0 already shows steady smoke; set ``clip.warmup = 0``
for a source that switches on at frame 0.

Exact loops (``clip.loop = "exact"``): the period is ``P = frames / fps``,
``Ns = frames * substeps`` steps.  Each source is born on an integer lattice
(:mod:`splatter.sim.emit`) with a whole number of puffs per period; a puff's
random draws are keyed by its slot modulo that number; every time-varying
force sees the time ``(step mod Ns) * dt``; ages are computed from integer
step counts.  So frame ``frames`` equals frame 0 bit for bit (only ``id``
differs), provided nothing in :attr:`SimPlan.notes` says otherwise.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass
from typing import Iterable, Iterator, Optional

import numpy as np

from splatter.sim.emit import N_DRAWS, sample_puffs
from splatter.sim.integrate import air_velocity, step_puffs
from splatter.sim.ramps import evaluate_color_ramp, evaluate_ramp
from splatter.sim.rng import PuffDraws
from splatter.sim.plan import SimPlan, plan_simulation

__all__ = ["SimPlan", "FrameState", "plan_simulation", "simulate", "save_states"]

@dataclass(frozen=True, eq=False)
class FrameState:
    """The puffs alive at one frame: equal-length arrays, M puffs.

    Attributes
    ----------
    frame : int
    time : float
        ``frame / fps`` seconds.
    id : (M,) int64 ndarray
        Unique per puff, in birth order.
    slot : (M,) int64 ndarray
        Spawn slot; when looping exactly, modulo the puffs per period, so a
        puff and its twin born one period later share it.  Otherwise ``id``.
    source : (M,) int32 ndarray
    pos : (M, 3) float64 ndarray
    vel : (M, 3) float64 ndarray
        Velocity the puff moves with (own velocity plus swirl/vortex air).
    age, life : (M,) float64 ndarray
        Seconds.
    size : (M,) float64 ndarray
        Current sigma, world units (birth size times the grow ramp).
    opacity : (M,) float64 ndarray
        Current peak opacity (opacity ramp times ``exp(-fade * age)``).
    color : (M, 3) float64 ndarray
        Linear colour.
    glow : (M, 3) float64 ndarray
        Emitted light, zeros where the source has none.
    aspect : (M,) float64 ndarray
        Short-axis to long-axis ratio.
    quat : (M, 4) float64 ndarray
        Unit orientation ``(w, x, y, z)``; identity where the source's aspect is 1.
    stretch, density : (M,) float64 ndarray
        The source's values.
    deform : (M, 3, 3) float64 ndarray or None
        Deformation gradient ``F`` (identity at birth, advanced with the air
        velocity gradient; see :mod:`splatter.sim.shaping`): the puff's
        covariance is ``F S0 F^T`` for its rigid covariance ``S0``.

    Arrays are ordered by ``(source, slot, id)``, the same order at frame 0
    and frame ``frames`` of an exact loop.
    """

    frame: int
    time: float
    id: np.ndarray
    slot: np.ndarray
    source: np.ndarray
    pos: np.ndarray
    vel: np.ndarray
    age: np.ndarray
    life: np.ndarray
    size: np.ndarray
    opacity: np.ndarray
    color: np.ndarray
    glow: np.ndarray
    aspect: np.ndarray
    quat: np.ndarray
    stretch: np.ndarray
    density: np.ndarray
    deform: Optional[np.ndarray] = None  # None: rigid puffs (states made by hand)

    def __len__(self) -> int:
        return int(self.id.shape[0])


PER_PUFF_FIELDS = ("id", "slot", "source", "pos", "vel", "age", "life", "size", "opacity", "color", "glow",
                   "aspect", "quat", "stretch", "density", "deform")


_INT_FIELDS = {"id": np.int64, "slot": np.int64, "source": np.int32, "bstep": np.int64}
_WIDTH = {"pos": (3,), "vel": (3,), "quat": (4,), "deform": (3, 3)}
_STORE = ("id", "slot", "source", "bstep", "bfrac", "life", "size0", "aspect", "quat", "pos", "vel", "deform")


class _Puffs:
    """Live puffs in birth order: one growable buffer per attribute.

    Dead puffs are only flagged; the buffers are compacted once an eighth of
    the rows are dead (stepping a few dead rows is cheaper than compacting
    every step, and no puff's result depends on its row).
    """

    def __init__(self, capacity: int = 1024):
        self.n = 0
        self.dead = 0
        self.live = np.zeros(capacity, dtype=bool)
        self.buf = {name: np.zeros((capacity,) + _WIDTH.get(name, ()),
                                   dtype=_INT_FIELDS.get(name, np.float64)) for name in _STORE}

    def __len__(self):
        return self.n

    @property
    def a(self) -> dict:
        """Views of the first ``n`` rows (dead ones included)."""
        return {name: b[:self.n] for name, b in self.buf.items()}

    def add(self, parts: list):
        k = sum(p["id"].shape[0] for p in parts)
        if k == 0:
            return
        if self.n + k > self.live.shape[0]:
            cap = max(2 * self.live.shape[0], self.n + k)
            for name, b in self.buf.items():
                nb = np.zeros((cap,) + b.shape[1:], dtype=b.dtype)
                nb[:self.n] = b[:self.n]
                self.buf[name] = nb
            live = np.zeros(cap, dtype=bool)
            live[:self.n] = self.live[:self.n]
            self.live = live
        for p in parts:
            m = p["id"].shape[0]
            for name in _STORE:
                self.buf[name][self.n:self.n + m] = p[name]
            self.live[self.n:self.n + m] = True
            self.n += m

    def kill(self, mask: np.ndarray):
        """Flag rows ``mask`` ((n,) bool) dead."""
        newly = mask & self.live[:self.n]
        count = int(np.count_nonzero(newly))
        if count == 0:
            return
        self.live[:self.n] &= ~newly
        self.dead += count
        if self.dead > max(256, self.n // 8):
            idx = np.flatnonzero(self.live[:self.n])
            for name, b in self.buf.items():
                b[:idx.size] = b[idx]
            self.live[:idx.size] = True
            self.live[idx.size:self.n] = False
            self.n = idx.size
            self.dead = 0

    def ages(self, step: int, dt: float) -> np.ndarray:
        # From integers each time, so twins one period apart get the same bits.
        return ((step - self.buf["bstep"][:self.n]) + self.buf["bfrac"][:self.n]) * dt


def _spawn(look, plan: SimPlan, s: int, cursors: list, draws: dict, next_id: int):
    """Puffs born at boundary ``s``: a list of attribute dicts and the next free id."""
    parts = []
    for i, (src, sched) in enumerate(zip(look.sources, plan.schedules)):
        offset = 0
        for b, (bstep, bfrac, count) in enumerate(sched.bursts):
            if bstep == s and count > 0:
                keys = np.arange(count, dtype=np.int64)
                u = draws.setdefault((i, 1 + b), PuffDraws(look.seed, i, 1 + b, N_DRAWS))(keys)
                ids = np.arange(next_id, next_id + count, dtype=np.int64)
                slots = sched.per + offset + keys if plan.period_steps is not None else ids
                parts.append(_born(src, u, ids, slots, i, np.full(count, s, dtype=np.int64), np.full(count, bfrac),
                                   plan.dt))
                next_id += count
            offset += count
        ks = sched.due(cursors[i], s)
        if ks.size == 0:
            continue
        cursors[i] = int(ks[-1]) + 1
        ks = ks[sched.inside(ks)]
        if ks.size == 0:
            continue
        bstep, bfrac = sched.birth(ks)
        keys = ks % sched.per if plan.period_steps is not None else ks
        u = draws.setdefault((i, 0), PuffDraws(look.seed, i, 0, N_DRAWS))(keys)
        ids = np.arange(next_id, next_id + ks.size, dtype=np.int64)
        slots = keys if plan.period_steps is not None else ids
        parts.append(_born(src, u, ids, slots, i, bstep, bfrac, plan.dt))
        next_id += ks.size
    return parts, next_id


def _born(src, u, ids, slots, source, bstep, bfrac, dt):
    p = sample_puffs(src, u)
    age0 = bfrac * dt  # born that long before the boundary: advance ballistically
    return dict(id=ids, slot=np.asarray(slots, dtype=np.int64), source=np.full(ids.size, source, dtype=np.int32),
                bstep=bstep, bfrac=bfrac, life=p["life"], size0=p["size"], aspect=p["aspect"], quat=p["quat"],
                pos=p["pos"] + p["vel"] * age0[:, None], vel=p["vel"], deform=np.tile(np.eye(3), (ids.size, 1, 1)))


def _sizes(look, source, size0, x) -> np.ndarray:
    """Current sigmas: birth size times each source's ``grow`` ramp at age fraction ``x``."""
    size = np.empty(size0.shape[0])
    for i, src in enumerate(look.sources):
        sel = source == i
        if sel.any():
            size[sel] = size0[sel] * evaluate_ramp(src.grow, x[sel])
    return size


def _frame_state(look, plan: SimPlan, puffs: _Puffs, frame: int, step: int) -> FrameState:
    a = puffs.a
    live = np.flatnonzero(puffs.live[:puffs.n])
    order = live[np.lexsort((a["id"][live], a["slot"][live], a["source"][live]))]
    pick = {name: a[name][order] for name in _STORE}
    age = ((step - pick["bstep"]) + pick["bfrac"]) * plan.dt
    m = age.shape[0]
    x = age / pick["life"]
    opacity = np.empty(m)
    color = np.empty((m, 3))
    glow = np.zeros((m, 3))
    stretch = np.empty(m)
    density = np.empty(m)
    size = _sizes(look, pick["source"], pick["size0"], x)
    for i, src in enumerate(look.sources):
        sel = pick["source"] == i
        if not sel.any():
            continue
        xs = x[sel]
        opacity[sel] = evaluate_ramp(src.opacity, xs) * np.exp(-float(src.fade) * age[sel])
        color[sel] = evaluate_color_ramp(src.color, xs)
        if src.glow is not None:
            glow[sel] = evaluate_color_ramp(src.glow, xs)
        stretch[sel] = float(src.stretch)
        density[sel] = float(src.density)
    vel = pick["vel"] + air_velocity(pick["pos"], time=plan.force_time(step), forces=plan.forces)
    return FrameState(frame=int(frame), time=frame / plan.fps, id=pick["id"], slot=pick["slot"],
                      source=pick["source"], pos=pick["pos"], vel=vel, age=age, life=pick["life"], size=size,
                      opacity=opacity, color=color, glow=glow, aspect=pick["aspect"], quat=pick["quat"],
                      stretch=stretch, density=density, deform=pick["deform"])


def simulate(look, plan: Optional[SimPlan] = None, *, frames: Iterable[int]) -> Iterator[FrameState]:
    """Run the simulation from the start of the warm-up and yield the requested frames.

    Parameters
    ----------
    look : LookSpec
    plan : SimPlan, optional
        From :func:`plan_simulation` (made here if not given; a look whose
        swirl octaves are "auto" needs one made with a pixel size).
    frames : iterable of int
        Frame indices >= 0, any order; they may run past ``clip.frames - 1``
        (the simulation simply continues).

    Yields
    ------
    FrameState
        One per distinct requested frame, in increasing order.  The states do
        not depend on which other frames were requested.
    """
    wanted = sorted({int(f) for f in frames})
    if wanted and wanted[0] < 0:
        raise ValueError(f"frames must be >= 0, got {wanted[0]}")
    if plan is None:
        plan = plan_simulation(look)
    if not wanted:
        return
    targets = iter(wanted)
    frame = next(targets)
    puffs = _Puffs()
    cursors = [0] * len(look.sources)
    draws: dict = {}
    next_id = 0
    last = plan.frame_step(wanted[-1])
    follow = np.array([float(src.follow) for src in look.sources])
    elongation = np.array([float(src.elongation) for src in look.sources])
    # Shapes only when some source follows a flow that has a gradient (swirl or vortex).
    shaping = bool(np.any(follow > 0)) and (plan.forces.swirl_b.shape[0] + plan.forces.vortex.shape[0]) > 0
    for s in range(last + 1):
        if s > 0 and len(puffs):
            a = puffs.a
            src = a["source"]
            ages = puffs.ages(s - 1, plan.dt)
            sigma = _sizes(look, src, a["size0"], ages / a["life"]) if shaping else None
            killed = step_puffs(a["pos"], a["vel"], ages, dt=plan.dt,
                                time=plan.force_time(s - 1), forces=plan.forces, obstacles=plan.obstacles,
                                integrator=plan.integrator, deform=a["deform"] if shaping else None,
                                follow=follow[src], elongation=elongation[src], sigma=sigma)
            puffs.kill(killed)
        parts, next_id = _spawn(look, plan, s, cursors, draws, next_id)
        puffs.add(parts)
        if len(puffs):
            puffs.kill(puffs.ages(s, plan.dt) >= puffs.a["life"])
        while frame is not None and plan.frame_step(frame) == s:
            yield _frame_state(look, plan, puffs, frame, s)
            frame = next(targets, None)


def _empty(name: str) -> np.ndarray:
    width = {"pos": (3,), "vel": (3,), "quat": (4,), "color": (3,), "glow": (3,), "deform": (3, 3)}.get(name, ())
    return np.zeros((0,) + width, dtype=_INT_FIELDS.get(name, np.float64))


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
    arrays = {name: (np.concatenate(cols[name]) if cols[name] else _empty(name)) for name in PER_PUFF_FIELDS}
    arrays["frame_start"] = np.cumsum(np.array(counts, dtype=np.int64))
    arrays["frame"] = np.array(frame, dtype=np.int64)
    arrays["time"] = np.array(time, dtype=np.float64)
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=".simulate-", suffix=".npz.tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            np.savez(fh, **arrays)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
