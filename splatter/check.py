"""``splatter check``: validate a look and say what a render would do and cost, writing nothing.

``check`` takes the options ``render`` takes, so swapping the verb is a dry
run: the same validation (every key, every sheet and output option), the
same files listed, the same memory estimate and limit, and exit 2 where the
render would refuse. It does not run the whole simulation: it samples it (a
subset of the puffs, every frame up to a time budget, a warm-up of at most
:data:`CHECK_WARMUP_STEPS` steps) for what needs puffs in motion: the
framing, smoke cut by the border, the share of the frame the smoke fills,
and steps too coarse for the swirl. ``full=True`` (``--full``) runs the whole
simulation as the render will.
"""

from __future__ import annotations

import contextlib
import math
import time
from dataclasses import dataclass, replace
from typing import List, Optional, Sequence

import numba
import numpy as np

from splatter.cost import births_per_step, estimate_cost, format_bytes, memory_limit
from splatter.deliver.names import planned_files
from splatter.look.records import LookSpec
from splatter.render import (
    FIT_OCTAVES,
    first_plan,
    fit_frames,
    fit_look_camera,
    make_camera,
    output_dir,
    pixel_size,
    plan_and_camera,
    unfitted,
)
from splatter.sim.driver import plan_simulation, simulate
from splatter.sim.integrate import step_puffs
from splatter.sim.plan import has_auto_octaves, with_octaves
from splatter.view.camera import Camera, project_puffs
from splatter.raster.compositor import composite_features
from splatter.view.framing import cut_by_border
from splatter.view.splats import seen_opacity

__all__ = ["check_look", "check_report", "border_report", "SampleStats", "sample_stats", "CHECK_PUFFS", "CHECK_SECONDS"]

CHECK_PUFFS = 400
"""About how many live puffs the sampled simulation keeps."""

CHECK_SECONDS = 0.5
"""Processor seconds the sampled simulation may take; frames it does not reach are left out."""

CHECK_FRAMES = 96
"""At most this many frames, evenly spaced over the clip, are sampled."""

CHECK_WARMUP_STEPS = 1500
"""The sample's warm-up is cut to this many steps (a long-lived look then starts thinner)."""

CHECK_BIRTHS = 200_000
"""Above this many puffs born in one step (a huge burst, a tiny fps) the simulation is not sampled."""

FILL_ALPHA = 0.05
"""Alpha at which ``check`` counts smoke as filling the frame."""


@dataclass
class SampleStats:
    """What a (sampled) simulation seen through the camera shows.

    Attributes
    ----------
    frames : int
        Frames looked at.
    cut_frames : int
        Frames where a visible rim is cut by the border.
    cut_peak : float
        Highest peak opacity of a cut puff.
    fill : tuple of float
        Share of the frame's width and height spanned, over the clip, by
        smoke at :data:`FILL_ALPHA` or more (the sampled puffs composited).
    sigma_max, sigma_mean : float
        Largest and mean footprint sigma in pixels (long axis).
    speed_max : float
        Largest speed of a puff, world units per second.
    """

    frames: int = 0
    cut_frames: int = 0
    cut_peak: float = 0.0
    fill: tuple = (0.0, 0.0)
    sigma_max: float = 0.0
    sigma_mean: float = 0.0
    speed_max: float = 0.0


def sample_stats(look: LookSpec, camera: Camera, states, sample: int = 1) -> SampleStats:
    """Project every puff of ``states`` and gather :class:`SampleStats`.

    ``sample``: the states hold one in ``sample`` puffs (each then stands
    for ``sample`` puffs' smoke when the fill is measured).
    """
    w, h = look.image.width, look.image.height
    out = SampleStats()
    box = [math.inf, math.inf, -math.inf, -math.inf]
    sig_sum, sig_n = 0.0, 0
    for state in states:
        out.frames += 1
        if len(state.size) == 0:
            continue
        s = project_puffs(camera, state.pos, state.size, state.aspect, state.quat, state.vel, state.stretch,
                          state.deform)
        op = seen_opacity(state, look.shading.blend, camera)
        cut = cut_by_border(s, op, w, h)
        if cut.any():
            out.cut_frames += 1
            out.cut_peak = max(out.cut_peak, float(op[cut].max()))
        vis = np.asarray(s.visible, dtype=bool)
        sx = np.sqrt(np.asarray(s.covs[vis, 0, 0], dtype=np.float64))
        sy = np.sqrt(np.asarray(s.covs[vis, 1, 1], dtype=np.float64))
        if sx.size:
            sig = np.maximum(sx, sy)
            out.sigma_max = max(out.sigma_max, float(sig.max()))
            sig_sum += float(sig.sum())
            sig_n += sig.size
            cover = _coverage(s, vis, op, w, h, sample)
            if cover is not None:
                rows, cols = np.flatnonzero(cover.any(axis=1)), np.flatnonzero(cover.any(axis=0))
                if rows.size:
                    fx, fy = w / cover.shape[1], h / cover.shape[0]
                    box = [min(box[0], cols[0] * fx), min(box[1], rows[0] * fy),
                           max(box[2], (cols[-1] + 1) * fx), max(box[3], (rows[-1] + 1) * fy)]
        speed = np.linalg.norm(state.vel, axis=1)
        out.speed_max = max(out.speed_max, float(speed.max()) if np.all(np.isfinite(speed)) else math.inf)
    if sig_n:
        out.sigma_mean = sig_sum / sig_n
    if box[0] < box[2]:
        out.fill = (max(0.0, min(box[2], w) - max(box[0], 0.0)) / w, max(0.0, min(box[3], h) - max(box[1], 0.0)) / h)
    return out


FILL_WIDTH = 128
"""Pixels across of the coarse alpha image the fill is measured on."""


def _coverage(s, vis, op, w, h, sample):
    """A coarse alpha image (:data:`FILL_WIDTH` across) of the visible puffs, thresholded at :data:`FILL_ALPHA`.

    With one puff in ``sample`` simulated, each stands for ``sample`` puffs
    in its place: its peak opacity ``a`` becomes ``1 - (1 - a)^sample``, and
    the puffs are added (``A = 1 - prod(1 - a_i g_i)``, order free, a lone
    puff's alpha exactly as drawn).
    """
    vis = vis & (op > 0)
    if not vis.any():
        return None
    scale = min(1.0, FILL_WIDTH / w)
    cw, ch = max(1, round(w * scale)), max(1, round(h * scale))
    means = np.asarray(s.means[vis], dtype=np.float64) * scale
    covs = np.asarray(s.covs[vis], dtype=np.float64) * scale**2
    covs += (0.1 + 1e-6 * (covs[:, 0, 0] + covs[:, 1, 1]))[:, None, None] * np.eye(2)  # drawable when shrunk
    opac = -np.expm1(np.log1p(-np.minimum(op[vis], 1.0 - 1e-6)) * sample)
    alpha = composite_features(means, covs, np.zeros((means.shape[0], 1)), opac, shape=(ch, cw), blend="add")
    return alpha[..., 1] >= FILL_ALPHA


def border_report(look: LookSpec, camera, plan, frames) -> List[str]:
    """Warnings for puffs whose visible footprint crosses the frame border, over the whole simulation of ``frames``."""
    return _border_lines(sample_stats(look, camera, simulate(look, plan, frames=frames)), "")


def _border_lines(st: SampleStats, sampled: str) -> List[str]:
    if st.cut_frames == 0:
        return []
    return [f"puffs cross the frame border in {st.cut_frames} of {st.frames}{sampled} frames (peak opacity up to "
            f"{st.cut_peak:.2f}); the sprite may look cut off. Set camera.fit = true or widen camera.view_width."]


def _load_step_kernels(plan) -> None:
    """Run one step of one puff, so the step kernels are loaded (or compiled) before the sample is timed."""
    step_puffs(np.zeros((1, 3)), np.zeros((1, 3)), np.zeros(1), dt=plan.dt, time=0.0, forces=plan.forces,
               obstacles=plan.obstacles, integrator=plan.integrator)


def _sampled(look: LookSpec, frames: Sequence[int], seconds: float):
    """A sampled simulation: the look's plan (fit octaves for "auto"), sampled states, and what was left out."""
    sim_look = with_octaves(look, FIT_OCTAVES) if has_auto_octaves(look) else look
    # Stepped frame after frame from a warm-up (an exact loop's twins would
    # step a whole period before its first frame): the same smoke in steady
    # state, seam aside, and every frame within the time budget.
    sim_look = replace(sim_look, clip=replace(sim_look.clip, loop="none"))
    plan = plan_simulation(sim_look)
    skipped = []
    if plan.warmup_steps > CHECK_WARMUP_STEPS:
        cut = CHECK_WARMUP_STEPS * plan.dt
        skipped.append(f"warm-up cut from {plan.warmup:.3g} s to {cut:.3g} s")
        sim_look = replace(sim_look, clip=replace(sim_look.clip, warmup=cut))
        plan = plan_simulation(sim_look)
    births = births_per_step(look, plan)
    if births > CHECK_BIRTHS:
        return [], [f"none: {births:,.0f} puffs born in one step is too many to sample"], 1
    sample = max(1, int(plan.steady_state_puffs // CHECK_PUFFS))
    frames = list(frames)
    stride = max(1, math.ceil(len(frames) / CHECK_FRAMES))
    wanted = frames[::stride]
    states = []
    _load_step_kernels(plan)  # from numba's cache, once per process: not the sample's time
    deadline = time.process_time() + seconds  # CPU time: a busy machine slows the clock, not the work
    for state in simulate(sim_look, plan, frames=wanted, sample=sample, warmup_frames=True):
        states.append(state)
        if time.process_time() > deadline:
            break
    if sample > 1:
        skipped.append(f"1 in {sample} puffs")
    if len(states) < len(frames):
        skipped.append(f"{len(states)} of {len(frames)} frames")
    return states, skipped, sample


@contextlib.contextmanager
def _one_thread(on: bool):
    """Run numba kernels on one thread: a few hundred puffs gain nothing from more, and on a busy
    machine each parallel call's waiting costs ten times its work (40 ms a call measured here)."""
    threads = numba.get_num_threads()
    if on:
        numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(threads)


def check_look(look: LookSpec, **options) -> str:
    """A plain-text summary of a validated look: what a render would write and cost, with warnings.

    The options are those of :func:`check_report`; a look the render would
    refuse for its memory still gets its summary (the estimate says so).
    """
    return check_report(look, **options)[0]


def check_report(look: LookSpec, *, full: bool = False, **options):
    """What ``splatter check`` prints, and the cost estimate the render would be judged by.

    See :func:`_report` for the options; ``full`` runs the whole simulation
    (on every thread), otherwise a sample runs on one.
    """
    with _one_thread(not full):
        return _report(look, full=full, **options)


def _report(look: LookSpec, *, frames: Optional[Sequence[int]] = None, out_dir: Optional[str] = None,
            full: bool = False, max_memory: Optional[str] = None, seconds: float = CHECK_SECONDS):
    """The text of ``splatter check`` and the render's cost estimate.

    Parameters
    ----------
    look : LookSpec
    frames : sequence of int, optional
        The frames a render would render (default: the clip).
    out_dir : str, optional
        ``--out``: replaces ``output.dir``.
    full : bool
        Simulate everything, as the render will, instead of a sample.
    max_memory : str, optional
        ``--max-memory``: the memory limit (default: a share of what is free).
    seconds : float
        Time budget of the sampled simulation.

    Returns
    -------
    text : str
    estimate : CostEstimate
        :func:`splatter.cost.refuse_if_too_big` on it raises what the render would.

    Raises
    ------
    LookError
        Sheet options that cannot hold the frames.
    """
    clip, img = look.clip, look.image
    wanted = list(frames) if frames is not None else list(range(clip.frames))
    folder = output_dir(look, out_dir)
    first = first_plan(look)
    base = make_camera(unfitted(look))
    limit = memory_limit(max_memory)
    if full and not estimate_cost(look, first, pixel_size(base), len(wanted), limit=limit).fits:
        full = False  # the whole simulation would not fit either: sample it, and say the render is refused
    if full:
        plan, camera = plan_and_camera(look)
        states, skipped, sample = simulate(look, plan, frames=wanted), [], 1
    else:
        states, skipped, sample = _sampled(look, fit_frames(look, first), seconds)
        camera = base
        if look.camera.fit:
            camera = fit_look_camera(look, base, states, sample)
        plan = plan_simulation(look, pixel_size=pixel_size(camera) if has_auto_octaves(look) else None)
    stats = sample_stats(look, camera, states, sample)
    sampled = f" sampled ({', '.join(skipped)})" if skipped else ""
    est = estimate_cost(look, plan, pixel_size(camera), len(wanted), limit=limit,
                        mean_sigma_px=stats.sigma_mean or None)

    lines = [
        f"look      {look.name} (seed {look.seed})" + (f", from {look.path}" if look.path else ""),
        f"clip      {clip.frames} frames at {clip.fps:g} fps = {clip.duration:.2f} s, loop {clip.loop}"
        + (f" (broken by {', '.join(plan.loop_breaks)}: the sheet says none)" if plan.loop_breaks else "")
        + f", {clip.substeps} substeps ({clip.integrator}), warm-up {plan.warmup_steps * plan.dt:.2f} s",
        f"image     {img.width} x {img.height} px, camera {look.camera.projection}"
        + (" (fit to the clip" + (", estimated from the sample)" if not full else ")") if look.camera.fit else ""),
        f"shading   blend {look.shading.blend}" + (", lit with self-shadowing" if look.shading.light else ""),
    ]
    for i, src in enumerate(look.sources):
        rate = plan.rates[i]
        life = src.life[0] if src.life[0] == src.life[1] else f"{src.life[0]:g}-{src.life[1]:g}"
        bursts = f", {sum(b.count for b in src.bursts)} puffs in bursts" if src.bursts else ""
        lines.append(f"source[{i}] {src.shape} at {list(src.center)}, {rate:g} puffs/s, life {life} s{bursts}")
    kinds = [f.kind for f in look.forces]
    octaves = iter(plan.swirl_octaves)  # one per swirl, in force order
    for i, f in enumerate(look.forces):
        if f.kind == "swirl":
            n = next(octaves)
            eddy = f.scale / 2 ** (n - 1) / pixel_size(camera)  # wavelength of the last octave at the target
            kinds[i] = f"swirl ({n} octaves{', auto' if f.octaves is None else ''}, smallest eddy {eddy:.1f} px)"
        elif f.kind == "convection":
            flux = sum(r * s.heat for r, s in zip(plan.rates, look.sources)) * f.buoyancy
            kinds[i] = f"convection ({f.cells} cells, buoyancy flux {flux:.3g} units^4/s^3)"
    obst = [o.kind for o in look.obstacles]
    lines.append(f"forces    {', '.join(kinds) or 'none'}; obstacles {', '.join(obst) or 'none'}")
    lines.append(f"puffs     about {plan.steady_state_puffs:,.0f} alive at steady state")
    if stats.fill[0] > 0:
        fw, fh = stats.fill
        lines.append(f"fill      smoke above {FILL_ALPHA:.0%} alpha spans {fw:.0%} x {fh:.0%} of the frame "
                     f"({fw * fh:.0%} of its area) over the clip{sampled and ' (sampled)'}")
    lines += est.lines()
    files = planned_files(look, folder, wanted)
    lines.append(f"writes    {len(files)} files to {folder}/")
    shown = files if len(files) <= 8 else files[:3] + ["..."] + files[-4:]
    lines += [f"          {f}" for f in shown]
    if skipped:
        lines.append(f"sampled   {', '.join(skipped)} in {seconds:g} s; check --full simulates everything")
    out = look.output
    if out.maps and "exr" not in out.frames and out.sheet is None and not out.map_frames:
        lines.append("warning   output.maps: maps are written as EXR layers, map sheets and map frames; "
                     "ask for exr frames, a sheet or map_frames = true to get them")
    for note in plan.notes:
        lines.append(f"note      {note}")
    for warn in plan.warnings:
        lines.append(f"warning   {warn}")
    for warn in _border_lines(stats, sampled and " sampled"):
        lines.append(f"warning   {warn}")
    for warn in _stiffness(look, plan, stats):
        lines.append(f"warning   {warn}")
    if not est.fits:
        lines.append(f"refused   the render would not fit the {format_bytes(est.limit)} limit: {est.hints[est.driver()]}")
    return "\n".join(lines), est


def _stiffness(look: LookSpec, plan, st: SampleStats) -> List[str]:
    """Steps too long for a vortex's core, and velocities that left the finite numbers.

    Drag and wind grip are integrated exactly (:mod:`splatter.sim.integrate`),
    so they are stable at any step. Advection by a vortex is not: in its
    core the air turns rigidly at ``w = strength / radius`` and one step
    multiplies a puff's distance from the axis by ``|R(i w h)|``, the
    method's stability function: ``sqrt(1 + (w h)^2)`` for both Euler
    methods (the air velocity is taken at the step's start) and
    ``sqrt(1 + (w h)^4 / 4)`` for the midpoint rule (Hairer & Wanner, Solving
    ODEs II, section IV.2 [from memory]). Over a puff's longest life that
    spirals it outward; more than 10 % is warned about.
    """
    out = []
    if not math.isfinite(st.speed_max):
        out.append("the simulation produced non-finite velocities; please report the look")
    life = max((s.life[1] for s in look.sources), default=0.0)
    steps = life / plan.dt
    for i, f in enumerate(look.forces):
        if f.kind != "vortex" or f.strength == 0:
            continue
        wh = abs(f.strength) / f.radius * plan.dt
        per_step = math.sqrt(1 + wh**4 / 4) if plan.integrator == "midpoint" else math.sqrt(1 + wh**2)
        growth = math.exp(min(700.0, steps * math.log(per_step)))
        if growth > 1.1:
            out.append(f"force[{i}]: the vortex core turns {wh:.3g} rad a step, so puffs spiral out of it (up to "
                       f"{growth:.3g} times their distance over a {life:g} s life); raise clip.substeps, use "
                       f"integrator = \"midpoint\", or lower strength / radius")
    return out
