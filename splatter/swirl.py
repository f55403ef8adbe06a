"""Swirl: a divergence-free, smoothly evolving noise flow.

The flow is the curl of a vector potential (Bridson, Hourihan, Nordenstam,
"Curl-Noise for Procedural Fluid Flow", ACM TOG 26(3), 2007).  The potential
is a sum of random Fourier modes, the spectral synthesis of kinematic
simulations of turbulence (Kraichnan, "Diffusion by a random velocity field",
Phys. Fluids 13, 1970):

    psi(x, t) = sum_n a_n sin(k_n . x + w_n t + phi_n)

* ``k_n``: uniform random directions, ``|k_n| = 2 pi / scale * 2**o * j``
  for octave ``o`` with a jitter ``j`` uniform in [0.85, 1.15]; 16 modes per
  octave.
* ``|a_n| |k_n|`` (the mode's speed) falls as ``(2**o) ** (-5/6)``: the square
  root of a Kolmogorov ``k**(-5/3)`` energy spectrum sampled with the same
  number of modes per octave.  A look choice: big eddies dominate, small ones
  add detail.
* ``w_n = 2 pi f_n / evolve`` with ``f_n`` uniform in [0.5, 1.5].  When the
  clip loops exactly, each ``w_n`` is snapped to a whole multiple (>= 1) of
  ``2 pi / P`` so the field repeats with the loop period ``P``.

The velocity is **exactly** the central-difference curl of ``psi`` with the
field's fixed step ``h = 1e-3 * scale``.  A central difference of
``sin(k . x + c)`` along axis ``j`` is ``cos(k . x + c) sin(k_j h) / h``, so

    v(x, t) = sum_n cos(theta_n) (kt_n x a_n),   kt_nj = sin(k_nj h) / h

(the "modified wavenumber").  The numerical divergence with the same step is
then ``-sum_n sin(theta_n) kt_n . (kt_n x a_n) = 0`` up to round-off, while
``v`` differs from the analytic curl by ``O((k h)**2)``.  The field is scaled
so its RMS speed over space and time is ``strength``:
``mean |v|^2 = sum_n |kt_n x a_n|^2 / 2`` for distinct wavevectors.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Optional

import numba
import numpy as np

from splatter.jit import KERNEL, PARALLEL
from splatter.rng import force_generator

MODES_PER_OCTAVE = 16
SPECTRUM_EXPONENT = -5.0 / 6.0  # mode speed ~ |k|**(-5/6), see the module docstring
H_FRACTION = 1e-3  # h = H_FRACTION * scale


@dataclass(frozen=True, eq=False)
class SwirlField:
    """A curl-noise velocity field made of Fourier modes.

    Attributes
    ----------
    k : (M, 3) float64 ndarray
        Wavevectors.
    a : (M, 3) float64 ndarray
        Potential amplitudes (already scaled to the RMS speed).
    b : (M, 3) float64 ndarray
        Velocity amplitudes ``kt x a`` with the modified wavenumbers.
    w : (M,) float64 ndarray
        Angular frequencies, rad/s.
    phi : (M,) float64 ndarray
        Phases, rad.
    h : float
        Central-difference step the field is the exact curl for.
    strength : float
        RMS speed.
    period : float or None
        Time period the frequencies were snapped to, if any.
    """

    k: np.ndarray
    a: np.ndarray
    b: np.ndarray
    w: np.ndarray
    phi: np.ndarray
    h: float
    strength: float
    period: Optional[float] = None

    def phases(self, t: float) -> np.ndarray:
        """``w_n t + phi_n``: the time part of each mode's angle, (M,) float64."""
        return self.w * float(t) + self.phi

    def potential(self, pos, t: float) -> np.ndarray:
        """The vector potential psi at ``pos`` ((N, 3) float64), time ``t``: (N, 3) float64."""
        pos = _check_pos(pos)
        theta = pos @ self.k.T + self.phases(t)
        return np.sin(theta) @ self.a

    def velocity(self, pos, t: float) -> np.ndarray:
        """Velocity at ``pos``.

        Parameters
        ----------
        pos : (N, 3) float64 array_like
        t : float
            Time in seconds (the simulation passes the phase time, reduced
            modulo the loop period in whole steps).

        Returns
        -------
        (N, 3) float64 ndarray
        """
        pos = _check_pos(pos)
        out = np.empty_like(pos)
        _swirl_velocity(pos, self.k, self.b, self.phases(t), out)
        return out


def _check_pos(pos) -> np.ndarray:
    pos = np.ascontiguousarray(pos, dtype=np.float64)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise ValueError(f"pos must have shape (N, 3), got {pos.shape}")
    return pos


def build_swirl(spec, *, seed: int, force_index: int, period: Optional[float] = None,
                modes_per_octave: int = MODES_PER_OCTAVE) -> SwirlField:
    """Draw the modes of one swirl force.

    Parameters
    ----------
    spec : SwirlSpec
        ``strength``, ``scale``, ``octaves``, ``evolve``.
    seed : int
        The look's seed; modes are keyed by ``(seed, force_index)``.
    force_index : int
        Index of the force in the look.
    period : float or None
        Loop period to make the field periodic in, seconds.
    modes_per_octave : int

    Returns
    -------
    SwirlField
    """
    if not spec.scale > 0:
        raise ValueError(f"swirl scale must be > 0, got {spec.scale}")
    if int(spec.octaves) < 1:
        raise ValueError(f"swirl octaves must be >= 1, got {spec.octaves}")
    rng = force_generator(seed, force_index)
    octaves = int(spec.octaves)
    m = modes_per_octave * octaves
    octave = np.repeat(np.arange(octaves), modes_per_octave)
    z = rng.uniform(-1.0, 1.0, m)
    az = rng.uniform(0.0, 2.0 * np.pi, m)
    r = np.sqrt(1.0 - z * z)
    dirs = np.stack([r * np.cos(az), r * np.sin(az), z], axis=1)
    kmag = 2.0 * np.pi / spec.scale * 2.0 ** octave * rng.uniform(0.85, 1.15, m)
    k = dirs * kmag[:, None]
    # Potential amplitude: a random direction; only its part across k matters.
    adir = rng.normal(size=(m, 3))
    adir /= np.linalg.norm(adir, axis=1)[:, None]
    speed = (2.0 ** octave) ** SPECTRUM_EXPONENT
    a = adir * (speed / kmag)[:, None]
    phi = rng.uniform(0.0, 2.0 * np.pi, m)
    f = rng.uniform(0.5, 1.5, m)
    evolve = float(spec.evolve)
    w = 2.0 * np.pi * f / evolve if evolve > 0 else np.zeros(m)
    if period is not None and evolve > 0:
        base = 2.0 * np.pi / period
        w = np.maximum(1.0, np.round(w / base)) * base
    h = H_FRACTION * spec.scale
    kt = np.sin(k * h) / h
    b = np.cross(kt, a)
    rms = math.sqrt(float(np.sum(b * b)) / 2.0)
    gain = float(spec.strength) / rms if rms > 0 else 0.0
    a = a * gain
    b = np.cross(kt, a)
    return SwirlField(k=np.ascontiguousarray(k), a=np.ascontiguousarray(a), b=np.ascontiguousarray(b),
                      w=w, phi=phi, h=h, strength=float(spec.strength), period=period)


@numba.njit(**KERNEL)
def _swirl_at(x, y, z, k, b, ph):
    """Velocity of the modes ``k, b`` with time phases ``ph`` at one point."""
    vx = 0.0
    vy = 0.0
    vz = 0.0
    for n in range(k.shape[0]):
        c = math.cos(k[n, 0] * x + k[n, 1] * y + k[n, 2] * z + ph[n])
        vx += c * b[n, 0]
        vy += c * b[n, 1]
        vz += c * b[n, 2]
    return vx, vy, vz


@numba.njit(**PARALLEL)
def _swirl_velocity(pos, k, b, ph, out):
    for i in numba.prange(pos.shape[0]):
        vx, vy, vz = _swirl_at(pos[i, 0], pos[i, 1], pos[i, 2], k, b, ph)
        out[i, 0] = vx
        out[i, 1] = vy
        out[i, 2] = vz
