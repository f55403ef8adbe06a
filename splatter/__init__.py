"""splatter: smoke, steam, dust and mist flipbook textures rendered on the CPU.

The public Python API is small:

* :func:`composite` (and :func:`composite_features`): splat 2D Gaussians into
  a linear premultiplied RGBA image;
* :func:`load_look`: read and validate a look file or a look given as a dict;
* :func:`render_frames`: yield each frame's arrays (premultiplied linear RGBA
  float32 and the requested maps), writing nothing;
* ``render(look)``: write the files, as ``splatter render`` does (the
  :mod:`splatter.render` module is itself callable, so ``splatter.render(look)``
  and ``splatter.render.render(look)`` are the same);
* :func:`vary`: render many variations of a look (seeds, sweeps), locally
  or on a Dask cluster, and return the batch's manifest;
* :class:`LookError`: the one error type for bad input.

The numba-compiled parts are imported on first use, so that validating a look
(or reporting bad input) does not pay for loading the compiler.
"""

from splatter.core.errors import LookError, LookWarning

__all__ = ["composite", "composite_features", "load_look", "render", "render_frames", "vary", "LookError",
           "LookWarning"]
__version__ = "0.1.0"

_LAZY = {
    "composite": ("splatter.raster.compositor", "composite"),
    "composite_features": ("splatter.raster.compositor", "composite_features"),
    "load_look": ("splatter.look.load", "load_look"),
    "render": ("splatter.render", None),  # the module, which is callable
    "render_frames": ("splatter.render", "render_frames"),
    "vary": ("splatter.batch.run", "vary"),
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        loaded = importlib.import_module(module)
        return loaded if attr is None else getattr(loaded, attr)
    raise AttributeError(f"module 'splatter' has no attribute {name!r}")
