"""OpenEXR writer and reader (official ``OpenEXR`` Python bindings, 3.3+).

EXR frames hold linear-light, premultiplied RGBA, the OpenEXR convention
(OpenEXR Technical Introduction): channels ``R``, ``G``, ``B``, ``A``, and
extra layers as ``layer.channel`` (``motion.x``, ``motion.y``, ``depth.z``,
``normal.x`` ...). Files are single-part scanline images with ZIP
compression, which is lossless.
"""

from __future__ import annotations

import os
import re

import numpy as np
import OpenEXR

from splatter.deliver.fileio import atomic_path

__all__ = ["write_exr", "read_exr", "rgba_channels", "channel_types"]

_PIXEL_TYPES = {"half": np.float16, "float": np.float32}
_CHANNEL_NAME = re.compile(r"^[A-Za-z0-9_]+(\.[A-Za-z0-9_]+)*$")
# Header keys the library manages itself; callers may not set them.
_RESERVED = {"channels", "compression", "dataWindow", "displayWindow", "lineOrder", "type",
             "tiles", "chunkCount", "version"}


def rgba_channels(rgba):
    """Split an ``(H, W, 4)`` image into ``{"R", "G", "B", "A"}`` planes.

    Parameters
    ----------
    rgba : (H, W, 4) float ndarray

    Returns
    -------
    dict of str to (H, W) float32 ndarray
        float16 input stays float16 (a sheet held at the file's HALF type).
    """
    a = np.asarray(rgba)
    if a.ndim != 3 or a.shape[2] != 4:
        raise ValueError(f"rgba: expected an (H, W, 4) array, got shape {a.shape}")
    if a.dtype != np.float16:
        a = a.astype(np.float32, copy=False)
    return {c: np.ascontiguousarray(a[..., i]) for i, c in enumerate("RGBA")}


def write_exr(path, channels, *, pixel_type="half", attributes=None):
    """Write channels to an OpenEXR file, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Target file; its folder must exist.
    channels : dict of str to (H, W) float ndarray
        Channel name to plane; all planes the same shape. Names are ``R``,
        ``G``, ``B``, ``A`` for colour and ``layer.channel`` for extra layers.
        Colour must be linear and premultiplied by ``A``.
    pixel_type : {"half", "float"} or dict of str to {"half", "float"}
        Storage type: IEEE binary16 (``HALF``) or binary32 (``FLOAT``); a
        dict sets it per channel (missing channels default to ``"half"``).
    attributes : dict, optional
        Extra header attributes (str, int, float, or numpy arrays the
        bindings accept), for example ``{"splatter.frame": 3}``.

    Returns
    -------
    str
        ``path``.

    Notes
    -----
    ZIP compression (lossless): HALF values read back bit-exactly equal to
    ``np.float16(value)`` (round to nearest even). Values are not clipped;
    non-finite values are written as given.
    """
    if not isinstance(channels, dict) or not channels:
        raise ValueError("channels: expected a non-empty dict of name -> (H, W) array")
    types = pixel_type if isinstance(pixel_type, dict) else {}
    default = "half" if isinstance(pixel_type, dict) else pixel_type
    if default not in _PIXEL_TYPES:
        raise ValueError(f"pixel_type: expected 'half' or 'float', got {pixel_type!r}")
    shape = None
    planes = {}
    for name, plane in channels.items():
        if not isinstance(name, str) or not _CHANNEL_NAME.match(name):
            raise ValueError(f"channels: bad channel name {name!r} (expected R, G, B, A or layer.channel)")
        p = np.asarray(plane)
        if p.ndim != 2 or 0 in p.shape:
            raise ValueError(f"channels[{name!r}]: expected a non-empty (H, W) array, got shape {p.shape}")
        if shape is None:
            shape = p.shape
        elif p.shape != shape:
            raise ValueError(f"channels[{name!r}]: shape {p.shape} differs from {shape}")
        kind = types.get(name, default)
        if kind not in _PIXEL_TYPES:
            raise ValueError(f"pixel_type[{name!r}]: expected 'half' or 'float', got {kind!r}")
        planes[name] = np.ascontiguousarray(p.astype(_PIXEL_TYPES[kind]))
    header = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    for key, value in (attributes or {}).items():
        if key in _RESERVED:
            raise ValueError(f"attributes: {key!r} is set by the writer")
        header[key] = value
    with atomic_path(path, suffix=".exr") as tmp:
        with OpenEXR.File(header, planes) as f:
            f.write(tmp)
    return os.fspath(path)


def read_exr(path, *, with_header=False):
    """Read every channel of a single-part OpenEXR file.

    Parameters
    ----------
    path : str or os.PathLike
    with_header : bool
        Also return the header dict.

    Returns
    -------
    channels : dict of str to (H, W) float32 ndarray
        HALF channels are widened exactly to float32.
    header : dict
        Only when ``with_header``; includes ``"channels"`` with each
        channel's pixel type.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise FileNotFoundError(f"path: no such file {path!r}")
    with OpenEXR.File(path, separate_channels=True) as f:
        out = {name: np.asarray(c.pixels, dtype=np.float32) for name, c in f.channels().items()}
        header = dict(f.header()) if with_header else None
    return (out, header) if with_header else out


def channel_types(path):
    """Pixel type of each channel of an EXR file, for example ``{"R": "half"}``.

    Returns
    -------
    dict of str to {"half", "float", "uint"}
    """
    path = os.fspath(path)
    names = {OpenEXR.HALF: "half", OpenEXR.FLOAT: "float", OpenEXR.UINT: "uint"}
    # The header-only channel list cannot report its type in these bindings,
    # so the pixels are read too.
    with OpenEXR.File(path, separate_channels=True) as f:
        return {name: names[c.type()] for name, c in f.channels().items()}
