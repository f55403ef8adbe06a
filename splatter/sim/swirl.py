"""Swirl: a divergence-free, smoothly evolving noise flow.

The flow is the curl of a vector potential (Bridson, Hourihan, Nordenstam,
"Curl-Noise for Procedural Fluid Flow", ACM TOG 26(3), 2007).  The potential
is a sum of random Fourier modes, the spectral synthesis of kinematic
simulations of turbulence (Kraichnan, "Diffusion by a random velocity field",
Phys. Fluids 13, 1970):

    psi(x, t) = sum_n a_n sin(k_n . x + w_n t + phi_n)

* ``k_n``: 16 base wavevectors ``q_d`` with uniform random directions and
  ``|q_d| = 2 pi / scale * j``, jitter ``j`` uniform in [0.85, 1.15]; octave
  ``o`` of direction ``d`` is the harmonic ``k = 2**o q_d`` (16 modes per
  octave).  Sharing a direction across octaves lets the kernel get every
  octave's angle from one sine/cosine pair by angle doubling and addition:
  ``cos(2**o a + p) = C_o cos p - S_o sin p`` with ``C_{o+1} = C_o**2 - S_o**2``,
  ``S_{o+1} = 2 S_o C_o``; each mode keeps its own amplitude, phase and
  frequency.
* ``|a_n| |k_n|`` (the mode's speed) falls as ``(2**o) ** (-1/3)``, so the
  field follows Kolmogorov's inertial range, energy spectrum
  ``E(k) ~ k**(-5/3)`` and structure function ``S2(r) ~ r**(2/3)``
  (Kolmogorov 1941; Pope, *Turbulent Flows*, 2000, ch. 6).  Why ``-1/3`` and
  not the square root of ``-5/3``: each octave holds the same number of modes,
  so an octave's energy is its modes' squared speeds, and it must equal the
  spectrum integrated over the octave, ``int_k^2k E ~ k**(-2/3)``; the
  per-mode speed is then ``k**(-1/3)``.  (``(2**o) ** (-5/6)`` forgets the
  octave's width, gives ``E ~ k**(-8/3)`` and a field too smooth at small
  scales: fitted ``S2`` slope 1.15 instead of 2/3.)
* ``octaves`` may be left to the plan (``None``, "auto"): :func:`auto_octaves`
  picks the count whose smallest eddy is 2-4 pixels at the final framing.
* ``w_n = 2 pi f_n / evolve * (2**o) ** (2/3)`` with ``f_n`` uniform in
  [0.5, 1.5]: ``evolve`` is the time the largest eddies take to change, and
  smaller eddies change faster, as their turnover time ``l / u(l)`` scales
  as ``l**(2/3)`` in the inertial range (Kolmogorov 1941; Pope, *Turbulent
  Flows*, 2000, sec. 6.1).  Small eddies that change as slowly as the large
  ones act as fixed cells that comb the smoke into fur; changing at their
  own pace they fold it into wisps.  When the clip loops exactly, each
  ``w_n`` is snapped to a whole multiple (>= 1) of ``2 pi / P`` so the field
  repeats with the loop period ``P``.

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
from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic, overload

from splatter.core.jit import KERNEL, PARALLEL
from splatter.sim import _f64x8 as V
from splatter.sim.rng import force_generator

MODES_PER_OCTAVE = 16  # base directions
SPECTRUM_EXPONENT = -1.0 / 3.0  # mode speed ~ |k|**(-1/3): Kolmogorov with equal modes per octave (docstring)
TURNOVER_EXPONENT = 2.0 / 3.0  # mode frequency ~ |k|**(2/3): an eddy's turnover time l / u(l) ~ l**(2/3)
H_FRACTION = 1e-3  # h = H_FRACTION * scale
GRADIENT_FLOOR = 1e-12  # a puff's octave weight below this is taken as 0 (its gradient terms are dropped)
AUTO_MAX_OCTAVES = 8  # "auto" may go past the explicit 1..6; each octave costs 16 modes per puff and step
AUTO_SMALLEST_EDDY_PX = 2.0  # "auto" stops before the smallest wavelength drops below this many pixels


def auto_octaves(scale: float, pixel_size: float) -> int:
    """Octaves for ``octaves = "auto"``: as many as keep the smallest eddy at least 2 px.

    Octave ``o`` has wavelength ``scale / 2**o``; the count is the largest
    ``n`` with ``scale / 2**(n - 1) >= AUTO_SMALLEST_EDDY_PX * pixel_size``,
    so the smallest eddy spans 2-4 pixels, clamped to 1 .. ``AUTO_MAX_OCTAVES``:

        n = clamp(1 + floor(log2(scale / (2 * pixel_size))), 1, 8)

    Parameters
    ----------
    scale : float
        The swirl's ``scale`` (wavelength of its largest eddies), world units.
    pixel_size : float
        World units per pixel at the final framing.

    Returns
    -------
    int

    Examples
    --------
    >>> auto_octaves(1.0, 4.0 / 256)  # 64 px largest eddy: 64, 32, 16, 8, 4, 2 px
    6
    >>> auto_octaves(1.0, 4.0 / 250)  # 62.5 px: the sixth octave would be 1.95 px
    5
    >>> auto_octaves(1.0, 1e-6), auto_octaves(1.0, 10.0)
    (8, 1)
    """
    if not (scale > 0 and pixel_size > 0 and math.isfinite(scale) and math.isfinite(pixel_size)):
        raise ValueError(f"auto_octaves: expected scale and pixel_size > 0, got {scale!r}, {pixel_size!r}")
    # The tiny nudge keeps an exact power of two (a common framing) on the side of the larger count.
    n = 1 + math.floor(math.log2(scale / (AUTO_SMALLEST_EDDY_PX * pixel_size)) + 1e-9)
    return int(min(AUTO_MAX_OCTAVES, max(1, n)))


@dataclass(frozen=True, eq=False)
class SwirlField:
    """A curl-noise velocity field made of Fourier modes.

    Modes are stored direction-major: mode ``d * octaves + o`` is octave ``o``
    of base direction ``d``.

    Attributes
    ----------
    q : (D, 3) float64 ndarray
        Base wavevectors (octave 0).
    octaves : int
    k : (M, 3) float64 ndarray
        Wavevectors, ``M = D * octaves``, ``k[d * octaves + o] = 2**o q[d]``.
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

    q: np.ndarray
    octaves: int
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
        oct_ = np.full(self.q.shape[0], self.octaves, dtype=np.int64)
        _swirl_velocity(pos, self.q, oct_, self.b, phase_table(self.phases(t)), out)
        return out


def phase_table(ph) -> np.ndarray:
    """``(2, M)`` float64: cos and sin of the modes' time phases, once per step."""
    ph = np.asarray(ph, dtype=np.float64)
    return np.ascontiguousarray(np.stack([np.cos(ph), np.sin(ph)]))


def _check_pos(pos) -> np.ndarray:
    pos = np.ascontiguousarray(pos, dtype=np.float64)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise ValueError(f"pos must have shape (N, 3), got {pos.shape}")
    return pos


def build_swirl(spec, *, seed: int, force_index: int, period: Optional[float] = None,
                directions: int = MODES_PER_OCTAVE) -> SwirlField:
    """Draw the modes of one swirl force.

    Parameters
    ----------
    spec : SwirlSpec
        ``strength``, ``scale``, ``octaves`` (a count; "auto" resolved), ``evolve``.
    seed : int
        The look's seed; modes are keyed by ``(seed, force_index)``.
    force_index : int
        Index of the force in the look.
    period : float or None
        Loop period to make the field periodic in, seconds.
    directions : int
        Base directions (modes per octave).

    Returns
    -------
    SwirlField
    """
    if not spec.scale > 0:
        raise ValueError(f"swirl scale must be > 0, got {spec.scale}")
    if spec.octaves is None:
        raise ValueError('swirl octaves "auto" must be resolved to a count first (see auto_octaves)')
    if int(spec.octaves) < 1:
        raise ValueError(f"swirl octaves must be >= 1, got {spec.octaves}")
    rng = force_generator(seed, force_index)
    octaves = int(spec.octaves)
    nd = int(directions)
    m = nd * octaves
    z = rng.uniform(-1.0, 1.0, nd)
    az = rng.uniform(0.0, 2.0 * np.pi, nd)
    r = np.sqrt(1.0 - z * z)
    q = np.stack([r * np.cos(az), r * np.sin(az), z], axis=1) * (
        2.0 * np.pi / spec.scale * rng.uniform(0.85, 1.15, nd))[:, None]
    octave = np.tile(np.arange(octaves), nd)  # direction-major
    k = np.repeat(q, octaves, axis=0) * (2.0 ** octave)[:, None]
    kmag = np.linalg.norm(k, axis=1)
    # Potential amplitude: a random direction; only its part across k matters.
    adir = rng.normal(size=(m, 3))
    adir /= np.linalg.norm(adir, axis=1)[:, None]
    speed = (2.0 ** octave) ** SPECTRUM_EXPONENT
    a = adir * (speed / kmag)[:, None]
    phi = rng.uniform(0.0, 2.0 * np.pi, m)
    f = rng.uniform(0.5, 1.5, m)
    evolve = float(spec.evolve)
    w = 2.0 * np.pi * f / evolve * (2.0 ** octave) ** TURNOVER_EXPONENT if evolve > 0 else np.zeros(m)
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
    return SwirlField(q=np.ascontiguousarray(q), octaves=octaves, k=np.ascontiguousarray(k),
                      a=np.ascontiguousarray(a), b=np.ascontiguousarray(b), w=w, phi=phi, h=h,
                      strength=float(spec.strength), period=period)


# cos(x) by Cody-Waite reduction to [-pi/4, pi/4] and the minimax kernel
# polynomials of the freely distributable libm (fdlibm, Sun Microsystems,
# 1993; coefficients from memory, accuracy checked against numpy.cos in the
# tests: within 2 ulp of 1).  Branch-free, so loops over puffs vectorise; it
# is several times faster than the library call, which dominates the step otherwise.
_INV_PIO2 = 6.36619772367581382433e-01
_PIO2_1 = 1.57079632673412561417e+00  # pi/2 in three pieces of 33 bits:
_PIO2_2 = 6.07710050630396597660e-11  # n * piece is exact for |n| < 2**20
_PIO2_3 = 2.02226624871116645580e-21
_C1 = 4.16666666666666019037e-02
_C2 = -1.38888888888741095749e-03
_C3 = 2.48015872894767294178e-05
_C4 = -2.75573143513906633035e-07
_C5 = 2.08757232129817482790e-09
_C6 = -1.13596475577881948265e-11
_S1 = -1.66666666666666324348e-01
_S2 = 8.33333333332248946124e-03
_S3 = -1.98412698298579493134e-04
_S4 = 2.75573137070700676789e-06
_S5 = -2.50507602534068634195e-08
_S6 = 1.58969099521155010221e-10

# exp(x) by the reduction x = n ln2 + r, |r| <= ln2 / 2, and the rational
# kernel of fdlibm's e_exp.c (Sun Microsystems, 1993; coefficients from
# memory, accuracy checked against numpy.exp in the tests: within 1 ulp).
# Branch-free like _sincos, so the loop of a direction's weights vectorises;
# the library call kept it scalar, a seventh of the shaped step.
_INV_LN2 = 1.44269504088896338700e+00
_LN2_HI = 6.93147180369123816490e-01  # ln 2 in two pieces: n * _LN2_HI is exact for |n| < 2**11
_LN2_LO = 1.90821492927058770002e-10
_E1 = 1.66666666666666019037e-01
_E2 = -2.77777777770155933842e-03
_E3 = 6.61375632143793436117e-05
_E4 = -1.65339022054652515390e-06
_E5 = 4.13813679705723846039e-08
_EXP_LOWEST = -708.0  # exp below it is under 1e-307: the swirl's weights are 0 from 1e-12 (GRADIENT_FLOOR)


def _two_to(n):
    """``2.0 ** n`` for an integer ``-1022 <= n <= 1023``, made from its bits when compiled."""
    return math.ldexp(1.0, int(n))


@intrinsic
def _two_to_bits(typingctx, n):
    if n != types.int64:
        return None

    def codegen(context, builder, signature, args):
        biased = builder.add(args[0], ir.Constant(ir.IntType(64), 1023))
        return builder.bitcast(builder.shl(biased, ir.Constant(ir.IntType(64), 52)), ir.DoubleType())

    return types.float64(n), codegen


@overload(_two_to)
def _ov_two_to(n):
    if n == types.int64:
        return lambda n: _two_to_bits(n)
    return None


@numba.njit(inline="always", **KERNEL)
def _exp(x):
    """``exp(x)`` for ``x <= 709``, to within an ulp; below ``-708`` it gives ``exp(-708)``."""
    x = max(x, _EXP_LOWEST)
    n = math.floor(x * _INV_LN2 + 0.5)
    hi = x - n * _LN2_HI
    lo = n * _LN2_LO
    r = hi - lo
    z = r * r
    c = r - z * (_E1 + z * (_E2 + z * (_E3 + z * (_E4 + z * _E5))))
    return (1.0 - ((lo - (r * c) / (2.0 - c)) - hi)) * _two_to(np.int64(n))


BLOCK = 64
"""Puffs per block in the vectorised loops (fixed, so results never depend on threads)."""


@numba.njit(inline="always", **KERNEL)
def _sincos(x):
    n = math.floor(x * _INV_PIO2 + 0.5)
    r = ((x - n * _PIO2_1) - n * _PIO2_2) - n * _PIO2_3
    z = r * r
    c = 1.0 - 0.5 * z + z * z * (_C1 + z * (_C2 + z * (_C3 + z * (_C4 + z * (_C5 + z * _C6)))))
    s = r + r * z * (_S1 + z * (_S2 + z * (_S3 + z * (_S4 + z * (_S5 + z * _S6)))))
    q = n - 4.0 * math.floor(n * 0.25)  # quadrant 0..3: x = r + q pi/2 (mod 2 pi)
    even = q == 0.0 or q == 2.0
    cv = c if even else s
    sv = s if even else c
    cv = -cv if (q == 1.0 or q == 2.0) else cv
    sv = -sv if (q == 2.0 or q == 3.0) else sv
    return cv, sv


@numba.njit(**KERNEL)
def _swirl_block(x, y, z, n, q, octaves, b, cs, ux, uy, uz, c, s):
    """Add the modes' velocity at points ``0 .. n-1`` of ``x, y, z`` into ``ux, uy, uz``.

    ``q (D, 3)`` base wavevectors with ``octaves (D,)`` harmonics each, modes
    numbered direction-major; ``cs (2, M)`` cos and sin of the time phases;
    ``c, s`` are scratch. Each point's sum runs over modes in order; the
    octaves of a direction are summed eight points at a time in registers
    (see :func:`_swirl_grad_block`), so rows of ``c, s, ux, uy, uz`` must hold
    ``n`` rounded up to a multiple of 8 (lanes past ``n`` are meaningless).
    """
    nv = (n + 7) // 8 * 8
    for i in range(n, nv):
        ux[i] = 0.0
        uy[i] = 0.0
        uz[i] = 0.0
    m = 0
    for d in range(q.shape[0]):
        q0 = q[d, 0]
        q1 = q[d, 1]
        q2 = q[d, 2]
        for i in range(n):
            c[i], s[i] = _sincos(q0 * x[i] + q1 * y[i] + q2 * z[i])
        for i in range(n, nv):
            c[i] = 1.0
            s[i] = 0.0
        _direction_velocity(nv, m, octaves[d], b, cs, c, s, ux, uy, uz)
        m += octaves[d]


@numba.njit(inline="always", **KERNEL)
def _add_mode_velocity(vx, vy, vz, ct, b, m):
    """The velocity sums of eight points plus mode ``m``'s term ``cos(theta) b``."""
    return (V.vadd(vx, V.vmul(ct, V.vsplat(b[m, 0]))), V.vadd(vy, V.vmul(ct, V.vsplat(b[m, 1]))),
            V.vadd(vz, V.vmul(ct, V.vsplat(b[m, 2]))))


@numba.njit(inline="always", **KERNEL)
def _double_angle(cv, sv):
    """``cos`` and ``sin`` of twice the angle of ``(cv, sv)``: the next octave's (eight points)."""
    return V.vsub(V.vmul(cv, cv), V.vmul(sv, sv)), V.vmul(V.vmul(V.vsplat(2.0), sv), cv)


@numba.njit(inline="always", **KERNEL)
def _direction_velocity(nv, m0, noct, b, cs, c, s, ux, uy, uz):
    """Add the velocity of modes ``m0 .. m0+noct-1`` (one direction's octaves) at
    points ``0 .. nv-1`` (a multiple of 8), eight at a time: per point the
    scalar sum ``u += cos(theta) b`` in mode order, the angle doubled between octaves."""
    for i in range(0, nv, 8):
        cv = V.vload(c, i)
        sv = V.vload(s, i)
        vx = V.vload(ux, i)
        vy = V.vload(uy, i)
        vz = V.vload(uz, i)
        for o in range(noct):
            m = m0 + o
            ct = V.vsub(V.vmul(cv, V.vsplat(cs[0, m])), V.vmul(sv, V.vsplat(cs[1, m])))  # cos(2**o a + phase)
            vx, vy, vz = _add_mode_velocity(vx, vy, vz, ct, b, m)
            if o + 1 < noct:
                cv, sv = _double_angle(cv, sv)
        V.vstore(ux, i, vx)
        V.vstore(uy, i, vy)
        V.vstore(uz, i, vz)


@numba.njit(inline="always", **KERNEL)
def load_points(pos, i0, n, buf):
    """Copy points ``i0 .. i0+n-1`` of ``pos`` ((N, 3)) into rows 0-2 of a block buffer."""
    for j in range(n):
        buf[0, j] = pos[i0 + j, 0]
        buf[1, j] = pos[i0 + j, 1]
        buf[2, j] = pos[i0 + j, 2]


@numba.njit(**PARALLEL)
def _swirl_velocity(pos, q, octaves, b, cs, out):
    nblocks = (pos.shape[0] + BLOCK - 1) // BLOCK
    for blk in numba.prange(nblocks):
        i0 = blk * BLOCK
        n = min(pos.shape[0], i0 + BLOCK) - i0
        buf = np.zeros((8, BLOCK))
        load_points(pos, i0, n, buf)
        _swirl_block(buf[0], buf[1], buf[2], n, q, octaves, b, cs, buf[3], buf[4], buf[5], buf[6], buf[7])
        for j in range(n):
            out[i0 + j, 0] = buf[3, j]
            out[i0 + j, 1] = buf[4, j]
            out[i0 + j, 2] = buf[5, j]


@numba.njit(**KERNEL)
def _swirl_grad_block(x, y, z, n, q, octaves, b, kt, cs, ux, uy, uz, g, c, s, sig, w, st):
    """:func:`_swirl_block` plus the velocity gradient: ``g[3 a + b, i] += du_a/dx_b``.

    The gradient of ``cos(theta_n) b_n`` taken with the field's central
    difference is ``-sin(theta_n) b_n kt_n^T`` (``kt``: modified wavenumbers,
    (M, 3)), so its trace ``-sin(theta_n) b_n . kt_n`` is zero to round-off,
    like the divergence.  ``g`` is (9, >= n) float64.

    The gradient is the one a puff of sigma ``sig[i]`` feels as a whole: each
    mode's term is weighted by ``exp(-|k|^2 sig^2 / 2)``, the Fourier
    transform of the puff's Gaussian, so eddies smaller than the puff mix
    its inside instead of stretching it (``sig = 0``: the point gradient).
    Octave ``o`` of a direction has ``|k| = 2**o |q|``, so its weight is the
    previous octave's to the fourth power. ``w`` is scratch and ``st`` unused
    (kept for the caller's row layout). A weight below :data:`GRADIENT_FLOOR`
    is taken as exactly 0 for that puff, so when every puff of a group of
    eight weighs 0 the octave's gradient terms can be skipped without
    changing a bit (a term ``+-0`` leaves a sum that started at +0 as it
    is): results never depend on which puffs share a block (twins and
    warm-up, frame ranges, thread counts agree).

    The octaves of a direction are summed eight puffs at a time in
    registers (:mod:`splatter.sim._f64x8`): each sum is loaded once a
    direction, takes its terms in mode order with the scalar code's
    operations, and is stored once, so the bits are those of a loop over
    puffs that updates the rows in memory mode by mode. Rows of ``c, s, w,
    ux, uy, uz, g`` must hold ``n`` rounded up to a multiple of 8 (the
    block's 64 do); lanes past ``n`` are filled with zeros and results there
    are meaningless.
    """
    nv = (n + 7) // 8 * 8
    for i in range(n, nv):  # the last group's spare lanes: no weight, finite values
        ux[i] = 0.0
        uy[i] = 0.0
        uz[i] = 0.0
        for r in range(9):
            g[r, i] = 0.0
    m = 0
    for d in range(q.shape[0]):
        q0 = q[d, 0]
        q1 = q[d, 1]
        q2 = q[d, 2]
        qq = -0.5 * (q0 * q0 + q1 * q1 + q2 * q2)
        # Separate loops, each with few arrays: LLVM vectorises a loop only when it
        # can check at run time that its arrays do not overlap, and gives up when
        # there are many of them (or a library call such as math.exp is in it).
        for i in range(n):
            c[i], s[i] = _sincos(q0 * x[i] + q1 * y[i] + q2 * z[i])
        for i in range(n):
            wi = _exp(qq * sig[i] * sig[i])
            w[i] = 0.0 if wi < GRADIENT_FLOOR else wi
        for i in range(n, nv):
            c[i] = 1.0
            s[i] = 0.0
            w[i] = 0.0
        _direction_octaves(nv, m, octaves[d], b, kt, cs, c, s, w, ux, uy, uz, g)
        m += octaves[d]


@numba.njit(inline="always", **KERNEL)
def _direction_octaves(nv, m0, noct, b, kt, cs, c, s, w, ux, uy, uz, g):
    """Add the velocity and gradient terms of modes ``m0 .. m0+noct-1`` (one
    direction's octaves) at points ``0 .. nv-1`` (a multiple of 8), eight at a time."""
    for i in range(0, nv, 8):
        cv = V.vload(c, i)
        sv = V.vload(s, i)
        wv = V.vload(w, i)
        live = V.vany_nonzero(wv)
        vx = V.vload(ux, i)
        vy = V.vload(uy, i)
        vz = V.vload(uz, i)
        g0 = V.vload(g[0], i)
        g1 = V.vload(g[1], i)
        g2 = V.vload(g[2], i)
        g3 = V.vload(g[3], i)
        g4 = V.vload(g[4], i)
        g5 = V.vload(g[5], i)
        g6 = V.vload(g[6], i)
        g7 = V.vload(g[7], i)
        g8 = V.vload(g[8], i)
        for o in range(noct):
            m = m0 + o
            cp = V.vsplat(cs[0, m])
            sp = V.vsplat(cs[1, m])
            ct = V.vsub(V.vmul(cv, cp), V.vmul(sv, sp))  # cos(2**o a + phase)
            vx, vy, vz = _add_mode_velocity(vx, vy, vz, ct, b, m)
            if live:
                # sin(2**o a + phase), seen by the whole puff, times -b kt^T.
                st = V.vmul(V.vadd(V.vmul(sv, cp), V.vmul(cv, sp)), wv)
                nb0 = -b[m, 0]
                nb1 = -b[m, 1]
                nb2 = -b[m, 2]
                k0 = kt[m, 0]
                k1 = kt[m, 1]
                k2 = kt[m, 2]
                g0 = V.vadd(g0, V.vmul(st, V.vsplat(nb0 * k0)))
                g1 = V.vadd(g1, V.vmul(st, V.vsplat(nb0 * k1)))
                g2 = V.vadd(g2, V.vmul(st, V.vsplat(nb0 * k2)))
                g3 = V.vadd(g3, V.vmul(st, V.vsplat(nb1 * k0)))
                g4 = V.vadd(g4, V.vmul(st, V.vsplat(nb1 * k1)))
                g5 = V.vadd(g5, V.vmul(st, V.vsplat(nb1 * k2)))
                g6 = V.vadd(g6, V.vmul(st, V.vsplat(nb2 * k0)))
                g7 = V.vadd(g7, V.vmul(st, V.vsplat(nb2 * k1)))
                g8 = V.vadd(g8, V.vmul(st, V.vsplat(nb2 * k2)))
            if o + 1 < noct:
                cv, sv = _double_angle(cv, sv)
                if live:
                    w2 = V.vmul(wv, wv)
                    wv = V.vkeep_at_least(V.vmul(w2, w2), GRADIENT_FLOOR)
                    live = V.vany_nonzero(wv)
        V.vstore(ux, i, vx)
        V.vstore(uy, i, vy)
        V.vstore(uz, i, vz)
        V.vstore(g[0], i, g0)
        V.vstore(g[1], i, g1)
        V.vstore(g[2], i, g2)
        V.vstore(g[3], i, g3)
        V.vstore(g[4], i, g4)
        V.vstore(g[5], i, g5)
        V.vstore(g[6], i, g6)
        V.vstore(g[7], i, g7)
        V.vstore(g[8], i, g8)


def modified_wavenumbers(field: SwirlField) -> np.ndarray:
    """``kt = sin(k h) / h`` of each mode of ``field``: (M, 3) float64 (see the module docstring)."""
    return np.ascontiguousarray(np.sin(field.k * field.h) / field.h)
