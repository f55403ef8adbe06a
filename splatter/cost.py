"""What a render will cost: peak memory by part, a rough time, and the limit it must fit.

``check`` prints the estimate; ``render`` refuses (exit 2) a render whose
estimate passes the limit, before the first frame, naming the part that
drives the cost and the keys that cut it. The limit is a share of the
memory the machine has free (:func:`memory_limit`), or ``--max-memory``.

The model counts what the pipeline holds at its peak (every figure in
bytes):

* **simulation**: the live puffs (about :data:`BYTES_PER_PUFF` each: the
  driver's buffers, one frame's state, its splats and the compositor's
  per-splat layout), plus the twin driver's held frames for exact loops
  when they fit (see :data:`HOLD_SHARE`; otherwise the warm-up driver runs
  and holds none);
* **compositing**: the (tile, splat) pairs, 16 bytes each (with slack), from the largest
  footprint a puff can reach (``size`` times the largest ``grow``, in pixels
  at the camera's target), and the row tables (at most
  :data:`splatter.raster.compositor.TABLE_BYTES`);
* **frames**: a frame's feature image, float32 with ``K + 1`` channels, in
  flight :data:`FRAMES_IN_FLIGHT` times (compositing, the crossfade tail,
  the writer's queue);
* **sheets**: the colour sheet (PNG: its compressed bytes, at most about
  its 8/16-bit codes, as cell rows are encoded; EXR: RGBA at the file's
  pixel type), the map sheets the same way (normal and light-direction sheets
  are encoded as frames arrive), and, with motion or depth maps, every frame's
  motion and depth layers and alpha, kept until the end because their
  encodings use clip-wide ranges;
* **previews**: GIF frames at most 512 px on a side as palette images (one
  byte a pixel, twice while Pillow writes them), and the contact sheet of
  thumbnails at most 256 px, every frame (MP4 frames go to ffmpeg as they
  come: nothing per frame is held);
* **framing**: ``camera.fit`` keeps the sampled puffs of every frame (centre, covariance, opacity).

The time is a rough figure from this machine's measured rates
(:data:`PIXELS_PER_SECOND`, :data:`PUFF_STEPS_PER_SECOND`), a guide to the
order of magnitude only.

Examples
--------
>>> parse_size("8G"), parse_size("512M"), parse_size("1.5 GB")
(8589934592, 536870912, 1610612736)
>>> format_bytes(3.2e9)
'3.0 GiB'
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from typing import Dict, List, Optional

from splatter.core.errors import LookError
from splatter.deliver.map_frames import RANGED_MAPS
from splatter.deliver.sink import check_outputs
from splatter.fit import FIT_PUFFS
from splatter.look.records import LookSpec
from splatter.raster.compositor import TABLE_BYTES, TILE
from splatter.sim.plan import crossfade_frames
from splatter.sim.driver import TWIN_MEMORY, SimPlan, twin_hold_bytes

__all__ = ["CostEstimate", "estimate_cost", "births_per_step", "memory_limit", "parse_size", "format_bytes",
           "refuse_if_too_big"]

BYTES_PER_PUFF = 1200
"""Bytes one live puff costs across the simulation, its frame state, splat and layout (measured: about 1.2 KB for the harbour chimney)."""

FRAMES_IN_FLIGHT = 7
"""Frame-sized float images alive at once: the composite, the crossfade tail and blend, the split
colour and maps, and the writer's queue of three."""

BASELINE = 250 * 2**20
"""Python, numpy, numba and the compiled kernels."""

FIT_BYTES_PER_POINT = 56
"""``camera.fit`` keeps a centre, a 3D covariance and a peak opacity (float32, 52 bytes) per sampled puff
and frame, for its coarse alpha passes (:mod:`splatter.fit`), with some slack."""

PIXELS_PER_SECOND = 1.5e8
"""Footprint pixels composited per second (``scripts/bench_composite.py`` on this 2-core VM: 0.2-0.5 G)."""

PUFF_STEPS_PER_SECOND = 5e6
"""Puff steps per second with swirl and shaping (``scripts/bench_sim.py`` on this VM)."""

STEP_SECONDS = 2e-5
"""Python overhead of one simulation step, whatever the puff count."""

LIMIT_SHARE = 0.8
"""Share of the machine's available memory a render may plan to use by default."""

HOLD_SHARE = 0.5
"""Share of the limit's headroom (the limit less every other part) an exact loop's twin driver may hold.

The twin driver steps one period of births (no warm-up) but holds each
frame's early puffs until its late ones arrive; the warm-up driver gives
the same bits with more puff-steps and no held frames.  A render lets the
twin driver hold this share of what its limit leaves, or
:data:`splatter.sim.driver.TWIN_MEMORY` if that is more, but never more than
all of it, so the choice trades spare memory for time and never pushes a
render past its limit (the chimney demo: about
1 GB held, 0.76 of the warm-up driver's simulate time).
"""

_PART_KEYS = {"simulation": "source.rate", "compositing": "source.size", "frames": "image",
              "sheets": "output.sheet", "previews": "output.preview", "framing": "clip.frames"}
_MAP_CHANNELS = {"motion": 2, "depth": 1, "normal": 3, "lightdirs": 6}
_FILE_CHANNELS = {"png": {"motion": 3, "depth": 1, "normal": 3, "lightdirs": 6},
                  "exr": {"motion": 2, "depth": 1, "normal": 3}}


def _map_sheet_bytes(out) -> float:
    """Bytes a sheet texel costs across the map sheets: PNG ones as their compressed
    data (at most about their codes), EXR ones at the file's pixel type, twice (the
    writer's contiguous planes); light directions are always PNG."""
    total = 0.0
    for m in out.maps:
        fmt = "png" if m == "lightdirs" else out.sheet.format
        per = out.png_bits // 8 if fmt == "png" else (2 if out.exr_type == "half" else 4) * 2
        total += _FILE_CHANNELS[fmt][m] * per
    return total


_SIZE = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*([kmgt]?)i?b?\s*$", re.IGNORECASE)


def parse_size(text: str) -> int:
    """``"8G"``, ``"512M"``, ``"1.5 GB"`` or plain bytes to a byte count (powers of 1024).

    Raises
    ------
    ValueError
        Not a size.
    """
    m = _SIZE.match(str(text))
    if not m:
        raise ValueError(f"expected a size such as 8G, 512M or 2048K, got {text!r}")
    scale = 1024 ** "_kmgt".index((m.group(2) or "_").lower())
    return int(float(m.group(1)) * scale)


def format_bytes(n: float) -> str:
    """Bytes in the largest binary unit that keeps the number at least 1, one decimal."""
    for unit, size in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20)):
        if n >= size:
            return f"{n / size:.1f} {unit}"
    return f"{n / 1024:.0f} KiB"


def available_memory() -> int:
    """Bytes the machine can give a new process now (``MemAvailable`` of ``/proc/meminfo``)."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return 8 * 2**30


def memory_limit(option: Optional[str] = None) -> int:
    """The most memory a render may plan to use: ``--max-memory``, else a share of what is free."""
    if option is not None:
        return parse_size(option)
    return int(LIMIT_SHARE * available_memory())


@dataclass
class CostEstimate:
    """A render's planned peak memory by part, a rough time and the limit.

    Attributes
    ----------
    parts : dict of str to float
        Bytes by part: simulation, compositing, frames, sheets, previews, framing, baseline.
    seconds : float
        Rough wall time.
    limit : int
        Bytes the render may use.
    puffs : float
        Live puffs at the peak.
    sigma_px : float
        Largest footprint sigma in pixels the estimate assumed.
    hints : dict of str to str
        For each part, what drives it and how to cut it.
    hold : float
        Bytes the simulation's twin driver may hold (``simulate``'s
        ``hold``; see :data:`HOLD_SHARE`), counted in ``parts`` when it runs.
    """

    parts: Dict[str, float]
    seconds: float
    limit: int
    puffs: float
    sigma_px: float
    hints: Dict[str, str] = field(default_factory=dict)
    hold: float = float(TWIN_MEMORY)

    @property
    def peak(self) -> float:
        """Planned peak bytes."""
        return float(sum(self.parts.values()))

    @property
    def fits(self) -> bool:
        """True when the peak is within the limit."""
        return self.peak <= self.limit

    def driver(self) -> str:
        """The largest part."""
        return max((k for k in self.parts if k != "baseline"), key=self.parts.get)

    def lines(self) -> List[str]:
        """The lines ``check`` prints."""
        shown = ", ".join(f"{k} {format_bytes(v)}" for k, v in sorted(self.parts.items(), key=lambda kv: -kv[1])
                          if v >= 2**20)
        return [f"memory    about {format_bytes(self.peak)} at the peak ({shown}); limit {format_bytes(self.limit)}",
                f"time      roughly {_format_seconds(self.seconds)} on this machine "
                f"(largest footprint {self.sigma_px:.3g} px sigma)"]


def _format_seconds(s: float) -> str:
    if s < 60:
        return f"{max(s, 0.1):.1g} s" if s < 10 else f"{s:.0f} s"
    if s < 3600:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


def _max_grow(src) -> float:
    return max(v for _, v in src.grow)


def births_per_step(look: LookSpec, plan: SimPlan) -> float:
    """The most puffs born in one step: every source's rate times the step, plus its largest burst."""
    return float(sum(rate * plan.dt + max((b.count for b in src.bursts), default=0)
                     for src, rate in zip(look.sources, plan.rates)))


def estimate_cost(look: LookSpec, plan: SimPlan, pixel_size: float, n_frames: int, *, limit: int,
                  sigma_px: Optional[float] = None, mean_sigma_px: Optional[float] = None) -> CostEstimate:
    """Estimate the peak memory and time of rendering ``n_frames`` frames of ``look``.

    Parameters
    ----------
    look : LookSpec
    plan : SimPlan
    pixel_size : float
        World units per pixel at the camera's target.
    n_frames : int
        Frames to render.
    limit : int
        Bytes the render may use (:func:`memory_limit`).
    sigma_px, mean_sigma_px : float, optional
        Largest and mean footprint sigma in pixels, when a sampled
        simulation measured them; default from the sources' ``size`` and
        ``grow`` (the largest a puff can reach, and half of it).

    Returns
    -------
    CostEstimate
    """
    img, out = look.image, look.output
    w, h = img.width, img.height
    px = w * h
    n = max(float(plan.steady_state_puffs), births_per_step(look, plan), 0.0)
    if sigma_px is None:
        reach = max((s.size[1] * _max_grow(s) * (1.0 + s.stretch) for s in look.sources), default=0.0)
        sigma_px = reach / pixel_size
    if mean_sigma_px is None:
        mean_sigma_px = 0.5 * sigma_px
    parts: Dict[str, float] = {"baseline": float(BASELINE)}
    hints: Dict[str, str] = {}

    parts["simulation"] = n * BYTES_PER_PUFF
    hints["simulation"] = (f"about {n:,.0f} live puffs (source rate times life, plus bursts); "
                           "lower source.rate or source.life")

    # (tile, splat) pairs: the tiles the largest footprint touches, at most all of them
    # (each splat's record is in BYTES_PER_PUFF).
    tile_h, tile_w = TILE
    reach_px = min(6.0 * sigma_px, 4.0 * (w + h))
    ntiles = math.ceil(w / tile_w) * math.ceil(h / tile_h)
    tiles = min(float(ntiles), (reach_px / tile_h + 2.0) * (reach_px / tile_w + 2.0))
    tables = min(float(TABLE_BYTES), n * 4.0 * 2.0 * min(3.0 * sigma_px + 10.0, float(w)))
    parts["compositing"] = n * tiles * 16.0 + tables
    hints["compositing"] = (f"{n:,.0f} puffs whose footprints reach {sigma_px:.3g} px sigma; lower source.size or "
                            "source.grow, widen camera.view_width, or lower the rate")

    k = 3 + sum(_MAP_CHANNELS[m] for m in out.maps if m != "normal")
    parts["frames"] = float(px) * (k + 1) * 4 * FRAMES_IN_FLIGHT
    hints["frames"] = f"{w} x {h} px frames with {k + 1} channels each; lower image.width and image.height"

    sheets = 0.0
    if out.sheet is not None:
        layout = check_outputs(look, n_frames)
        per = 4 * (out.png_bits // 8) if out.sheet.format == "png" else (8 if out.exr_type == "half" else 16)
        sheets = float(layout.width * layout.height) * per
        ranged = sum(_MAP_CHANNELS[m] for m in out.maps if m in RANGED_MAPS)
        if ranged:  # motion and depth wait for the clip's ranges: their layers and alpha of every frame
            sheets += float(px) * (ranged + 1) * 4 * n_frames
        sheets += float(layout.width * layout.height) * _map_sheet_bytes(out)
        map_ch = sum(_MAP_CHANNELS[m] for m in out.maps)
        hints["sheets"] = (f"a {layout.width} x {layout.height} px sheet"
                           + (f", {len(out.maps)} map sheets ({map_ch} channels)" if map_ch else "")
                           + (f" and {ranged} motion and depth map channels of every one of {n_frames} frames"
                              if ranged else "")
                           + "; set output.sheet.cell smaller, render fewer frames, or drop output.maps")
    parts["sheets"] = sheets

    prev = 0.0
    scale = lambda m: min(1.0, m / max(w, h)) ** 2  # noqa: E731 (shrunk by a whole factor, about this)
    anim = float(px) * scale(512) * n_frames
    if "gif" in out.preview:
        prev += anim * 2  # palette images, and Pillow's own copies while it writes the file
    if "contact" in out.preview:
        prev += float(px) * scale(256) * 3 * n_frames
    parts["previews"] = prev
    hints["previews"] = f"preview frames of all {n_frames} frames; drop output.preview or render fewer frames"

    if look.camera.fit:
        total = look.clip.frames + crossfade_frames(look.clip)
        parts["framing"] = min(n, 2.0 * FIT_PUFFS) * total * FIT_BYTES_PER_POINT
        hints["framing"] = f"camera.fit frames on sampled puffs of all {total} frames; render fewer clip.frames"

    # Time: composite footprint pixels (the ellipse's share of its 6-sigma box, clipped to the frame),
    # and the puff steps of the warm-up and the frames.
    foot = min(math.pi * 9.0 * mean_sigma_px**2, float(px))
    frame_steps = n_frames * plan.substeps
    # From what the other parts leave: the exact loop's held frames, when the twin driver runs.
    # At least TWIN_MEMORY, as simulate allows anyway, but never more than the room left: a resumed
    # render simulates fewer frames than counted here, and may take the twin driver where this did not.
    room = max(0.0, limit - sum(parts.values()))
    hold = min(room, max(float(TWIN_MEMORY), HOLD_SHARE * room))
    need = twin_hold_bytes(plan, n_frames)
    twins = 0.0 < need <= hold
    if twins:
        parts["simulation"] += need
        # The twin driver steps one period's puffs from birth to death (lives may span many periods).
        life = max((s.life[1] for s in look.sources), default=0.0)
        steps = life / plan.dt + frame_steps
        puff_steps = n * (plan.period_steps + frame_steps)
    else:
        steps = plan.warmup_steps + frame_steps
        puff_steps = n * steps
    seconds = n * foot * n_frames / PIXELS_PER_SECOND + puff_steps / PUFF_STEPS_PER_SECOND + steps * STEP_SECONDS
    return CostEstimate(parts=parts, seconds=seconds, limit=int(limit), puffs=n, sigma_px=float(sigma_px),
                        hints=hints, hold=hold)


def _cure(option_name: str, gib: int) -> str:
    """How to raise the limit: ``--max-memory 3G`` on the command line, ``max_memory="3G"`` in
    Python, or the caller's own words when the limit is not an option (``vary``'s share per worker)."""
    if option_name.startswith("-"):
        return f"raise the limit with {option_name}, for example {option_name} {gib}G"
    if option_name.isidentifier():
        return f'raise the limit with {option_name}, for example {option_name}="{gib}G"'
    return option_name


def refuse_if_too_big(look: LookSpec, est: CostEstimate, option_name: str = "--max-memory") -> None:
    """Raise :class:`LookError` when ``est`` does not fit its limit, naming the cost's driver and the cure."""
    if est.fits:
        return
    top = est.driver()
    raise LookError(
        look.path, _PART_KEYS[top],
        f"a render that fits in {format_bytes(est.limit)} of memory ({_cure(option_name, math.ceil(est.peak / 2**30))})",
        f"about {format_bytes(est.peak)}, {format_bytes(est.parts[top])} of it for the {top}: {est.hints[top]}")
