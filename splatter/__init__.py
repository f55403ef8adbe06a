"""splatter: smoke, steam, dust and mist flipbook textures rendered on the CPU.

The public Python API is small:

* :func:`composite` (and :func:`composite_features`): splat 2D Gaussians into
  a linear premultiplied RGBA image;
* :func:`load_look`: read and validate a look file (then
  ``splatter.render.render(look)`` runs the same pipeline as ``splatter render``);
* :class:`LookError`: the one error type for bad input.

The numba-compiled parts are imported on first use, so that validating a look
(or reporting bad input) does not pay for loading the compiler.
"""

from splatter.core.errors import LookError, LookWarning

__all__ = ["composite", "composite_features", "load_look", "LookError", "LookWarning"]
__version__ = "0.1.0"

_LAZY = {
    "composite": ("splatter.raster.compositor", "composite"),
    "composite_features": ("splatter.raster.compositor", "composite_features"),
    "load_look": ("splatter.look.load", "load_look"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        return getattr(importlib.import_module(module), attr)
    raise AttributeError(f"module 'splatter' has no attribute {name!r}")
