"""The simulation plan: everything derived once from a look, before any step.

Step ``dt = 1 / (fps * substeps)``; warm-up in whole steps (``"auto"``: the
longest possible puff life); the exact-loop period in steps; each source's
birth lattice (:class:`splatter.sim.emit.Schedule`) with its effective rate; the
packed forces (gust periods and swirl frequencies snapped to the loop, swirl
``octaves = "auto"`` resolved from the pixel size the caller gives) and
obstacles; and plain-sentence notes on what was adjusted or cannot loop.

The pixel size comes from the camera, a later stage, so the caller (render,
check) works it out from the framing and passes it in as a plain number.
See :mod:`splatter.sim.driver` for how time is counted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import Optional, Tuple

from splatter.sim.emit import Schedule
from splatter.sim.forces import ForceTables, pack_forces
from splatter.sim.obstacles import ObstacleTables, pack_obstacles
from splatter.sim.swirl import auto_octaves

__all__ = ["SimPlan", "plan_simulation", "has_auto_octaves", "with_octaves", "crossfade_frames", "flows"]

_MAX_DENOMINATOR = 1 << 20  # rational births per step when not looping: rate error < 1e-6


@dataclass(frozen=True, eq=False)
class SimPlan:
    """Everything the simulation derives once from a look.

    Attributes
    ----------
    dt : float
        Step, ``1 / (fps * substeps)`` seconds.
    fps : float
    substeps : int
    frames : int
        ``clip.frames``.
    integrator : str
    loop : str
        ``clip.loop``.
    warmup_steps : int
        Steps before frame 0 (the origin of step counts).  An exact loop
        whose sources emit on their whole lattice does not step a warm-up
        population: the driver reads it off the twins (see
        :mod:`splatter.sim.driver`).
    warmup : float
        ``warmup_steps * dt`` seconds.
    period : float or None
        Loop period ``frames / fps`` when ``loop == "exact"``.
    period_steps : int or None
        ``frames * substeps`` when looping exactly.
    rates : tuple of float
        Effective puffs per second of each source (snapped when looping).
    schedules : tuple of Schedule
        Birth lattice and bursts of each source (see :mod:`splatter.sim.emit`).
    gust_periods : tuple of tuple of float
        Per wind force (in force order), the three gust periods used.
    forces : ForceTables
    obstacles : ObstacleTables
    notes : tuple of str
        Plain sentences: the key, then what was done.
    warnings : tuple of str
        Plain sentences, the key first, on settings that break what the
        look asks for: a source that starts, stops or bursts inside an exact
        loop (the seam jumps), a crossfade that rounds to far fewer or more
        frames than asked.
    loop_breaks : tuple of str
        The keys that keep an exact loop from closing (empty when it closes
        or the clip does not loop exactly).
    steady_state_puffs : float
        Expected puffs alive at steady state: sum of rate * mean life, plus
        every burst's count.
    swirl_octaves : tuple of int
        Per swirl force (in force order), the octave count used ("auto" resolved).
    pixel_size : float or None
        World units per pixel the plan was made for (None when not given).
    """

    dt: float
    fps: float
    substeps: int
    frames: int
    integrator: str
    loop: str
    warmup_steps: int
    warmup: float
    period: Optional[float]
    period_steps: Optional[int]
    rates: Tuple[float, ...]
    schedules: Tuple[Schedule, ...]
    gust_periods: Tuple[Tuple[float, ...], ...]
    forces: ForceTables
    obstacles: ObstacleTables
    notes: Tuple[str, ...]
    steady_state_puffs: float
    swirl_octaves: Tuple[int, ...] = ()
    pixel_size: Optional[float] = None
    warnings: Tuple[str, ...] = ()
    loop_breaks: Tuple[str, ...] = ()

    @property
    def effective_loop(self) -> str:
        """What the clip really is: ``clip.loop``, except ``"none"`` when an exact loop is broken.

        The sheet metadata states this, so an engine never treats a clip
        whose seam jumps as a seamless loop.
        """
        return "none" if self.loop_breaks else self.loop

    def frame_step(self, frame: int) -> int:
        """Step boundary of ``frame``."""
        return self.warmup_steps + int(frame) * self.substeps

    def force_time(self, step: int) -> float:
        """Time the forces see at step boundary ``step``, seconds."""
        if self.period_steps is not None:
            return (step % self.period_steps) * self.dt
        return (step - self.warmup_steps) * self.dt


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _burst_boundary(time: float, warmup_steps: int, steps_per_second: float):
    x = warmup_steps + time * steps_per_second
    if abs(x - round(x)) < 1e-9:
        x = float(round(x))
    s = max(0, math.ceil(x))
    return s, max(0.0, s - x)


def crossfade_frames(clip) -> int:
    """Frames a crossfade loop blends across the seam: ``clip.crossfade`` of the clip, at least 1 (0 otherwise).

    Examples
    --------
    >>> from splatter.look.records import ClipSpec
    >>> crossfade_frames(ClipSpec(frames=64, loop="crossfade")), crossfade_frames(ClipSpec(frames=4, loop="crossfade"))
    (16, 1)
    """
    if clip.loop != "crossfade":
        return 0
    return max(1, int(round(clip.crossfade * clip.frames)))


def has_auto_octaves(look) -> bool:
    """True when a swirl force of ``look`` leaves its octave count to the plan (``octaves = "auto"``)."""
    return any(getattr(f, "kind", None) == "swirl" and f.octaves is None for f in look.forces)


def with_octaves(look, count: int):
    """``look`` with every "auto" swirl given ``count`` octaves (explicit counts are kept).

    Used to frame a fit camera before the octaves are known: the framing
    depends on the large eddies, hardly on the finest.
    """
    forces = tuple(replace(f, octaves=int(count)) if getattr(f, "kind", None) == "swirl" and f.octaves is None
                   else f for f in look.forces)
    return replace(look, forces=forces)


def _resolve_octaves(forces, pixel_size):
    out = []
    for i, f in enumerate(forces):
        if getattr(f, "kind", None) == "swirl" and f.octaves is None:
            if pixel_size is None:
                raise ValueError(f'force[{i}].octaves is "auto": plan_simulation needs pixel_size (world units '
                                 f'per pixel at the final framing) to resolve it')
            f = replace(f, octaves=auto_octaves(float(f.scale), float(pixel_size)))
        out.append(f)
    return tuple(out)


def flows(plan: SimPlan) -> bool:
    """True when the plan's convection flow moves (a convection force and a source with heat)."""
    conv = plan.forces.convection
    return conv is not None and any(h != 0.0 for h in conv.heat)


def _flow_notes(look, forces: ForceTables) -> list:
    """What a convection force means for the loop, and heat that moves nothing."""
    flow = [i for i, f in enumerate(look.forces) if f.kind == "convection"]
    hot = [i for i, s in enumerate(look.sources) if s.heat > 0]
    notes = []
    if flow and hot and look.clip.loop == "exact":
        notes.append(f'force[{flow[0]}]: a convection flow cannot repeat by construction, so clip.loop = "exact" '
                     f'will show a jump at the seam; use clip.loop = "crossfade" for a seamless flipbook')
    if flow and not hot:
        notes.append(f"force[{flow[0]}]: no source has heat > 0, so the convection flow stays still; "
                     f"give a source heat (source[0].heat) to make it rise")
    if hot and not flow:
        notes.append(f'source[{hot[0]}].heat: no force of kind "convection", so the heat moves nothing')
    return notes


def plan_simulation(look, *, pixel_size: Optional[float] = None) -> SimPlan:
    """Derive the step, warm-up, loop period, effective rates and notes of a look.

    Parameters
    ----------
    look : LookSpec
    pixel_size : float, optional
        World units per pixel at the final framing; needed when a swirl's
        ``octaves`` is "auto" (:func:`splatter.sim.swirl.auto_octaves`),
        ignored otherwise.

    Returns
    -------
    SimPlan

    Raises
    ------
    ValueError
        A swirl's octaves are "auto" and ``pixel_size`` is not given.
    """
    if pixel_size is not None and not (math.isfinite(pixel_size) and pixel_size > 0):
        raise ValueError(f"pixel_size: expected a number > 0, got {pixel_size!r}")
    resolved = _resolve_octaves(look.forces, pixel_size)
    clip = look.clip
    if clip.frames < 1 or not clip.fps > 0 or clip.substeps < 1:
        raise ValueError(f"clip needs frames >= 1, fps > 0, substeps >= 1; got {clip.frames}, {clip.fps}, "
                         f"{clip.substeps}")
    sps = float(clip.fps) * int(clip.substeps)  # steps per second
    dt = 1.0 / sps
    notes = []
    max_life = max((float(s.life[1]) for s in look.sources), default=0.0)
    exact = clip.loop == "exact"
    period = clip.frames / clip.fps if exact else None
    period_steps = clip.frames * clip.substeps if exact else None

    warmup = max_life if clip.warmup is None else float(clip.warmup)
    warmup_steps = max(0, math.ceil(warmup * sps - 1e-9))
    if exact and warmup_steps * dt < max_life:
        warmup_steps = math.ceil(max_life * sps - 1e-9)
        notes.append(f"clip.warmup: {_fmt(warmup)} s raised to {_fmt(warmup_steps * dt)} s, the longest puff life, "
                     f"so frame 0 of the exact loop is in steady state")
    warns, breaks = [], []
    flowing = any(f.kind == "convection" for f in look.forces) and any(s.heat > 0 for s in look.sources)
    if clip.loop == "crossfade":
        fade = crossfade_frames(clip)
        asked = clip.crossfade * clip.frames
        if flowing:
            if warmup_steps < fade * clip.substeps:
                warmup_steps = fade * clip.substeps
                notes.append(f"clip.warmup: {_fmt(warmup)} s raised to {_fmt(warmup_steps * dt)} s, the "
                             f"crossfade's {fade} frames, which are simulated before frame 0")
            notes.append(f"clip.loop: crossfade; the last {fade} frames ({_fmt(clip.crossfade)} of the clip) fade "
                         f"into the {fade} frames the simulation ran just before frame 0, so the flow is simulated "
                         f"once")
        else:
            notes.append(f"clip.loop: crossfade; the simulation runs on past the last frame and the renderer "
                         f"blends {fade} frames ({_fmt(clip.crossfade)} of the clip) across the seam")
        if abs(fade - asked) > max(0.25, 0.1 * asked):
            warns.append(f"clip.crossfade: {_fmt(clip.crossfade)} of {clip.frames} frames is {_fmt(asked)} frames; "
                         f"the seam is blended over {fade} frame{'s' if fade > 1 else ''} "
                         f"({_fmt(fade / clip.frames)} of the clip). Set clip.crossfade to a multiple of "
                         f"{_fmt(1 / clip.frames)} or render more frames")

    rates, schedules = [], []
    steady = 0.0
    for i, src in enumerate(look.sources):
        key = f"source[{i}]"
        rate = float(src.rate)
        start = float(src.start)
        stop = None if src.stop is None else float(src.stop)
        lo = warmup_steps + start * sps if start > 0 else None
        hi = None if stop is None else warmup_steps + stop * sps
        if exact:
            per = 0
            if rate > 0:
                per = max(1, round(rate * period))
                eff = per / period
                if eff != rate:
                    notes.append(f"{key}.rate: {_fmt(rate)}/s snapped to {_fmt(eff)}/s so {per} puffs are born "
                                 f"per {_fmt(period)} s loop period")
            eff = per / period
            sched = Schedule(per=per, steps=period_steps, origin=0, lo=lo, hi=hi)
            if per and start > 0:
                breaks.append(f"{key}.start")
                warns.append(f"{key}.start: the source starts at {_fmt(start)} s, inside the clip; the exact loop "
                             f"will show a jump at the seam (set start = 0, or loop = \"crossfade\")")
            if per and stop is not None and stop < period:
                breaks.append(f"{key}.stop")
                warns.append(f"{key}.stop: the source stops at {_fmt(stop)} s, before the {_fmt(period)} s loop "
                             f"period ends; the exact loop will show a jump at the seam (set stop = \"never\", or "
                             f"loop = \"crossfade\")")
            if src.bursts:
                breaks.append(f"{key}.bursts")
                warns.append(f"{key}.bursts: a burst cannot repeat in an exact loop; the loop will show a jump at "
                             f"the seam (drop the bursts, or set loop = \"none\" for a one-shot)")
            if per and float(src.life[1]) > period:
                notes.append(f"{key}.life: puffs live up to {_fmt(src.life[1])} s, longer than the {_fmt(period)} s "
                             f"loop period, so twins born one period apart are alive together")
        else:
            per, steps = 0, 1
            if rate > 0:
                frac = Fraction(rate * dt).limit_denominator(_MAX_DENOMINATOR)
                per, steps = frac.numerator, frac.denominator
                if per == 0:
                    notes.append(f"{key}.rate: {_fmt(rate)}/s is below one puff per {_MAX_DENOMINATOR} steps; "
                                 f"the source emits nothing")
            eff = per / (steps * dt)
            origin = 0 if start <= 0 else warmup_steps + round(start * sps)
            sched = Schedule(per=per, steps=steps, origin=origin, lo=None, hi=hi)
        bursts = tuple(_burst_boundary(float(b.time), warmup_steps, sps) + (int(b.count),) for b in src.bursts)
        sched = Schedule(per=sched.per, steps=sched.steps, origin=sched.origin, lo=sched.lo, hi=sched.hi,
                         bursts=bursts)
        rates.append(eff)
        schedules.append(sched)
        steady += eff * 0.5 * (float(src.life[0]) + float(src.life[1])) + sum(int(b.count) for b in src.bursts)

    forces = pack_forces(resolved, seed=look.seed, loop_period=period, heat=[float(s.heat) for s in look.sources])
    notes += _flow_notes(look, forces)
    if exact:
        w = 0
        for i, f in enumerate(look.forces):
            if f.kind == "wind":
                used = forces.gust_periods[w][0]
                w += 1
                if f.gust > 0 and abs(used - f.gust_period) > 1e-9 * f.gust_period:
                    notes.append(f"force[{i}].gust_period: {_fmt(f.gust_period)} s snapped to {_fmt(used)} s, a "
                                 f"whole number of gust cycles per {_fmt(period)} s loop period (the faster gust "
                                 f"components are snapped the same way)")
            elif f.kind == "swirl" and f.evolve > 0:
                notes.append(f"force[{i}].evolve: each swirl mode's frequency snapped to a whole number (>= 1) of "
                             f"cycles per {_fmt(period)} s loop period, so the flow repeats with the loop")
    return SimPlan(dt=dt, fps=float(clip.fps), substeps=int(clip.substeps), frames=int(clip.frames),
                   integrator=clip.integrator, loop=clip.loop, warmup_steps=warmup_steps,
                   warmup=warmup_steps * dt, period=period, period_steps=period_steps, rates=tuple(rates),
                   schedules=tuple(schedules), gust_periods=forces.gust_periods, forces=forces,
                   obstacles=pack_obstacles(look.obstacles), notes=tuple(notes), steady_state_puffs=steady,
                   swirl_octaves=tuple(f.octaves for f in resolved if f.kind == "swirl"),
                   pixel_size=None if pixel_size is None else float(pixel_size), warnings=tuple(warns),
                   loop_breaks=tuple(breaks))
