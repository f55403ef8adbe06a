"""The look: frozen records of everything needed to render one flipbook.

Only :mod:`splatter.look_load` builds these from TOML; every later stage reads
them and never sees TOML.  Values are already validated, defaulted and in
canonical form:

* a **range** is a ``(min, max)`` tuple (a constant ``v`` is ``(v, v)``);
* a **ramp** is a tuple of ``(age, value)`` keys sorted by age (a constant is
  one key at age 0);
* a **colour ramp** is a tuple of ``(age, (r, g, b))`` keys in linear light;
* vectors are tuples of three floats; ``None`` means "not set" where the
  spec allows it (``stop = "never"`` is ``None``, ``warmup = "auto"`` is
  ``None``).

See ``docs/look-reference.md`` in the repository for the meaning of each key.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional, Tuple, Union

Vec3 = Tuple[float, float, float]
Range = Tuple[float, float]
Ramp = Tuple[Tuple[float, float], ...]
ColorRamp = Tuple[Tuple[float, Vec3], ...]

INTEGRATORS = ("euler", "symplectic", "midpoint")
LOOP_MODES = ("none", "exact", "crossfade")
SHAPES = ("point", "sphere", "disc", "box", "line")
BLENDS = ("over", "add", "absorb")
PROJECTIONS = ("orthographic", "perspective")
FRAME_FORMATS = ("png", "exr")
PREVIEWS = ("gif", "mp4", "contact")
MAPS = ("motion", "normal", "depth", "lightdirs")


@dataclass(frozen=True)
class ClipSpec:
    """Timing of the clip (``[clip]``)."""

    frames: int = 64
    fps: float = 30.0
    substeps: int = 2
    integrator: str = "symplectic"
    warmup: Optional[float] = None  # None: "auto", the longest possible puff life
    loop: str = "none"
    crossfade: float = 0.25

    @property
    def duration(self) -> float:
        """Length of the clip in seconds, ``frames / fps``."""
        return self.frames / self.fps


@dataclass(frozen=True)
class ImageSpec:
    """Pixel size of one frame (``[image]``)."""

    width: int = 256
    height: int = 256


@dataclass(frozen=True)
class CameraSpec:
    """How the scene is seen (``[camera]``)."""

    projection: str = "orthographic"
    eye: Vec3 = (0.0, 0.0, 10.0)
    target: Vec3 = (0.0, 0.0, 0.0)
    up: Vec3 = (0.0, 1.0, 0.0)
    view_width: float = 4.0
    fov: float = 40.0
    fit: bool = False
    margin: float = 0.05


@dataclass(frozen=True)
class BurstSpec:
    """A one-off release of ``count`` puffs at ``time`` seconds."""

    time: float
    count: int


@dataclass(frozen=True)
class SourceSpec:
    """Where puffs are born and how they look (one ``[[source]]``)."""

    shape: str = "point"
    center: Vec3 = (0.0, 0.0, 0.0)
    radius: float = 0.25
    extent: Vec3 = (0.25, 0.25, 0.25)
    normal: Vec3 = (0.0, 1.0, 0.0)
    rate: float = 50.0
    bursts: Tuple[BurstSpec, ...] = ()
    start: float = 0.0
    stop: Optional[float] = None  # None: "never"
    direction: Vec3 = (0.0, 1.0, 0.0)
    speed: Range = (1.0, 1.0)
    spread: float = 10.0
    life: Range = (2.0, 3.0)
    size: Range = (0.2, 0.2)
    grow: Ramp = ((0.0, 1.0),)
    opacity: Ramp = ((0.0, 0.0), (0.1, 0.5), (1.0, 0.0))
    fade: float = 0.0
    color: ColorRamp = ((0.0, (0.6938719, 0.6724431, 0.6307572)),)  # "#d9d6d0"
    glow: Optional[ColorRamp] = None
    aspect: Range = (1.0, 1.0)
    stretch: float = 0.0
    density: float = 1.0


@dataclass(frozen=True)
class GravitySpec:
    """Constant acceleration (``kind = "gravity"``)."""

    accel: Vec3 = (0.0, -9.81, 0.0)


@dataclass(frozen=True)
class WindSpec:
    """Moving air that puffs take on at rate ``grip`` (``kind = "wind"``)."""

    velocity: Vec3 = (1.0, 0.0, 0.0)
    gust: float = 0.0
    gust_period: float = 2.0
    grip: float = 1.0


@dataclass(frozen=True)
class DragSpec:
    """Pull toward still air at ``rate`` per second (``kind = "drag"``)."""

    rate: float = 0.5


@dataclass(frozen=True)
class LiftSpec:
    """Buoyancy that cools with age (``kind = "lift"``)."""

    accel: float = 2.0
    cooling: float = 0.5
    direction: Vec3 = (0.0, 1.0, 0.0)


@dataclass(frozen=True)
class SwirlSpec:
    """Divergence-free noise flow (``kind = "swirl"``)."""

    strength: float = 0.5
    scale: float = 1.0
    octaves: int = 2
    evolve: float = 2.0


@dataclass(frozen=True)
class VortexSpec:
    """Rotation about an axis (``kind = "vortex"``)."""

    center: Vec3 = (0.0, 0.0, 0.0)
    axis: Vec3 = (0.0, 1.0, 0.0)
    strength: float = 1.0
    radius: float = 0.5


ForceSpec = Union[GravitySpec, WindSpec, DragSpec, LiftSpec, SwirlSpec, VortexSpec]


@dataclass(frozen=True)
class PlaneSpec:
    """An infinite plane puffs bounce off (``kind = "plane"``)."""

    point: Vec3 = (0.0, 0.0, 0.0)
    normal: Vec3 = (0.0, 1.0, 0.0)
    bounce: float = 0.3
    friction: float = 0.2
    kill: bool = False


@dataclass(frozen=True)
class SphereSpec:
    """A solid ball puffs bounce off (``kind = "sphere"``)."""

    center: Vec3 = (0.0, 0.0, 0.0)
    radius: float = 0.5
    bounce: float = 0.3
    friction: float = 0.2
    kill: bool = False


ObstacleSpec = Union[PlaneSpec, SphereSpec]


@dataclass(frozen=True)
class LightSpec:
    """A directional light (``[shading.light]``)."""

    direction: Vec3 = (1.0, 1.0, 1.0)  # from the scene toward the light
    color: Vec3 = (1.0, 1.0, 1.0)
    intensity: float = 1.0
    shadow: float = 0.8


@dataclass(frozen=True)
class ShadingSpec:
    """How puffs are blended and lit (``[shading]``)."""

    blend: str = "over"
    ambient: float = 1.0
    ambient_color: Optional[Vec3] = None  # colour of the unshadowed share; None: the light's colour
    exposure: float = 0.0
    light: Optional[LightSpec] = None


@dataclass(frozen=True)
class SheetSpec:
    """Sprite-sheet packing (``output.sheet``); ``None`` grid sizes are chosen."""

    columns: Optional[int] = None
    rows: Optional[int] = None
    padding: int = 2
    pow2: bool = False
    format: str = "png"


@dataclass(frozen=True)
class OutputSpec:
    """What files a render writes (``[output]``)."""

    dir: str = "renders/{name}"
    frames: Tuple[str, ...] = ("png",)
    png_bits: int = 8
    png_alpha: str = "straight"
    exr_type: str = "half"
    sheet: Optional[SheetSpec] = None
    preview: Tuple[str, ...] = ()
    maps: Tuple[str, ...] = ()
    normal_y: str = "up"  # "up" (+Y up, glTF 2.0) or "down" (green flipped)


@dataclass(frozen=True)
class LookSpec:
    """A whole look, validated and defaulted."""

    name: str
    seed: int = 0
    path: Optional[str] = None  # the file it was loaded from, for messages
    clip: ClipSpec = field(default_factory=ClipSpec)
    image: ImageSpec = field(default_factory=ImageSpec)
    camera: CameraSpec = field(default_factory=CameraSpec)
    sources: Tuple[SourceSpec, ...] = (SourceSpec(),)
    forces: Tuple[ForceSpec, ...] = ()
    obstacles: Tuple[ObstacleSpec, ...] = ()
    shading: ShadingSpec = field(default_factory=ShadingSpec)
    output: OutputSpec = field(default_factory=OutputSpec)
