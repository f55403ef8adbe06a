"""The look: frozen records of everything needed to render one flipbook.

Each key of the look file is one field here, with its default and its
checker side by side (:func:`key`); :mod:`splatter.look.schema` walks these
fields to validate a TOML document, so adding a key is one line here (plus
its use, its docs and a test). Only :mod:`splatter.look.load` builds these
records; every later stage reads them and never sees TOML. Values are
already validated, defaulted and in canonical form:

* a **range** is a ``(min, max)`` tuple (a constant ``v`` is ``(v, v)``);
* a **ramp** is a tuple of ``(age, value)`` keys sorted by age (a constant is
  one key at age 0);
* a **colour ramp** is a tuple of ``(age, (r, g, b))`` keys in linear light;
* vectors are tuples of three floats; ``None`` means "not set" where the
  spec allows it (``stop = "never"`` is ``None``, ``warmup = "auto"`` and
  a swirl's ``octaves = "auto"`` are ``None``).

See ``docs/look-reference.md`` in the repository for the meaning of each key.

Examples
--------
>>> ClipSpec().frames, ClipSpec().integrator
(64, 'symplectic')
>>> sorted(FORCE_KINDS)
['convection', 'drag', 'gravity', 'lift', 'swirl', 'vortex', 'wind']
>>> FORCE_KINDS["swirl"] is SwirlSpec and SwirlSpec.kind
'swirl'
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import ClassVar, Dict, Optional, Tuple, Union

from splatter.core.choices import (
    BLENDS,
    EXR_TYPES,
    FRAME_FORMATS,
    INTEGRATORS,
    LOOP_MODES,
    MAPS,
    NORMAL_Y,
    PNG_ALPHAS,
    PREVIEWS,
    PROJECTIONS,
    SHAPES,
)
from splatter.look.checks import (
    boolean,
    choice,
    color,
    color_ramp,
    dir_text,
    list_of,
    name_text,
    number,
    png_bits,
    ramp,
    stem_text,
    text_or_number,
    value_range,
    vec3,
)

Vec3 = Tuple[float, float, float]
Range = Tuple[float, float]
Ramp = Tuple[Tuple[float, float], ...]
ColorRamp = Tuple[Tuple[float, Vec3], ...]

MAX_IMAGE = 8192
MIN_IMAGE = 8
MAX_FRAMES = 10000
MAX_SHEET = 16384
MAX_LIVE_PUFFS = 2_000_000


def key(default, check):
    """A look key: its default and the checker that validates what a file gives."""
    return field(default=default, metadata={"check": check})


def table(cls, *, optional=False):
    """A sub-table whose keys are the fields of record ``cls``.

    An optional table is ``None`` when absent, and ``false`` switches off one a
    ``base`` look or an earlier ``--set`` gave (``sheet = false``, ``light = false``).
    """
    if optional:
        return field(default=None, metadata={"table": cls, "optional": True})
    return field(default_factory=cls, metadata={"table": cls})


def tables(toml_key, default, *, record=None, kinds=None):
    """An array of tables ``[[toml_key]]``: each one a ``record``, or a record picked by its ``kind``."""
    return field(default=default, metadata={"toml": toml_key, "record": record, "kinds": kinds})


@dataclass(frozen=True)
class ClipSpec:
    """Timing of the clip (``[clip]``)."""

    frames: int = key(64, number(1, MAX_FRAMES, integer=True))
    fps: float = key(30.0, number(0.0, 240.0, lo_open=True))
    substeps: int = key(2, number(1, 64, integer=True))
    integrator: str = key("symplectic", choice(*INTEGRATORS))
    warmup: Optional[float] = key(None, text_or_number("auto", 0.0))  # None: "auto", the longest puff life
    loop: str = key("none", choice(*LOOP_MODES))
    crossfade: float = key(0.25, number(0.0, 0.5, lo_open=True))

    @property
    def duration(self) -> float:
        """Length of the clip in seconds, ``frames / fps``."""
        return self.frames / self.fps


@dataclass(frozen=True)
class ImageSpec:
    """Pixel size of one frame (``[image]``)."""

    width: int = key(256, number(MIN_IMAGE, MAX_IMAGE, integer=True))
    height: int = key(256, number(MIN_IMAGE, MAX_IMAGE, integer=True))


@dataclass(frozen=True)
class CameraSpec:
    """How the scene is seen (``[camera]``)."""

    projection: str = key("orthographic", choice(*PROJECTIONS))
    eye: Vec3 = key((0.0, 0.0, 10.0), vec3())
    target: Vec3 = key((0.0, 0.0, 0.0), vec3())
    up: Vec3 = key((0.0, 1.0, 0.0), vec3(nonzero=True))
    view_width: float = key(4.0, number(0.0, 1e6, lo_open=True))
    fov: float = key(40.0, number(0.0, 170.0, lo_open=True))
    fit: bool = key(False, boolean)
    margin: float = key(0.05, number(0.0, 0.45))
    fit_alpha: float = key(1.0 / 255.0, number(0.0, 0.5, lo_open=True))  # extension: alpha the fit keeps the edge below


@dataclass(frozen=True)
class BurstSpec:
    """A one-off release of ``count`` puffs at ``time`` seconds (both required)."""

    time: float = key(None, number(0.0))
    count: int = key(None, number(0, 1_000_000, integer=True))
    required: ClassVar[Tuple[str, ...]] = ("time", "count")


@dataclass(frozen=True)
class SourceSpec:
    """Where puffs are born and how they look (one ``[[source]]``)."""

    shape: str = key("point", choice(*SHAPES))
    center: Vec3 = key((0.0, 0.0, 0.0), vec3())
    radius: float = key(0.25, number(0.0))
    extent: Vec3 = key((0.25, 0.25, 0.25), vec3())
    normal: Vec3 = key((0.0, 1.0, 0.0), vec3(nonzero=True))
    rate: float = key(50.0, number(0.0, 100_000.0))
    bursts: Tuple[BurstSpec, ...] = tables("bursts", (), record=BurstSpec)
    start: float = key(0.0, number(0.0))
    stop: Optional[float] = key(None, text_or_number("never", 0.0))  # None: "never"
    direction: Vec3 = key((0.0, 1.0, 0.0), vec3(nonzero=True))
    speed: Range = key((1.0, 1.0), value_range(0.0))
    spread: float = key(10.0, number(0.0, 180.0))
    life: Range = key((2.0, 3.0), value_range(0.0, 1e4, lo_open=True))
    size: Range = key((0.2, 0.2), value_range(0.0, 1e4, lo_open=True))
    grow: Ramp = key(((0.0, 1.0),), ramp(0.0, 1e4))
    opacity: Ramp = key(((0.0, 0.0), (0.1, 0.5), (1.0, 0.0)), ramp(0.0, 1.0))
    fade: float = key(0.0, number(0.0))
    color: ColorRamp = key(((0.0, (0.6938719, 0.6724431, 0.6307572)),), color_ramp)  # "#d9d6d0"
    glow: Optional[ColorRamp] = key(None, color_ramp)
    aspect: Range = key((1.0, 1.0), value_range(0.0, 1.0, lo_open=True))
    stretch: float = key(0.0, number(0.0, 100.0))
    density: float = key(1.0, number(0.0, 1e4))
    follow: float = key(1.0, number(0.0, 1.0))  # extension: how strongly shapes follow the flow
    elongation: float = key(10.0, number(1.5, 1000.0))  # extension: long/short axis ratio before relaxing
    heat: float = key(0.0, number(0.0, 1e6))  # extension: heat a puff lays on a convection flow at birth


@dataclass(frozen=True)
class GravitySpec:
    """Constant acceleration (``kind = "gravity"``)."""

    kind: ClassVar[str] = "gravity"
    accel: Vec3 = key((0.0, -9.81, 0.0), vec3())


@dataclass(frozen=True)
class WindSpec:
    """Moving air that puffs take on at rate ``grip`` (``kind = "wind"``)."""

    kind: ClassVar[str] = "wind"
    velocity: Vec3 = key((1.0, 0.0, 0.0), vec3())
    gust: float = key(0.0, number(0.0, 1.0))
    gust_period: float = key(2.0, number(0.0, 1e4, lo_open=True))
    grip: float = key(1.0, number(0.0, 1e3))


@dataclass(frozen=True)
class DragSpec:
    """Pull toward still air at ``rate`` per second (``kind = "drag"``)."""

    kind: ClassVar[str] = "drag"
    rate: float = key(0.5, number(0.0, 1e3))


@dataclass(frozen=True)
class LiftSpec:
    """Buoyancy that cools with age (``kind = "lift"``)."""

    kind: ClassVar[str] = "lift"
    accel: float = key(2.0, number(-1e3, 1e3))
    cooling: float = key(0.5, number(0.0, 1e3))
    direction: Vec3 = key((0.0, 1.0, 0.0), vec3(nonzero=True))


@dataclass(frozen=True)
class SwirlSpec:
    """Divergence-free noise flow (``kind = "swirl"``)."""

    kind: ClassVar[str] = "swirl"
    strength: float = key(0.5, number(0.0, 1e3))
    scale: float = key(1.0, number(0.0, 1e6, lo_open=True))
    octaves: Optional[int] = key(None, text_or_number("auto", 1, 6, integer=True))  # None: "auto", see the plan
    evolve: float = key(2.0, number(0.0, 1e6, lo_open=True))


@dataclass(frozen=True)
class VortexSpec:
    """Rotation about an axis (``kind = "vortex"``)."""

    kind: ClassVar[str] = "vortex"
    center: Vec3 = key((0.0, 0.0, 0.0), vec3())
    axis: Vec3 = key((0.0, 1.0, 0.0), vec3(nonzero=True))
    strength: float = key(1.0, number(-1e3, 1e3))
    radius: float = key(0.5, number(0.0, 1e6, lo_open=True))


@dataclass(frozen=True)
class ConvectionSpec:
    """A buoyant flow on a coarse grid that puffs ride (``kind = "convection"``; extension)."""

    kind: ClassVar[str] = "convection"
    cells: int = key(32, number(8, 128, integer=True))  # grid cells along the smoke's longest side
    buoyancy: float = key(1.0, number(0.0, 1e4))  # upward acceleration per unit heat density
    cooling: float = key(0.3, number(0.0, 1e3))  # 1/s: a puff's heat decays as exp(-cooling age)
    confinement: float = key(3.0, number(0.0, 20.0))  # vorticity confinement strength eps


ForceSpec = Union[GravitySpec, WindSpec, DragSpec, LiftSpec, SwirlSpec, VortexSpec, ConvectionSpec]

FORCE_KINDS: Dict[str, type] = {c.kind: c for c in (GravitySpec, WindSpec, DragSpec, LiftSpec, SwirlSpec, VortexSpec,
                                                    ConvectionSpec)}
"""Every ``[[force]]`` kind and its record: the one registry the schema, the simulation and ``check`` use."""


@dataclass(frozen=True)
class PlaneSpec:
    """An infinite plane puffs bounce off (``kind = "plane"``)."""

    kind: ClassVar[str] = "plane"
    point: Vec3 = key((0.0, 0.0, 0.0), vec3())
    normal: Vec3 = key((0.0, 1.0, 0.0), vec3(nonzero=True))
    bounce: float = key(0.3, number(0.0, 1.0))
    friction: float = key(0.2, number(0.0, 1.0))
    kill: bool = key(False, boolean)


@dataclass(frozen=True)
class SphereSpec:
    """A solid ball puffs bounce off (``kind = "sphere"``)."""

    kind: ClassVar[str] = "sphere"
    center: Vec3 = key((0.0, 0.0, 0.0), vec3())
    radius: float = key(0.5, number(0.0, 1e6, lo_open=True))
    bounce: float = key(0.3, number(0.0, 1.0))
    friction: float = key(0.2, number(0.0, 1.0))
    kill: bool = key(False, boolean)


ObstacleSpec = Union[PlaneSpec, SphereSpec]

OBSTACLE_KINDS: Dict[str, type] = {c.kind: c for c in (PlaneSpec, SphereSpec)}
"""Every ``[[obstacle]]`` kind and its record."""


@dataclass(frozen=True)
class LightSpec:
    """A directional light (``[shading.light]``)."""

    direction: Vec3 = key((1.0, 1.0, 1.0), vec3(nonzero=True))  # from the scene toward the light
    color: Vec3 = key((1.0, 1.0, 1.0), color)
    intensity: float = key(1.0, number(0.0, 1e4))
    shadow: float = key(0.8, number(0.0, 1.0))


@dataclass(frozen=True)
class ShadingSpec:
    """How puffs are blended and lit (``[shading]``)."""

    blend: str = key("over", choice(*BLENDS))
    ambient: float = key(1.0, number(0.0, 1.0))
    ambient_color: Optional[Vec3] = key(None, color)  # colour of the unshadowed share; None: the light's colour
    exposure: float = key(0.0, number(-32.0, 32.0))
    light: Optional[LightSpec] = table(LightSpec, optional=True)


@dataclass(frozen=True)
class SheetSpec:
    """Sprite-sheet packing (``output.sheet``); ``None`` grid sizes are chosen."""

    columns: Optional[int] = key(None, number(1, 1024, integer=True))
    rows: Optional[int] = key(None, number(1, 1024, integer=True))
    padding: int = key(2, number(0, 256, integer=True))
    pow2: bool = key(False, boolean)
    format: str = key("png", choice(*FRAME_FORMATS))
    cell: Optional[int] = key(None, number(4, MAX_SHEET, integer=True))  # cell width, padding included


@dataclass(frozen=True)
class OutputSpec:
    """What files a render writes (``[output]``)."""

    dir: str = key("renders/{name}", dir_text)
    stem: str = key("{name}", stem_text)  # file-name stem of every file written; {name}, {seed} filled in
    frames: Tuple[str, ...] = key(("png",), list_of(*FRAME_FORMATS))
    png_bits: int = key(8, png_bits)
    png_alpha: str = key("straight", choice(*PNG_ALPHAS))
    exr_type: str = key("half", choice(*EXR_TYPES))
    sheet: Optional[SheetSpec] = table(SheetSpec, optional=True)
    preview: Tuple[str, ...] = key((), list_of(*PREVIEWS))
    maps: Tuple[str, ...] = key((), list_of(*MAPS))
    normal_y: str = key("up", choice(*NORMAL_Y))  # "up" (+Y up, glTF 2.0) or "down" (green flipped)
    map_frames: bool = key(False, boolean)  # also each map as a PNG per frame, next to the frames
    dilate: bool = key(True, boolean)  # straight-alpha PNG frames: alpha-0 texels take the nearest covered colour


@dataclass(frozen=True)
class LookSpec:
    """A whole look, validated and defaulted."""

    name: str = key(None, name_text)  # default: the file stem
    seed: int = key(0, number(0, 2**63 - 1, integer=True))
    path: Optional[str] = None  # the file it was loaded from, for messages (not a look key)
    clip: ClipSpec = table(ClipSpec)
    image: ImageSpec = table(ImageSpec)
    camera: CameraSpec = table(CameraSpec)
    sources: Tuple[SourceSpec, ...] = tables("source", (SourceSpec(),), record=SourceSpec)
    forces: Tuple[ForceSpec, ...] = tables("force", (), kinds=FORCE_KINDS)
    obstacles: Tuple[ObstacleSpec, ...] = tables("obstacle", (), kinds=OBSTACLE_KINDS)
    shading: ShadingSpec = table(ShadingSpec)
    output: OutputSpec = table(OutputSpec)
