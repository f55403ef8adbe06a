"""Image-space maps derived from a composited frame (after the compositor).

The normal map treats the smoke as a height field: the height at a pixel is
``H * 3 * (1 - (1 - alpha) ** (1/3))`` with ``H = 1.65 sigma`` (``sigma`` the
frame's median puff radius in pixels). For thin smoke this is ``H * alpha``,
which makes a lone Gaussian puff slope at 45 degrees one sigma from its
centre, as a sphere's silhouette does; the cube root keeps some relief
inside dense smoke, where alpha itself saturates.  Normals are
view-space, +X right, +Y up, +Z toward the viewer (glTF 2.0 convention),
or +Y down when asked (``output.normal_y = "down"``), so every file made
from them holds the look's convention; flat where there is no smoke.
"""

from __future__ import annotations

import numpy as np

__all__ = ["normal_map"]

_SLOPE = float(np.exp(0.5))  # H / sigma giving slope 1 at r = sigma for a Gaussian bump


def normal_map(alpha, sigma_px, *, y_down=False):
    """View-space normals of the smoke, from its alpha as a height field.

    Parameters
    ----------
    alpha : (H, W) float32 ndarray
        Coverage of the frame.
    sigma_px : float
        Typical puff radius (1 sigma) in pixels.
    y_down : bool
        Store ``normal.y`` with +Y pointing down the image (negated).

    Returns
    -------
    dict of str to (H, W) float32 ndarray
        ``normal.x``, ``normal.y``, ``normal.z``: unit vectors, +X right,
        +Y up (or down with ``y_down``), +Z toward the viewer.

    Examples
    --------
    >>> a = np.zeros((5, 5), np.float32); a[1:4, 1:4] = 0.5; a[2, 2] = 0.9
    >>> n = normal_map(a, 1.0)
    >>> bool(n["normal.y"][1, 2] > 0), bool(normal_map(a, 1.0, y_down=True)["normal.y"][1, 2] < 0)
    (True, True)
    """
    a = np.asarray(alpha, dtype=np.float64)
    height = _SLOPE * max(float(sigma_px), 0.5) * 3.0 * (1.0 - np.cbrt(1.0 - np.clip(a, 0.0, 1.0)))
    # Central differences (one-sided at the border); image y runs down.
    dh_dx = np.gradient(height, axis=1)
    dh_dy_down = np.gradient(height, axis=0)
    nx = -dh_dx
    ny = -dh_dy_down if y_down else dh_dy_down  # d/dy_up = -d/dy_down, and n_y = -dh/dy_up
    nz = np.ones_like(height)
    norm = np.sqrt(nx * nx + ny * ny + nz * nz)
    return {
        "normal.x": (nx / norm).astype(np.float32),
        "normal.y": (ny / norm).astype(np.float32),
        "normal.z": (nz / norm).astype(np.float32),
    }
