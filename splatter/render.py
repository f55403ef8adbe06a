"""Render a look: the whole pipeline, one frame at a time.

look -> simulate -> (light) -> project -> composite -> maps -> outputs.
This module and :mod:`splatter.cli` are the only ones that see every stage.
Memory stays at one frame's puffs and image (plus what the sheet needs).
"""

from __future__ import annotations

import sys
import time
import warnings
from dataclasses import dataclass, field, replace
from typing import Dict, Iterable, Iterator, List, NamedTuple, Optional

import numpy as np

from splatter.core.args import check_choice
from splatter.core.choices import MAPS
from splatter.core.errors import LookError, LookWarning
from splatter.core.thresholds import VISIBLE_ALPHA
from splatter.cost import estimate_cost, memory_limit, refuse_if_too_big
from splatter.deliver.folder import RenderFolder, check_folder, missing_folders, remove_folders
from splatter.deliver.names import planned_files
from splatter.deliver.sink import OutputSink
from splatter.fit import FIT_PUFFS, fit_to_smoke
from splatter.look.load import load_look
from splatter.look.records import LookSpec
from splatter.raster.compositor import composite_features, kernels_cached
from splatter.raster.maps import normal_map
from splatter.sim.driver import SimPlan, plan_simulation, simulate
from splatter.sim.plan import crossfade_frames, flows, has_auto_octaves, with_octaves
from splatter.view.camera import Camera
from splatter.view.framing import border_alpha_share, max_border_alpha
from splatter.view.light import build_density_grid, light_puffs, transmittance
from splatter.view.splats import feature_layout, make_splats, seen_opacity, split_layers

__all__ = ["render", "render_frames", "Frame", "as_look", "RenderResult", "make_camera", "plan_and_camera",
           "look_plan", "pixel_size", "output_dir", "frame_images", "prepare_kernels", "unfitted", "first_plan", "fit_frames",
           "fit_look_camera"]

FIT_OCTAVES = 2
"""Octaves an "auto" swirl is simulated with to fit the camera, before its count is known.

The count depends on the framing and a fit framing on the simulation; the
framing follows the large eddies, so it is fitted first with this small fixed
count, the octaves are resolved from that framing, and the camera is fitted
again on the flow with those octaves (what the render shows).
"""


@dataclass
class RenderResult:
    """What a render did.

    Attributes
    ----------
    name : str
    out_dir : str
    frames : list of int
    files : list of str
    seconds : dict of str to float
        Wall time per stage: simulate, light, project, composite, write.
    max_border_alpha : float
        Highest alpha found on any frame's outermost pixel ring.
    """

    name: str
    out_dir: str
    frames: List[int]
    files: List[str] = field(default_factory=list)
    seconds: Dict[str, float] = field(default_factory=dict)
    max_border_alpha: float = 0.0

    def summary(self) -> str:
        """One line for the end of ``splatter render``."""
        total = self.seconds.get("total", 0.0)
        if not self.files:
            return f"splatter: nothing to resume: the render of {self.name} in {self.out_dir} is complete"
        return (
            f"splatter: rendered {len(self.frames)} frames of {self.name} in {total:.1f} s; "
            f"wrote {len(self.files)} files to {self.out_dir}"
        )


def output_dir(look: LookSpec, out_dir: Optional[str] = None) -> str:
    """The output folder with ``{name}`` and ``{seed}`` filled in."""
    template = out_dir if out_dir is not None else look.output.dir
    try:
        return template.format(name=look.name, seed=look.seed)
    except (KeyError, IndexError, ValueError):
        raise LookError("--out" if out_dir is not None else look.path, "output.dir",
                        "a folder path whose only placeholders are {name} and {seed}", repr(template)) from None


def make_camera(look: LookSpec, plan: Optional[SimPlan] = None, frames: Optional[Iterable[int]] = None) -> Camera:
    """The look's camera; with ``camera.fit`` framed on every puff of ``frames``.

    ``frames`` defaults to the whole clip (plus the crossfade frames), so a
    partial render frames exactly like a full one.  A look with "auto" swirl
    octaves and no ``plan`` is fitted with :data:`FIT_OCTAVES` for them;
    :func:`plan_and_camera` then resolves the octaves at that framing and
    fits again with them.
    """
    c = look.camera
    cam = Camera(
        projection=c.projection, eye=c.eye, target=c.target, up=c.up,
        width=look.image.width, height=look.image.height, view_width=c.view_width, fov=c.fov,
    )
    if not c.fit:
        return cam
    if plan is None and has_auto_octaves(look):
        # Framed before the octaves are known (see FIT_OCTAVES).
        look = with_octaves(look, FIT_OCTAVES)
    plan = plan or plan_simulation(look)
    if frames is None:
        frames = fit_frames(look, plan)
    sample = max(1, int(plan.steady_state_puffs // FIT_PUFFS))
    states = simulate(look, plan, frames=frames, sample=sample, warmup_frames=True, air=reads_velocity(look))
    return fit_look_camera(look, cam, states, sample)


def reads_velocity(look: LookSpec, maps: Optional[Iterable[str]] = None) -> bool:
    """Whether a render's pictures read the puffs' velocities: a source that stretches along its
    motion (``stretch > 0``) or a motion map (``maps``, default the look's own). When not, the
    simulation leaves the air's velocity out of its states (``simulate(..., air=False)``): the
    pictures and the framing are the same bits."""
    maps = look.output.maps if maps is None else maps
    return "motion" in maps or any(float(src.stretch) > 0.0 for src in look.sources)


def fit_look_camera(look: LookSpec, camera: Camera, states, sample: int = 1) -> Camera:
    """``camera`` framed by ``camera.fit``'s rule on ``states`` (one puff in ``sample``).

    The one rule behind the render's framing and ``check``'s sampled one:
    the region where the smoke's composited alpha reaches ``camera.fit_alpha``
    with ``camera.margin`` kept clear (:func:`splatter.fit.fit_to_smoke`).
    """
    blend = look.shading.blend
    # The fit keeps the view direction, so the camera's axes (which thinning uses) are already final.
    return fit_to_smoke(camera, states, margin=look.camera.margin, alpha=look.camera.fit_alpha, blend=blend,
                        sample=sample, opacity_of=lambda state: seen_opacity(state, blend, camera))


def fit_frames(look: LookSpec, plan: SimPlan) -> range:
    """The frames ``camera.fit`` frames: the clip and the other end of its crossfade, which a
    flow (simulated once) takes from before frame 0 and other looks from after the clip."""
    fade = crossfade_frames(look.clip)
    return range(-fade, look.clip.frames) if flows(plan) else range(look.clip.frames + fade)


def unfitted(look: LookSpec) -> LookSpec:
    """``look`` with ``camera.fit`` off: the camera it starts from, known without simulating."""
    return replace(look, camera=replace(look.camera, fit=False))


def first_plan(look: LookSpec) -> SimPlan:
    """A plan made without simulating: "auto" swirl octaves at :data:`FIT_OCTAVES`.

    Its puff counts, steps and loop are those of the render's plan (only the
    octave count may differ), so the cost of a look can be judged before
    ``camera.fit`` simulates.
    """
    return plan_simulation(with_octaves(look, FIT_OCTAVES) if has_auto_octaves(look) else look)


def pixel_size(camera: Camera) -> float:
    """World units per pixel at the camera's target.

    Orthographic: ``view_width / width``.  Perspective: the size of a pixel
    at the distance from the eye to the target (a fit camera puts the target
    at the puffs' mean depth), ``distance / focal_px``.

    Examples
    --------
    >>> pixel_size(Camera(view_width=4.0, width=256, height=128))
    0.015625
    >>> round(pixel_size(Camera(projection="perspective", fov=90.0, height=200)), 6)  # 10 units away
    0.1
    """
    depth = float(np.linalg.norm(np.subtract(camera.target, camera.eye)))
    return float(1.0 / camera.pixels_per_unit(depth))


def refuse_if_over_memory(look: LookSpec, n_frames: int, *, max_memory=None, plan: Optional[SimPlan] = None,
                          camera: Optional[Camera] = None, option_name: str = "max_memory") -> float:
    """Raise :class:`LookError` (nothing simulated or written) when the render would not fit in memory.

    Without ``plan`` and ``camera`` the estimate is made at the look's own
    camera with :func:`first_plan` (no simulation: framing itself simulates,
    so this comes first); with them, at the final framing.  Every way in
    (the command line, ``render``, ``render_frames``, ``vary``'s workers)
    goes through here, so a legal look is refused rather than let exhaust
    the machine's memory.

    Parameters
    ----------
    look : LookSpec
    n_frames : int
        Frames to render.
    max_memory : int, str or None
        The limit: bytes, a size such as ``"8G"``, or None for a share of the
        memory the machine has free (:func:`splatter.cost.memory_limit`).
    plan, camera : optional
        From :func:`plan_and_camera`.
    option_name : str
        How the caller sets the limit, named in the message.

    Returns
    -------
    float
        Bytes the simulation's twin driver may hold within the limit
        (:attr:`splatter.cost.CostEstimate.hold`), for ``simulate``'s ``hold``.

    Raises
    ------
    LookError
        The estimate's largest part, its key and the limit to ask for.
    """
    limit = max_memory if isinstance(max_memory, int) else memory_limit(max_memory)
    if plan is None or camera is None:
        plan, camera = first_plan(look), make_camera(unfitted(look))
    est = estimate_cost(look, plan, pixel_size(camera), n_frames, limit=limit)
    refuse_if_too_big(look, est, option_name)
    return est.hold


def plan_and_camera(look: LookSpec) -> "tuple[SimPlan, Camera]":
    """The look's simulation plan and camera, swirl ``octaves = "auto"`` resolved at that camera.

    Everything comes from the look alone (the whole clip is framed), so the
    octave count is the same for any frame range or thread count.

    Parameters
    ----------
    look : LookSpec

    Returns
    -------
    plan : SimPlan
    camera : Camera
    """
    # With "auto" octaves the camera is fitted again on the flow that is rendered
    # (the finest eddies carry smoke a little further than the first framing's).
    plan = look_plan(look)
    return plan, make_camera(look, plan)


def look_plan(look: LookSpec) -> SimPlan:
    """The look's simulation plan alone, "auto" octaves resolved at a framing with few of them."""
    if has_auto_octaves(look):
        return plan_simulation(look, pixel_size=pixel_size(make_camera(look)))
    return plan_simulation(look)


def frame_images(look: LookSpec, camera: Camera, states, *, maps=None, timings=None):
    """Composite each frame state into ``(H, W, K+1)`` premultiplied features.

    Parameters
    ----------
    look : LookSpec
    camera : Camera
    states : iterable of FrameState
    maps : sequence of str, optional
        Maps to carry (defaults to the look's ``output.maps``).
    timings : dict, optional
        Accumulates seconds under ``light``, ``project``, ``composite``.

    Yields
    ------
    (frame, image, channels, sigma)
        ``sigma`` is the frame's median splat radius in pixels (for normal
        maps), or 0 when the look asks for no normal map.
    """
    maps = look.output.maps if maps is None else maps
    channels = feature_layout(motion="motion" in maps, depth="depth" in maps, lightdirs="lightdirs" in maps)
    timings = timings if timings is not None else {}
    shape = (look.image.height, look.image.width)
    for state in states:
        t0 = time.perf_counter()
        factor, lightdirs = light_puffs(state, look.shading, camera.axes, "lightdirs" in maps)
        t_light = time.perf_counter() - t0
        t0 = time.perf_counter()
        sp = make_splats(state, camera, blend=look.shading.blend, fps=look.clip.fps, channels=channels,
                         light_factor=factor, lightdir_factors=lightdirs)
        t1 = time.perf_counter()
        image = composite_features(sp.means, sp.covs, sp.features, sp.opacities, shape=shape, blend=look.shading.blend)
        t2 = time.perf_counter()
        timings["light"] = timings.get("light", 0.0) + t_light
        timings["project"] = timings.get("project", 0.0) + (t1 - t0)
        timings["composite"] = timings.get("composite", 0.0) + (t2 - t1)
        sigma = 0.0
        if "normal" in maps and len(sp.opacities):
            sigma = float(np.median(np.sqrt(0.5 * (sp.covs[:, 0, 0] + sp.covs[:, 1, 1]))))
        yield state.frame, image, channels, sigma


def _timed(it, timings, key):
    """Iterate ``it``, adding the time spent inside it to ``timings[key]``."""
    it = iter(it)
    while True:
        t0 = time.perf_counter()
        try:
            item = next(it)
        except StopIteration:
            timings[key] = timings.get(key, 0.0) + time.perf_counter() - t0
            return
        timings[key] = timings.get(key, 0.0) + time.perf_counter() - t0
        yield item


_announced = False


def announce_compile() -> None:
    """Say once per process, on a cold cache, that the first run compiles its kernels."""
    global _announced
    if not _announced and not kernels_cached():
        _announced = True
        print("splatter: compiling kernels (first run only; later runs load them from the cache)", flush=True,
              file=sys.stderr)


COMPILE_NOTICE = 1.0
"""Seconds :func:`prepare_kernels` may take before it says it is compiling (loading from the cache takes milliseconds)."""


def prepare_kernels(look: LookSpec, *, say: bool = True) -> float:
    """Compile, or load from numba's cache, the kernels this look's frames use, before the first frame.

    The compositor kernel of the look's blend mode and channel count (maps
    add channels) and the lighting kernels are compiled on first use, 10-20
    s each on a cold cache; doing it here, on a one-puff frame, lets the
    command line say so when it happens instead of stalling on frame 0.

    Parameters
    ----------
    look : LookSpec
    say : bool
        Print a note on stderr once this has taken :data:`COMPILE_NOTICE` seconds.

    Returns
    -------
    float
        Seconds taken.
    """
    import threading

    def note():
        print("splatter: compiling kernels for this look's blend mode, maps or lighting (first use only; later runs "
              "load them from the cache)", file=sys.stderr, flush=True)

    timer = threading.Timer(COMPILE_NOTICE, note) if say else None
    t0 = time.perf_counter()
    if timer is not None:
        timer.daemon = True
        timer.start()
    try:
        maps = look.output.maps
        k = len(feature_layout(motion="motion" in maps, depth="depth" in maps, lightdirs="lightdirs" in maps))
        one = np.ones(1, dtype=np.float32)
        composite_features(np.full((1, 2), 4.0, np.float32), np.eye(2, dtype=np.float32)[None],
                           np.zeros((1, k), np.float32), 0.5 * one, shape=(8, 8), blend=look.shading.blend)
        if look.shading.light is not None:
            pos = np.zeros((1, 3))
            transmittance(build_density_grid(pos, np.ones(1), np.ones(1)), pos, np.eye(3))
    finally:
        if timer is not None:
            timer.cancel()
    return time.perf_counter() - t0


def _frame_layers(look: LookSpec, plan: SimPlan, camera: Camera, wanted: List[int], timings: Dict[str, float],
                  maps: Optional[Iterable[str]] = None, hold: Optional[float] = None):
    """Each wanted frame as ``(frame, rgba, layers)``: crossfade applied, normal map added.

    The one frame loop :func:`render` and :func:`render_frames` share, so the
    arrays a script gets are the ones the files are written from. ``wanted``
    is ascending; ``hold`` is what the simulation may hold (see
    :func:`refuse_if_over_memory`).
    """
    maps = tuple(look.output.maps if maps is None else maps)
    air = reads_velocity(look, maps)
    n = look.clip.frames
    fade = crossfade_frames(look.clip)
    lead = {}
    if fade and flows(plan):
        # A flow is simulated once: the last `fade` frames fade into the frames just before frame 0 (from the
        # warm-up), which arrive first, so nothing waits for the end of the clip.
        lead_frames = sorted({f - n for f in wanted if n - fade <= f < n})
        tail_frames = []
        every = sorted(set(wanted) | set(lead_frames))
        states = simulate(look, plan, frames=every, warmup_frames=True, hold=hold, air=air)
        main = frame_images(look, camera, _timed(states, timings, "simulate"), maps=maps, timings=timings)
    else:
        lead_frames = []
        tail_frames = [n + f for f in wanted if f < fade] if fade else []
        main = frame_images(look, camera, _timed(simulate(look, plan, frames=wanted, hold=hold, air=air), timings,
                                                 "simulate"), maps=maps, timings=timings)
    # The tail runs beside the main simulation; only crossfade loops have one, and they never take the
    # twin driver (exact loops do), so it holds nothing: hold=0 says so and keeps the estimate true.
    tail = iter(frame_images(look, camera, _timed(simulate(look, plan, frames=tail_frames, hold=0, air=air), timings,
                                                 "simulate"), maps=maps, timings=timings)) if tail_frames else None
    for frame, image, channels, sigma in main:
        if frame < 0:  # a flow's frames before frame 0, for the crossfade
            lead[frame] = image
            continue
        if lead_frames and n - fade <= frame < n:
            # Frame f shows frame f fading into frame f - N, so frame N-1 runs on into frame 0.
            w = np.float32((frame - (n - fade)) / fade)
            image = w * lead.pop(frame - n) + (np.float32(1.0) - w) * image
        if tail is not None and frame < fade:
            _, late, _, _ = next(tail)
            # Frame f shows frame N+f fading into frame f, so frame N-1 runs on into frame 0.
            w = np.float32(1.0 - frame / fade)
            image = w * late + (np.float32(1.0) - w) * image
        rgba, layers = split_layers(image, channels)
        if "normal" in maps:
            layers.update(normal_map(rgba[..., 3], sigma, y_down=look.output.normal_y == "down"))
        yield frame, rgba, layers


def render(look, *, out_dir: Optional[str] = None, frames: Optional[Iterable[int]] = None,
           progress: bool = True, plan: Optional[SimPlan] = None, camera: Optional[Camera] = None,
           resume: bool = False, max_memory=None) -> RenderResult:
    """Render a look and write the files its ``[output]`` table asks for.

    Parameters
    ----------
    look : LookSpec, str, os.PathLike or dict
        A loaded look, a look file, or a look as a dict (see :func:`as_look`).
    out_dir : str, optional
        Replaces ``output.dir`` (``{name}``, ``{seed}`` filled in).
    frames : iterable of int, optional
        Frame numbers to render (default: the whole clip). May run past the
        clip's end; the simulation continues.
    progress : bool
        Show a progress bar on stderr.
    plan : SimPlan, optional
        The look's plan, when the caller has it already (from
        :func:`plan_and_camera` when a swirl's octaves are "auto").
    camera : Camera, optional
        The look's camera from :func:`plan_and_camera` or :func:`make_camera`, with ``plan``.
    resume : bool
        Keep the frames an earlier, interrupted render of the same look and
        seed finished in this folder (its manifest lists them) and render
        only the rest; sheets and previews are written again and come out
        with the same bytes (see :mod:`splatter.deliver.folder`).
    max_memory : int, str or None
        Refuse (:class:`LookError`, nothing written) a render planned to need
        more: bytes or a size such as ``"8G"``; default a share of the free
        memory (see :func:`refuse_if_over_memory`).

    Returns
    -------
    RenderResult

    Examples
    --------
    >>> import pathlib, tempfile
    >>> from splatter.look.load import load_look
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "lamp_haze.toml").write_text(
    ...     '[clip]\\nframes = 4\\n[image]\\nwidth = 32\\nheight = 32\\n[camera]\\nfit = true\\n'
    ...     '[[source]]\\nrate = 20\\nlife = 1\\n[output]\\nsheet = { columns = 2 }\\n')
    >>> result = render(load_look(folder / "lamp_haze.toml"), out_dir=str(folder / "out"), progress=False)
    >>> sorted(pathlib.Path(f).name for f in result.files)  # doctest: +NORMALIZE_WHITESPACE
    ['lamp_haze.0000.png', 'lamp_haze.0001.png', 'lamp_haze.0002.png', 'lamp_haze.0003.png',
     'lamp_haze.render.json', 'lamp_haze.sheet.json', 'lamp_haze.sheet.png']
    """
    t_start = time.perf_counter()
    look = as_look(look)
    timings: Dict[str, float] = {}
    wanted = list(frames) if frames is not None else list(range(look.clip.frames))
    folder = output_dir(look, out_dir)
    if plan is None:
        refuse_if_over_memory(look, len(wanted), max_memory=max_memory)  # before framing simulates
    made = missing_folders(folder)  # every level check_folder makes, so a refusal can take them all back
    # A folder that cannot be used fails now, before any work, naming the folder as given.
    check_folder(folder, folder, "--out" if out_dir is not None else look.path, planned_files(look, folder, wanted))
    if progress:
        announce_compile()
    t0 = time.perf_counter()
    if plan is None:
        plan, camera = plan_and_camera(look)
    elif camera is None:
        camera = make_camera(look, plan)
    timings["fit"] = time.perf_counter() - t0
    try:
        hold = refuse_if_over_memory(look, len(wanted), max_memory=max_memory, plan=plan, camera=camera)
    except LookError:
        remove_folders(made)  # refused at the final framing: leave no trace, keep what was there before
        raise

    record = RenderFolder(look, folder, wanted, resume=resume)
    todo = record.prepare()  # clears what an earlier render left; with resume, the frames still to render
    if record.complete_already:
        timings["total"] = time.perf_counter() - t_start
        return RenderResult(name=look.name, out_dir=folder, frames=wanted, seconds=timings)
    fresh = _frame_layers(look, plan, camera, todo, timings, hold=hold)
    pending = set(todo)
    sink = OutputSink(look, folder, len(wanted), frames=wanted, loop=plan.effective_loop)
    borders: Dict[int, tuple] = {}

    def frame_done(frame, written, part):
        part["border"] = np.array(borders.pop(frame), dtype=np.float64)
        record.frame_done(frame, written, part)

    sink.on_frame = frame_done
    result = RenderResult(name=look.name, out_dir=folder, frames=wanted)
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(wanted), desc=look.name, unit="frame", leave=False, dynamic_ncols=True)
    worst = (0.0, None)
    try:
        for want in wanted:
            if want in record.kept:  # finished by an earlier run of this render (--resume)
                kept = record.kept.pop(want)
                border, share = (float(v) for v in kept.pop("border"))
                if border > worst[0]:
                    worst = (border, want, share)
                sink.add_kept(want, kept)
                if bar is not None:
                    bar.update(1)
                continue
            if want not in pending:  # finished by an earlier run, and nothing of it needs keeping
                if bar is not None:
                    bar.update(1)
                continue
            frame, rgba, layers = next(fresh)
            border, share = max_border_alpha(rgba[..., 3]), border_alpha_share(rgba[..., 3])
            borders[frame] = (border, share)
            if border > worst[0]:
                worst = (border, frame, share)
            t_w = time.perf_counter()
            sink.add(frame, rgba, layers)
            timings["queue"] = timings.get("queue", 0.0) + time.perf_counter() - t_w
            if bar is not None:
                bar.update(1)
        files = sink.finish()
        result.files = sorted(files + [record.finish(files)])
    except BaseException:
        sink.abort()
        raise
    finally:
        if bar is not None:
            bar.close()
    timings["write"] = sink.write_seconds
    timings["total"] = time.perf_counter() - t_start
    result.seconds = timings
    result.max_border_alpha = worst[0]
    if worst[0] >= VISIBLE_ALPHA:
        warnings.warn(
            f"smoke touches the frame border: alpha up to {worst[0]:.3f} on the outermost pixels "
            f"(frame {worst[1]}, {100 * worst[2]:.2f}% of that frame's alpha); the sprite will look cut off. "
            "Set camera.fit = true or widen camera.view_width.",
            LookWarning,
            stacklevel=2,
        )
    return result


def as_look(look) -> LookSpec:
    """A :class:`LookSpec` from a look, a look file's path or a look as a dict.

    A dict goes through the same checks as a file (and its messages name
    ``<dict>`` where they would name the file).
    """
    if isinstance(look, LookSpec):
        return look
    return load_look(look)


class Frame(NamedTuple):
    """One rendered frame, as :func:`render_frames` yields it.

    Attributes
    ----------
    frame : int
        Frame number.
    rgba : (H, W, 4) float32 ndarray
        Linear premultiplied RGBA, before exposure and display encoding
        (what an EXR frame holds).
    maps : dict of str to ndarray
        Each requested map by its ``output.maps`` name: ``"motion"``
        ``(H, W, 2)`` pixels per frame (x right, y down), ``"depth"``
        ``(H, W)`` distance along the view axis, ``"normal"`` ``(H, W, 3)``
        unit view-space normals, ``"lightdirs"`` ``(H, W, C)`` light factors
        per direction; all float32, straight (0 where alpha is 0).
    """

    frame: int
    rgba: np.ndarray
    maps: Dict[str, np.ndarray]


def _group_layers(layers: Dict[str, np.ndarray]) -> Dict[str, np.ndarray]:
    """``{"motion.x": a, "motion.y": b}`` to ``{"motion": (H, W, 2)}``; one-channel maps stay 2D."""
    groups: Dict[str, List[np.ndarray]] = {}
    for key, plane in layers.items():
        groups.setdefault(key.split(".", 1)[0], []).append(plane)
    return {k: (v[0] if len(v) == 1 else np.stack(v, axis=-1)) for k, v in groups.items()}


def render_frames(look, frames: Optional[Iterable[int]] = None, *, maps: Optional[Iterable[str]] = None,
                  max_memory=None) -> Iterator[Frame]:
    """Render a look frame by frame and yield the arrays; nothing is written.

    The pixels are those :func:`render` writes (same simulation, framing and
    crossfade), one frame in memory at a time.

    Parameters
    ----------
    look : LookSpec, str, os.PathLike or dict
        A loaded look, a look file, or a look as a dict (see :func:`as_look`).
    frames : iterable of int, optional
        Frame numbers (default: the whole clip); yielded in increasing order.
    maps : iterable of str, optional
        Maps to compute (default: the look's ``output.maps``).
    max_memory : int, str or None
        As for :func:`render` (the estimate counts the look's outputs too, so
        it errs on the safe side here).

    Yields
    ------
    Frame
        ``(frame, rgba, maps)``.

    Examples
    --------
    >>> look = {"clip": {"frames": 3}, "image": {"width": 32, "height": 24},
    ...         "source": [{"rate": 30, "life": 1}]}
    >>> for f in render_frames(look, maps=["depth"]):
    ...     print(f.frame, f.rgba.shape, f.rgba.dtype, f.maps["depth"].shape)
    0 (24, 32, 4) float32 (24, 32)
    1 (24, 32, 4) float32 (24, 32)
    2 (24, 32, 4) float32 (24, 32)
    """
    look = as_look(look)
    maps = tuple(look.output.maps if maps is None else maps)
    for m in maps:
        check_choice(m, "maps", MAPS)
    wanted = list(frames) if frames is not None else list(range(look.clip.frames))
    refuse_if_over_memory(look, len(wanted), max_memory=max_memory)
    plan, camera = plan_and_camera(look)
    hold = refuse_if_over_memory(look, len(wanted), max_memory=max_memory, plan=plan, camera=camera)
    for frame, rgba, layers in _frame_layers(look, plan, camera, wanted, {}, maps, hold):
        yield Frame(frame, rgba, _group_layers(layers))


class _CallableModule(type(sys)):
    """Lets ``splatter.render(look)`` work although ``splatter.render`` is also this module's name."""

    def __call__(self, look, **options) -> RenderResult:
        return render(look, **options)


sys.modules[__name__].__class__ = _CallableModule
