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

The same periodicity spares an exact loop its warm-up population.  Slot
``k + j per`` is born ``j Ns`` steps after slot ``k`` with the same draws and
step fraction, and every force sees the same times on the way, so at any
boundary ``S`` it is bit for bit slot ``k`` at ``S - j Ns``.  When every
source emits on its whole lattice (no ``start``, no ``stop``), the driver
steps only the first period's slots ``k < per`` (born at boundaries
``0 .. Ns``) from birth to death and builds frame ``f`` from the ones alive
at ``W + f * substeps - j Ns`` for ``j = 0, 1, ...``, with the ids the
step-by-step driver would have given their twins (closed-form birth
counts).  Bursts never repeat and are stepped as they are.  The states are
the same arrays as stepping everything from the start of the warm-up
(``tests/test_simulate.py`` compares them field by field), at about
``Ns / (W + Ns)`` of the puff-steps when lives are long, but the frames
wait for the puffs that finish them: their moving parts are kept until
then (up to every requested frame's puffs at once when lives exceed the
period).  Other clips run from the start of the warm-up, and so does every look with
a convection force: its puffs share one flow (:mod:`splatter.sim.flow`), so
they are not independent twins, and the driver steps the flow's grid
(heat laid, air stepped, velocity handed to each puff) before each step of
the puffs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Iterator, NamedTuple, Optional

import numpy as np

from splatter.sim.emit import N_DRAWS, sample_puffs
from splatter.sim.flow import Convection
from splatter.sim.integrate import air_velocity, step_puffs
from splatter.sim.plan import SimPlan, plan_simulation
from splatter.sim.ramps import evaluate_color_ramp, evaluate_ramp
from splatter.sim.rng import PuffDraws

__all__ = ["SimPlan", "FrameState", "plan_simulation", "simulate", "twin_hold_bytes", "PER_PUFF_FIELDS",
           "empty_field", "TWIN_MEMORY"]

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
        Velocity the puff moves with (own velocity plus swirl/vortex air), or
        its own alone from ``simulate(..., air=False)``.
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
    flow : dict or None
        With a convection force: its grid at this frame
        (:meth:`splatter.sim.flow.Convection.snapshot`, ``density`` laid by
        this frame's puff opacities); None otherwise.

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
    flow: Optional[dict] = None  # the convection grid at this frame (see Convection.snapshot), or None

    def __len__(self) -> int:
        return int(self.id.shape[0])


PER_PUFF_FIELDS = ("id", "slot", "source", "pos", "vel", "age", "life", "size", "opacity", "color", "glow",
                   "aspect", "quat", "stretch", "density", "deform")


_INT_FIELDS = {"id": np.int64, "slot": np.int64, "source": np.int32, "bstep": np.int64, "base": np.int64}
_WIDTH = {"pos": (3,), "vel": (3,), "quat": (4,), "deform": (3, 3)}
_STORE = ("id", "slot", "source", "bstep", "bfrac", "life", "size0", "aspect", "quat", "pos", "vel", "deform")


class _Puffs:
    """Live puffs in birth order: one growable buffer per attribute.

    Dead puffs are only flagged; the buffers are compacted once an eighth of
    the rows are dead (stepping a few dead rows is cheaper than compacting
    every step, and no puff's result depends on its row).
    """

    def __init__(self, capacity: int = 1024, fields: tuple = _STORE):
        self.n = 0
        self.dead = 0
        self.fields = fields
        self.live = np.zeros(capacity, dtype=bool)
        self.buf = {name: np.zeros((capacity,) + _WIDTH.get(name, ()),
                                   dtype=_INT_FIELDS.get(name, np.float64)) for name in fields}

    def __len__(self):
        return self.n

    @property
    def alive(self) -> int:
        """Rows not flagged dead."""
        return self.n - self.dead

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
            for name in self.fields:
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
                b[:idx.size] = np.take(b, idx, axis=0)  # np.take: several times faster on (n, 3, 3) rows
            self.live[:idx.size] = True
            self.live[idx.size:self.n] = False
            self.n = idx.size
            self.dead = 0

    def ages(self, step: int, dt: float) -> np.ndarray:
        # From integers each time, so twins one period apart get the same bits.
        return _ages(step, self.buf["bstep"][:self.n], self.buf["bfrac"][:self.n], dt)


def _ages(step: int, bstep: np.ndarray, bfrac: np.ndarray, dt: float) -> np.ndarray:
    """``((step - bstep) + bfrac) * dt`` (seconds, (n,) float64) for birth steps ``bstep`` ((n,) int64) and
    fractions ``bfrac`` ((n,) float64).

    The same operations in place: the step count is cast to float64 as it is
    stored rather than by a buffered mixed-type addition (several times
    slower), with the same values.
    """
    out = np.empty(bstep.shape[0])
    np.subtract(step, bstep, out=out, casting="unsafe")
    out += bfrac
    out *= dt
    return out


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


def _runs(look, source: np.ndarray, ordered: bool = False) -> list:
    """Each source's rows: ``(i, rows)`` pairs for the sources present.

    ``rows`` is a slice where the rows of source ``i`` are contiguous (one
    source, or ``ordered``: ``source`` sorted), a boolean mask otherwise; a
    slice reads and writes the rows in place, where a mask copies them.
    """
    n = len(look.sources)
    if n == 1:
        return [(0, slice(None))] if source.shape[0] else []
    if ordered:
        ends = np.searchsorted(source, np.arange(n + 1)).tolist()
        return [(i, slice(ends[i], ends[i + 1])) for i in range(n) if ends[i] < ends[i + 1]]
    masks = [(i, source == i) for i in range(n)]
    return [(i, sel) for i, sel in masks if sel.any()]


def _sizes(look, runs: list, size0, x) -> np.ndarray:
    """Current sigmas: birth size times each source's ``grow`` ramp at age fraction ``x`` (``runs`` from
    :func:`_runs`)."""
    size = np.empty(size0.shape[0])
    for i, rows in runs:
        size[rows] = size0[rows] * evaluate_ramp(look.sources[i].grow, x[rows])
    return size


def _frame_state(look, plan: SimPlan, puffs: _Puffs, frame: int, step: int, flow: Optional[Convection] = None,
                 air: bool = True) -> FrameState:
    a = puffs.a
    live = np.flatnonzero(puffs.live[:puffs.n])
    order = live[np.lexsort((a["id"][live], a["slot"][live], a["source"][live]))]
    # np.take along rows is several times numpy's fancy indexing for (M, 3, 3) rows, with the same values.
    return _state_of(look, plan, {name: np.take(a[name], order, axis=0) for name in _STORE}, frame, step, flow,
                     air)


def _state_of(look, plan: SimPlan, pick: dict, frame: int, step: int, flow: Optional[Convection] = None,
              air: bool = True) -> FrameState:
    """The frame state of the stored attributes ``pick`` (already in output order) at boundary ``step``.

    ``vel`` is the puffs' own velocity plus the air's, or their own alone when ``air`` is False.

    The output order is sorted by source first, so each source's rows are a
    slice, read and written in place.
    """
    age = _ages(step, pick["bstep"], pick["bfrac"], plan.dt)
    m = age.shape[0]
    x = age / pick["life"]
    opacity = np.empty(m)
    color = np.empty((m, 3))
    glow = np.zeros((m, 3))
    stretch = np.empty(m)
    density = np.empty(m)
    runs = _runs(look, pick["source"], ordered=True)
    size = _sizes(look, runs, pick["size0"], x)
    for i, rows in runs:
        src = look.sources[i]
        xs = x[rows]
        np.multiply(evaluate_ramp(src.opacity, xs), np.exp(-float(src.fade) * age[rows]), out=opacity[rows])
        color[rows] = evaluate_color_ramp(src.color, xs)
        if src.glow is not None:
            glow[rows] = evaluate_color_ramp(src.glow, xs)
        stretch[rows] = float(src.stretch)
        density[rows] = float(src.density)
    if air:
        vel = air_velocity(pick["pos"], time=plan.force_time(step), forces=plan.forces)
        vel += pick["vel"]  # own velocity plus air, added in place (addition commutes: the same bits)
    else:
        vel = pick["vel"]  # a fresh gather, not a buffer the next step moves
    snapshot = None
    if flow is not None and flow.active:
        if air:
            vel = vel + flow.sample(pick["pos"])
        snapshot = flow.snapshot()
        if snapshot is not None:
            snapshot["density"] = flow.grid.deposit(pick["pos"], opacity)
    return FrameState(frame=int(frame), time=frame / plan.fps, id=pick["id"], slot=pick["slot"],
                      source=pick["source"], pos=pick["pos"], vel=vel, age=age, life=pick["life"], size=size,
                      opacity=opacity, color=color, glow=glow, aspect=pick["aspect"], quat=pick["quat"],
                      stretch=stretch, density=density, deform=pick["deform"], flow=snapshot)


def simulate(look, plan: Optional[SimPlan] = None, *, frames: Iterable[int], sample: int = 1,
             warmup_frames: bool = False, hold: Optional[float] = None, air: bool = True) -> Iterator[FrameState]:
    """Run the simulation and yield the requested frames.

    Exact loops whose sources emit on their whole lattice (no ``start`` or
    ``stop``) simulate one loop period of births over their whole lives and
    read every frame off them and their twins (see the module notes); every
    other look runs from the start of the warm-up.  Both give the same bits.

    Parameters
    ----------
    look : LookSpec
    plan : SimPlan, optional
        From :func:`plan_simulation` (made here if not given; a look whose
        swirl octaves are "auto" needs one made with a pixel size).
    frames : iterable of int
        Frame indices, any order; they may run past ``clip.frames - 1``
        (the simulation simply continues); >= 0 unless ``warmup_frames``.
    sample : int
        Simulate only the puffs whose spawn slot is a multiple of ``sample``
        (1: all). Puffs never act on each other, so these are exactly the
        same puffs, with the same bits, as in the whole run: a cheap, exact
        subset for framing the camera.  With a convection flow they do act
        on each other through the air: the subset then lays ``sample`` times
        its heat, and moves close to, not exactly like, the whole run.
    warmup_frames : bool
        Allow negative frames, states of the warm-up down to
        ``-warmup_steps // substeps`` (the crossfade of a flow look blends
        the clip's end into them).
    hold : float, optional
        Bytes the twin driver may hold (default :data:`TWIN_MEMORY`; a
        render passes what its memory limit leaves, see
        :func:`splatter.cost.estimate_cost`).  An exact loop whose held
        frames (:func:`twin_hold_bytes`) would pass it runs from the warm-up
        instead: the same bits, more puff-steps, less memory.
    air : bool
        Add the air's velocity (swirl, vortex, convection flow) at each puff
        to its own in :attr:`FrameState.vel` (default). False leaves each
        puff's own velocity there and skips a pass over the swirl's modes a
        frame: a render passes it when nothing it draws reads velocities (no
        source stretches along its motion and no motion map). Nothing else
        in the states changes.

    Yields
    ------
    FrameState
        One per distinct requested frame, in increasing order.  The states do
        not depend on which other frames were requested.

    Examples
    --------
    >>> from splatter.look.records import ClipSpec, LookSpec, SourceSpec
    >>> look = LookSpec(name="doc", clip=ClipSpec(frames=4, fps=10, loop="exact"),
    ...                 sources=(SourceSpec(rate=20.0, life=(0.5, 0.8)),))
    >>> [(st.frame, len(st) > 0) for st in simulate(look, frames=[3, 0])]
    [(0, True), (3, True)]
    """
    wanted = sorted({int(f) for f in frames})
    if plan is None:
        plan = plan_simulation(look)
    if wanted and wanted[0] < 0 and not warmup_frames:
        raise ValueError(f"frames must be >= 0, got {wanted[0]}")
    if wanted and plan.frame_step(wanted[0]) < 0:
        raise ValueError(f"frames must be >= {-(plan.warmup_steps // plan.substeps)} (the warm-up's first whole "
                         f"frame), got {wanted[0]}")
    if not wanted:
        return
    if isinstance(sample, bool) or int(sample) != sample or sample < 1:
        raise ValueError(f"sample: expected an integer >= 1, got {sample!r}")
    sample = int(sample)
    hold = TWIN_MEMORY if hold is None else hold
    if isinstance(hold, bool) or not isinstance(hold, (int, float)) or not hold >= 0:
        raise ValueError(f"hold: expected a number of bytes >= 0, got {hold!r}")
    if _twins_apply(plan) and twin_hold_bytes(plan, len(wanted), sample) <= hold:
        yield from _simulate_twins(look, plan, wanted, sample, air)
    else:
        yield from _simulate_warmup(look, plan, wanted, sample, air)


def _keep_every(parts: list, sample: int) -> list:
    """The rows of freshly spawned ``parts`` whose spawn slot is a multiple of ``sample``."""
    if sample == 1:
        return parts
    out = []
    for p in parts:
        keep = p["slot"] % sample == 0
        if keep.all():
            out.append(p)
        elif keep.any():
            out.append({name: v[keep] for name, v in p.items()})
    return out


def _shaping(look, plan: SimPlan):
    """Per-source ``follow`` and ``elongation``, and whether shapes are advanced at all."""
    follow = np.array([float(src.follow) for src in look.sources])
    elongation = np.array([float(src.elongation) for src in look.sources])
    # Shapes only when some source follows a flow that has a gradient (swirl, vortex or convection).
    flowing = plan.forces.convection is not None and any(h != 0.0 for h in plan.forces.convection.heat)
    shaping = bool(np.any(follow > 0)) and (
        plan.forces.swirl_b.shape[0] + plan.forces.vortex.shape[0] > 0 or flowing)
    return follow, elongation, shaping


def _advance(look, plan: SimPlan, puffs: _Puffs, s: int, follow, elongation, shaping: bool,
             flow: Optional[Convection] = None) -> None:
    """Step every live puff from boundary ``s - 1`` to ``s`` and drop those an obstacle killed.

    With a convection ``flow``, the live puffs first lay their heat on its
    grid and step the air; every puff then rides the air's velocity there.
    """
    if not len(puffs):
        return
    a = puffs.a
    src = a["source"]
    ages = puffs.ages(s - 1, plan.dt)
    flowing = flow is not None and flow.active
    sigma = _sizes(look, _runs(look, src), a["size0"], ages / a["life"]) if shaping or flowing else None
    air = None
    if flowing:
        live = puffs.live[:puffs.n]
        flow.advance(a["pos"][live], sigma[live], src[live], ages[live], plan.dt)
        air = flow.sample(a["pos"], gradient=shaping)
    # One source: its values as they are (step_puffs spreads them over the puffs, cheaper than a gather).
    per_puff = (follow[0], elongation[0]) if follow.shape[0] == 1 else (follow[src], elongation[src])
    killed = step_puffs(a["pos"], a["vel"], ages, dt=plan.dt,
                        time=plan.force_time(s - 1), forces=plan.forces, obstacles=plan.obstacles,
                        integrator=plan.integrator, deform=a["deform"] if shaping else None,
                        follow=per_puff[0], elongation=per_puff[1], sigma=sigma if shaping else None,
                        flow=air)
    puffs.kill(killed)


def _simulate_warmup(look, plan: SimPlan, wanted: list, sample: int = 1, air: bool = True
                     ) -> Iterator[FrameState]:
    """Step every puff from the start of the warm-up (step 0) through the last wanted frame."""
    targets = iter(wanted)
    frame = next(targets)
    puffs = _Puffs()
    cursors = [0] * len(look.sources)
    draws: dict = {}
    next_id = 0
    last = plan.frame_step(wanted[-1])
    follow, elongation, shaping = _shaping(look, plan)
    conv = plan.forces.convection
    flow = Convection(conv, plan.obstacles, heat_scale=sample) if conv is not None else None
    for s in range(last + 1):
        if s > 0:
            _advance(look, plan, puffs, s, follow, elongation, shaping, flow)
        parts, next_id = _spawn(look, plan, s, cursors, draws, next_id)
        puffs.add(_keep_every(parts, sample))
        if len(puffs):
            puffs.kill(puffs.ages(s, plan.dt) >= puffs.a["life"])
        while frame is not None and plan.frame_step(frame) == s:
            yield _frame_state(look, plan, puffs, frame, s, flow, air)
            frame = next(targets, None)


# ---------------------------------------------------------------------------------------------------------------
# Exact loops from twins.

TWIN_MEMORY = 256 * 2**20
"""Bytes the twin driver may hold unless the caller allows more (``simulate``'s ``hold``); above it the
warm-up driver (same bits, less memory) runs.

The twin driver finishes a frame only when the puffs that fill it reach it,
so while puffs outlive a period it holds the moving state of nearly every
requested frame at once: about :data:`_TWIN_BYTES_PER_PUFF` per puff per frame.
"""

_TWIN_BYTES_PER_PUFF = 128  # position, velocity, deformation and bookkeeping of one puff in one held frame


def twin_hold_bytes(plan: SimPlan, frames: int, sample: int = 1) -> float:
    """Bytes the twin driver would hold for ``frames`` requested frames; 0 where it does not apply.

    Parameters
    ----------
    plan : SimPlan
    frames : int
        Requested frames.
    sample : int
        One puff in ``sample`` simulated (see :func:`simulate`).

    Returns
    -------
    float
        The estimate :func:`simulate` compares with its ``hold``: about
        :data:`_TWIN_BYTES_PER_PUFF` per steady-state puff per frame (an upper
        bound: a frame's share grows over the period).

    Examples
    --------
    >>> from splatter.look.records import ClipSpec, LookSpec, SourceSpec
    >>> look = LookSpec(name="doc", clip=ClipSpec(frames=4, fps=10, loop="exact"),
    ...                 sources=(SourceSpec(rate=100.0, life=(1.0, 1.0)),))
    >>> twin_hold_bytes(plan_simulation(look), 4)  # 100 puffs alive, 4 frames, 128 bytes each
    51200.0
    """
    if not _twins_apply(plan):
        return 0.0
    return plan.steady_state_puffs * frames * _TWIN_BYTES_PER_PUFF / sample


def _twins_apply(plan: SimPlan) -> bool:
    """True for an exact loop whose sources emit on their whole lattice (births repeat every period)
    and that has no convection flow (a flow's state depends on every puff before it, so it runs from
    the warm-up)."""
    return (plan.period_steps is not None and plan.forces.convection is None
            and all(sc.lo is None and sc.hi is None for sc in plan.schedules))


class _Births:
    """Closed-form birth counts of an exact loop, to give each puff the id the step-by-step driver gives it.

    That driver numbers puffs in birth order: boundary by boundary, source
    by source, a source's bursts (in listed order) before its lattice.
    """

    def __init__(self, plan: SimPlan):
        self.ns = int(plan.period_steps)
        self.per = [int(sc.per) for sc in plan.schedules]
        self.bursts = [tuple((int(b), int(n)) for b, _, n in sc.bursts) for sc in plan.schedules]

    def lattice(self, i: int, s: np.ndarray) -> np.ndarray:
        """Lattice births of source ``i`` at boundaries ``<= s``."""
        s = np.asarray(s, dtype=np.int64)
        if self.per[i] == 0:
            return np.zeros_like(s)
        return np.where(s >= 0, (s * self.per[i]) // self.ns + 1, 0)

    def count(self, i: int, s: np.ndarray) -> np.ndarray:
        """All births of source ``i`` at boundaries ``<= s``."""
        c = self.lattice(i, s)
        for b, n in self.bursts[i]:
            c = c + np.where(b <= s, n, 0)
        return c

    def first(self, i: int, s: np.ndarray) -> np.ndarray:
        """Id of the first puff source ``i`` gives at boundary ``s``."""
        s = np.asarray(s, dtype=np.int64)
        out = np.zeros_like(s)
        for q in range(len(self.per)):
            out += self.count(q, s - 1)
            if q < i:
                out += self.count(q, s) - self.count(q, s - 1)
        return out

    def lattice_ids(self, i: int, k: np.ndarray, s: np.ndarray) -> np.ndarray:
        """Ids of lattice slots ``k`` of source ``i``, born at boundaries ``s``."""
        s = np.asarray(s, dtype=np.int64)
        here = sum((np.where(b == s, n, 0) for b, n in self.bursts[i]), np.zeros_like(s))
        return self.first(i, s) + here + (k - self.lattice(i, s - 1))


# What stepping a twin needs (its other birth values are read from the static table when a frame is made).
_TWIN_FIELDS = ("source", "bstep", "bfrac", "life", "size0", "pos", "vel", "deform", "base")
_STATIC = ("id", "slot", "source", "bstep", "bfrac", "life", "size0", "aspect", "quat")


def _spawn_twins(look, plan: SimPlan, births: _Births, s: int, cursors: list, draws: dict):
    """Births at boundary ``s``: lattice slots of the first period (``k < per``) and bursts, as two lists."""
    lattice, bursts = [], []
    for i, (src, sched) in enumerate(zip(look.sources, plan.schedules)):
        offset = 0
        for b, (bstep, bfrac, count) in enumerate(sched.bursts):
            if bstep == s and count > 0:
                keys = np.arange(count, dtype=np.int64)
                u = draws.setdefault((i, 1 + b), PuffDraws(look.seed, i, 1 + b, N_DRAWS))(keys)
                before = sum(c for bs, _, c in sched.bursts[:b] if bs == s)
                ids = births.first(i, np.full(count, s, dtype=np.int64)) + before + keys
                bursts.append(_born(src, u, ids, sched.per + offset + keys, i, np.full(count, s, dtype=np.int64),
                                    np.full(count, bfrac), plan.dt))
            offset += count
        if cursors[i] >= sched.per:
            continue
        ks = sched.due(cursors[i], s)
        ks = ks[ks < sched.per]
        if ks.size == 0:
            continue
        cursors[i] = int(ks[-1]) + 1
        bstep, bfrac = sched.birth(ks)
        u = draws.setdefault((i, 0), PuffDraws(look.seed, i, 0, N_DRAWS))(ks)
        lattice.append(_born(src, u, births.lattice_ids(i, ks, bstep), ks, i, bstep, bfrac, plan.dt))
    return lattice, bursts


class _Rows(NamedTuple):
    """Rows of the moving state that go into a frame: ``pos[rows]``, ``vel[rows]``, ``deform[rows]``.

    Attributes
    ----------
    base : (m,) int64 ndarray
        Base numbers of those rows (their index in the static table).
    rows : (m,) int64 ndarray or None
        Which rows of the arrays below (None: all of them, in order).
    pos, vel : (n, 3) float64 ndarray
    deform : (n, 3, 3) float64 ndarray or None
        None when shapes are not advanced.
    """

    base: np.ndarray
    rows: Optional[np.ndarray]
    pos: np.ndarray
    vel: np.ndarray
    deform: Optional[np.ndarray]


def _snapshot(puffs: _Puffs, shaping: bool, copy: bool = True) -> _Rows:
    """The live rows of ``puffs``: copied (``copy``), or as views of its buffers for a frame made right now.

    The views save a copy of every moving field; they are only good until
    the puffs are next stepped, added to or killed.
    """
    live = np.flatnonzero(puffs.live[:puffs.n])
    b = puffs.buf
    base = np.take(b["base"], live)
    if not copy:
        return _Rows(base, live, b["pos"][:puffs.n], b["vel"][:puffs.n], b["deform"][:puffs.n] if shaping else None)
    return _Rows(base, None, np.take(b["pos"], live, axis=0), np.take(b["vel"], live, axis=0),
                 np.take(b["deform"], live, axis=0) if shaping else None)


def _gather_moving(parts: list, order: np.ndarray, shaping: bool) -> dict:
    """``pos``, ``vel`` and ``deform`` of the rows of ``parts`` (:class:`_Rows`, one after the other), taken
    in ``order``: one gather per field through composed row numbers."""
    if not parts:
        return {name: empty_field(name) for name in ("pos", "vel", "deform")}
    rows, offset = [], 0
    for p in parts:
        rows.append(offset + (np.arange(p.base.shape[0], dtype=np.int64) if p.rows is None else p.rows))
        offset += p.pos.shape[0]
    rows = np.take(rows[0] if len(parts) == 1 else np.concatenate(rows), order)
    out = {}
    for name in ("pos", "vel", "deform") if shaping else ("pos", "vel"):
        fields = [getattr(p, name) for p in parts]
        out[name] = np.take(fields[0] if len(fields) == 1 else np.concatenate(fields), rows, axis=0)
    if not shaping:
        out["deform"] = np.tile(np.eye(3), (order.shape[0], 1, 1))
    return out


def _simulate_twins(look, plan: SimPlan, wanted: list, sample: int = 1, air: bool = True
                    ) -> Iterator[FrameState]:
    """Exact loop from one period of births, each over its whole life.

    The lattice slots ``k < per`` of every source (born at boundaries
    ``0 .. Ns``) are stepped from birth to death, with the same step
    boundaries ``s`` (so the same force times ``(s mod Ns) dt``), ages and
    draws as in the warm-up driver.  Slot ``k + j per`` is born ``j Ns``
    steps later with the same draws and fraction, so at boundary ``S`` it is
    bit for bit slot ``k`` at boundary ``S - j Ns``: frame ``f`` (boundary
    ``S``) is the union, over ``j >= 0``, of the first-period puffs alive at
    ``S - j Ns``.  Bursts do not repeat; they are stepped as they are (the
    frame at ``S`` takes them at ``S``).
    """
    ns = int(plan.period_steps)
    births = _Births(plan)
    at = {f: plan.frame_step(f) for f in wanted}
    phase: dict = {}
    for f in wanted:
        phase.setdefault(at[f] % ns, []).append(f)
    chunks = {f: [] for f in wanted}
    last = at[wanted[-1]]
    twins, once = _Puffs(fields=_TWIN_FIELDS), _Puffs(fields=_TWIN_FIELDS)
    table = {name: [] for name in _STATIC}
    cache: dict = {}
    n_base = 0
    cursors = [0] * len(look.sources)
    draws: dict = {}
    follow, elongation, shaping = _shaping(look, plan)
    burst_steps = [b for sc in plan.schedules for b, _, n in sc.bursts if n > 0]
    targets = iter(wanted)
    frame = next(targets)

    def static():
        if cache.get("n") != n_base:  # rebuilt only after new births
            cache.update({name: np.concatenate(parts) if parts else empty_field(name)
                          for name, parts in table.items()}, n=n_base)
        return cache

    def state(f):
        parts = chunks.pop(f)
        t = static()
        base = np.concatenate([p.base for _, p in parts]) if parts else np.zeros(0, dtype=np.int64)
        # The sort keys first (a twin's id and birth step are its own), then every field gathered once.
        source, slot, ident, bstep = (np.take(t[name], base) for name in ("source", "slot", "id", "bstep"))
        end = 0
        for j, p in parts:  # the twins born j periods after the stepped puffs of part p
            start, end = end, end + p.base.shape[0]
            if j == 0:
                continue
            bstep[start:end] += j * ns
            for i, rows in _runs(look, source[start:end]):
                ident[start:end][rows] = births.lattice_ids(i, slot[start:end][rows] + j * births.per[i],
                                                            bstep[start:end][rows])
        order = np.lexsort((ident, slot, source))
        rows = np.take(base, order)
        pick = {"id": np.take(ident, order), "slot": np.take(slot, order), "source": np.take(source, order),
                "bstep": np.take(bstep, order)}
        pick.update({name: np.take(t[name], rows, axis=0) for name in ("bfrac", "life", "size0", "aspect", "quat")})
        pick.update(_gather_moving([p for _, p in parts], order, shaping))
        return _state_of(look, plan, pick, f, at[f], air=air)

    for s in range(last + 1):
        if s > 0:
            _advance(look, plan, twins, s, follow, elongation, shaping)
            _advance(look, plan, once, s, follow, elongation, shaping)
        lattice, bursts = _spawn_twins(look, plan, births, s, cursors, draws)
        for parts, puffs in ((_keep_every(lattice, sample), twins), (_keep_every(bursts, sample), once)):
            for p in parts:
                m = p["id"].shape[0]
                p["base"] = np.arange(n_base, n_base + m, dtype=np.int64)
                n_base += m
                for name in _STATIC:
                    table[name].append(p[name])
            puffs.add(parts)
            if len(puffs):
                puffs.kill(puffs.ages(s, plan.dt) >= puffs.a["life"])
        if s % ns in phase and len(twins):
            # A copy for the frames still to come; a frame made at this boundary reads the buffers themselves.
            snap = _snapshot(twins, shaping) if any(s < at[f] for f in phase[s % ns]) else None
            for f in phase[s % ns]:
                if s <= at[f]:
                    chunks[f].append(((at[f] - s) // ns, snap if s < at[f] else _snapshot(twins, shaping, False)))
        while frame is not None and at[frame] == s:
            if len(once):
                chunks[frame].append((0, _snapshot(once, shaping, False)))
            yield state(frame)
            frame = next(targets, None)
        if (not twins.alive and not once.alive and all(c >= sc.per for c, sc in zip(cursors, plan.schedules))
                and not any(s < b <= last for b in burst_steps)):
            break  # nothing alive and nothing left to be born: the other frames are complete
    while frame is not None:
        yield state(frame)
        frame = next(targets, None)


def empty_field(name: str) -> np.ndarray:
    """A zero-length array of per-puff field ``name`` with its trailing shape and dtype."""
    width = {"pos": (3,), "vel": (3,), "quat": (4,), "color": (3,), "glow": (3,), "deform": (3, 3)}.get(name, ())
    return np.zeros((0,) + width, dtype=_INT_FIELDS.get(name, np.float64))
