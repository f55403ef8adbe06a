"""Every set of allowed words (and bit depths), written down once.

The look schema, the command line and the public functions all check
against these tuples, so an error message always lists the same options.

Examples
--------
>>> BLENDS
('over', 'add', 'absorb')
>>> "exact" in LOOP_MODES
True
"""

INTEGRATORS = ("euler", "symplectic", "midpoint")
"""``clip.integrator``: explicit, semi-implicit (velocity first) and midpoint Euler."""

LOOP_MODES = ("none", "exact", "crossfade")
"""``clip.loop``."""

SHAPES = ("point", "sphere", "disc", "box", "line")
"""``source.shape``."""

BLENDS = ("over", "add", "absorb")
"""``shading.blend``: premultiplied over, additive, Beer-Lambert absorption."""

PROJECTIONS = ("orthographic", "perspective")
"""``camera.projection``."""

FRAME_FORMATS = ("png", "exr")
"""``output.frames`` entries and ``output.sheet.format``."""

PREVIEWS = ("gif", "mp4", "contact")
"""``output.preview`` entries."""

MAPS = ("motion", "normal", "depth", "lightdirs")
"""``output.maps`` entries."""

PNG_ALPHAS = ("straight", "premultiplied")
"""``output.png_alpha``; PNG's own rule is straight (unassociated) alpha."""

PNG_BITS = (8, 16)
"""``output.png_bits``."""

EXR_TYPES = ("half", "float")
"""``output.exr_type``: IEEE binary16 or binary32 channels."""

NORMAL_Y = ("up", "down")
"""``output.normal_y``: +Y up (glTF 2.0) or green flipped."""

COLOR_ENCODINGS = ("srgb", "linear")
"""Display encodings of colour channels."""
