"""splatter: smoke, steam, dust and mist flipbook textures rendered on the CPU."""

from splatter.errors import LookError, LookWarning

__all__ = ["LookError", "LookWarning"]
__version__ = "0.1.0"
