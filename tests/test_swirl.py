"""Swirl: curl noise from random Fourier modes."""

import math

import numba
import numpy as np
import pytest

from splatter.look.records import SwirlSpec
from splatter.sim import swirl
from splatter.sim.swirl import build_swirl

RNG = np.random.default_rng(2024)


def _field(octaves=3, period=None, strength=0.8, scale=1.5):
    return build_swirl(SwirlSpec(strength=strength, scale=scale, octaves=octaves, evolve=1.7), seed=11,
                       force_index=0, period=period)


def _numerical_divergence(f, pos, t, h):
    div = np.zeros(pos.shape[0])
    for j in range(3):
        e = np.zeros(3)
        e[j] = h
        div += (f.velocity(pos + e, t)[:, j] - f.velocity(pos - e, t)[:, j]) / (2 * h)
    return div


@pytest.mark.parametrize("octaves", [1, 3, 6])
def test_divergence_with_the_fields_own_step_is_round_off(octaves):
    # Bridson, Hourihan, Nordenstam, "Curl-Noise for Procedural Fluid Flow",
    # ACM TOG 26(3), 2007: v = curl(psi) is divergence-free; with the same
    # central-difference step as the field the numerical divergence is zero to
    # round-off (< 1e-10 in float64).
    f = _field(octaves)
    pos = RNG.uniform(-3, 3, (500, 3))
    div = _numerical_divergence(f, pos, 0.37, f.h)
    assert np.abs(div).max() < 1e-10
    # With another step it is small but clearly not round-off: the test can fail.
    assert np.abs(_numerical_divergence(f, pos, 0.37, 7 * f.h)).max() > 1e-8


def test_velocity_is_the_central_difference_curl_of_the_potential():
    # Independent reference: psi = sum a sin(k.x + w t + phi) evaluated here with
    # numpy, curl by central differences of step h.
    f = _field(3)
    pos = RNG.uniform(-2, 2, (300, 3))
    t, h = 0.9, f.h

    def psi(p):
        return np.sin(p @ f.k.T + (f.w * t + f.phi)) @ f.a

    d = []
    for j in range(3):
        e = np.zeros(3)
        e[j] = h
        d.append((psi(pos + e) - psi(pos - e)) / (2 * h))  # d[j][:, i] = d psi_i / d x_j
    curl = np.stack([d[1][:, 2] - d[2][:, 1], d[2][:, 0] - d[0][:, 2], d[0][:, 1] - d[1][:, 0]], axis=1)
    v = f.velocity(pos, t)
    scale = np.abs(v).max()
    np.testing.assert_allclose(v, curl, atol=1e-9 * scale)
    # The analytic curl, sum cos(theta) (k x a), differs by O((k h)^2).
    analytic = np.cos(pos @ f.k.T + (f.w * t + f.phi)) @ np.cross(f.k, f.a)
    kh = np.abs(f.k).max() * h
    err = np.abs(v - analytic).max() / scale
    assert err < 2 * kh ** 2 * f.k.shape[0]


def test_rms_speed_is_the_strength():
    # Normalisation: mean |v|^2 = sum |b|^2 / 2 over space and time; sampled here.
    f = _field(3, strength=0.8)
    pos = RNG.uniform(-20, 20, (20000, 3))
    speeds2 = np.concatenate([np.sum(f.velocity(pos, t) ** 2, axis=1) for t in (0.0, 3.1, 7.7)])
    assert abs(np.sqrt(speeds2.mean()) - 0.8) < 0.03


def test_periodic_in_time_when_looping():
    # A time-periodic field: v(x, t) = v(x, t + P) (reference-checks, Motion).
    period = 2.4
    f = _field(3, period=period)
    pos = RNG.uniform(-2, 2, (200, 3))
    for t in (0.0, 0.55, 1.9):
        np.testing.assert_allclose(f.velocity(pos, t + period), f.velocity(pos, t), atol=1e-12)
    # Not trivially constant in time.
    assert np.abs(f.velocity(pos, 0.3) - f.velocity(pos, 0.0)).max() > 1e-3
    # Every mode turns a whole number (>= 1) of times per period.
    m = f.w * period / (2 * np.pi)
    np.testing.assert_allclose(m, np.round(m), atol=1e-9)
    assert m.min() >= 1 - 1e-9


def test_same_seed_same_field():
    a, b = _field(2), _field(2)
    np.testing.assert_array_equal(a.b, b.b)
    other = build_swirl(SwirlSpec(octaves=2), seed=12, force_index=0)
    assert not np.array_equal(a.k, other.k)


@numba.njit
def fast_sincos(x):
    """The swirl kernels' own branch-free cosine and sine, element by element: (2, n)."""
    out = np.empty((2, x.size))
    for i in range(x.size):
        out[0, i], out[1, i] = swirl._sincos(x[i])
    return out


@numba.njit
def fast_exp(x):
    """The swirl kernels' own branch-free exp, element by element."""
    out = np.empty(x.size)
    for i in range(x.size):
        out[i] = swirl._exp(x[i])
    return out


def test_fast_exp_against_numpy():
    # The kernels' branch-free exp against numpy's (the platform libm): within one
    # unit in the last place over the whole double range it is used on, exact at 0.
    x = np.concatenate([RNG.uniform(-1, 0, 100000), RNG.uniform(-40, 0, 100000), RNG.uniform(-708, 709, 100000),
                        [0.0, -0.0, -1e-300, 0.5 * math.log(2), -0.5 * math.log(2), -708.0, 709.0]])
    got = fast_exp(x)
    want = np.exp(x)
    assert np.all(np.abs(got - want) <= np.spacing(want))
    assert fast_exp(np.array([0.0]))[0] == 1.0
    assert fast_exp(np.array([-1000.0]))[0] == np.exp(-708.0)  # clamped: far under any weight that counts
    plain = np.array([swirl._exp.py_func(v) for v in x[:1000]])  # as plain Python (NUMBA_DISABLE_JIT)
    assert np.array_equal(plain, got[:1000])


def test_fast_sincos_against_numpy():
    # The kernels' branch-free sine/cosine against numpy's (the platform libm).
    x = np.concatenate([RNG.uniform(-4, 4, 100000), RNG.uniform(-1e4, 1e4, 100000),
                        np.arange(-8, 9) * np.pi / 4])
    cs = fast_sincos(x)
    assert np.abs(cs[0] - np.cos(x)).max() < 5e-16
    assert np.abs(cs[1] - np.sin(x)).max() < 5e-16


def test_structure_function_follows_kolmogorov_two_thirds():
    # Kolmogorov 1941 (Pope, *Turbulent Flows*, 2000, ch. 6): in the inertial
    # range S2(r) = <|u(x + r) - u(x)|^2> ~ r**(2/3).  Reference values (from
    # memory): a 5-octave random-Fourier field with per-mode speed ~ k**(-1/3)
    # fits a slope of 0.68 over r = 0.06-0.5 of its largest scale; with
    # k**(-5/6) it fits 1.21.  Here 6 octaves, r from 2x the smallest eddy
    # (scale / 2**5) to half the largest, averaged over four fields so one
    # draw of 16 directions does not decide it (their slopes spread by ~0.07).
    scale = 1.5
    r = scale * 2.0 ** np.linspace(-4.0, -1.0, 13)  # 4 steps per octave
    rng = np.random.default_rng(7)
    n = 40000
    x = rng.uniform(-10 * scale, 10 * scale, (n, 3))  # many of the largest eddies
    e = rng.normal(size=(n, 3))
    e /= np.linalg.norm(e, axis=1)[:, None]  # directions uniform on the sphere
    s2 = np.zeros(r.size)
    for seed in (1, 2, 3, 4):
        f = build_swirl(SwirlSpec(strength=1.0, scale=scale, octaves=6, evolve=2.0), seed=seed, force_index=0)
        u0 = f.velocity(x, 0.4)
        # Same points and directions at every r, so sampling noise mostly cancels in the slope.
        s2 += [np.mean(np.sum((f.velocity(x + ri * e, 0.4) - u0) ** 2, axis=1)) for ri in r]
    slope = np.polyfit(np.log(r), np.log(s2), 1)[0]
    assert abs(slope - 2.0 / 3.0) < 0.1, slope


def test_small_eddies_change_on_their_own_turnover_time():
    # Kolmogorov 1941 (Pope, *Turbulent Flows*, 2000, sec. 6.1): an eddy of
    # size l and speed u(l) ~ l**(1/3) turns over in l / u(l) ~ l**(2/3), so
    # its rate of change grows as |k|**(2/3).  Fitted over six octaves of one
    # field from the wavevectors themselves (not the octave index), unsnapped.
    f = build_swirl(SwirlSpec(strength=1.0, scale=1.0, octaves=6, evolve=2.0), seed=3, force_index=0)
    kmag = np.linalg.norm(f.k, axis=1)
    octave = np.tile(np.arange(6), f.q.shape[0])
    mean_k = [kmag[octave == o].mean() for o in range(6)]
    mean_w = [np.abs(f.w[octave == o]).mean() for o in range(6)]
    slope = np.polyfit(np.log(mean_k), np.log(mean_w), 1)[0]
    assert abs(slope - 2.0 / 3.0) < 0.05, slope
    # The largest eddies keep `evolve`: frequencies 2 pi [0.5, 1.5] / evolve.
    w0 = np.abs(f.w[octave == 0])
    assert w0.min() >= 2 * np.pi * 0.5 / 2.0 and w0.max() <= 2 * np.pi * 1.5 / 2.0


def _mode_order_reference(ft, pos, t, sigma):
    """Swirl velocity and gradient summed puff by puff in mode order, in numpy.

    The module docstring's sums written out with the kernels' operations, one
    IEEE operation at a time (numpy's elementwise ufuncs neither fuse nor
    reorder), with their sine/cosine and the octave doubling
    ``C' = C^2 - S^2``, ``S' = 2 S C``; the weight ``exp(-|q|^2 sig^2 / 2)``
    of octave 0 from their exp (checked against numpy's above), then its fourth
    power per octave, below ``GRADIENT_FLOOR`` taken as 0.
    """
    cs = ft.swirl_phases(t)
    n = pos.shape[0]
    u = np.zeros((3, n))
    g = np.zeros((9, n))
    m = 0
    x, y, z = pos[:, 0].copy(), pos[:, 1].copy(), pos[:, 2].copy()
    for d in range(ft.swirl_q.shape[0]):
        q0, q1, q2 = ft.swirl_q[d]
        c, s = fast_sincos(q0 * x + q1 * y + q2 * z)
        qq = -0.5 * (q0 * q0 + q1 * q1 + q2 * q2)
        w = fast_exp(qq * sigma * sigma)
        w[w < swirl.GRADIENT_FLOOR] = 0.0
        for o in range(ft.swirl_oct[d]):
            cp, sp = cs[0, m], cs[1, m]
            ct = c * cp - s * sp
            st = (s * cp + c * sp) * w
            for a in range(3):
                u[a] += ct * ft.swirl_b[m, a]
                for b in range(3):
                    g[3 * a + b] += st * (-ft.swirl_b[m, a] * ft.swirl_kt[m, b])
            c, s = c * c - s * s, 2.0 * s * c
            w = w * w
            w = w * w
            w[w < swirl.GRADIENT_FLOOR] = 0.0
            m += 1
    return u.T, g.T.reshape(n, 3, 3)


def test_kernels_sum_in_mode_order_bit_for_bit():
    # The kernels sum eight puffs at a time in registers (splatter.sim._f64x8);
    # each puff's sums must still be the plain ones, term by term in mode order:
    # the same bits as the reference above, for any count of puffs (1003: a
    # last group of 8 and a last block of 64 part-filled) and for sigmas that
    # put some, all or none of a group's octaves under the weight floor.
    from splatter.sim.forces import pack_forces
    from splatter.sim.integrate import air_gradient, air_velocity

    ft = pack_forces([SwirlSpec(strength=0.8, scale=0.5, octaves=5, evolve=2.0)], seed=3)
    rng = np.random.default_rng(7)
    pos = rng.uniform(-1.0, 1.0, (1003, 3))
    sigma = np.concatenate([np.zeros(200), 10.0 ** rng.uniform(-4, 0.5, 700), np.full(103, 3.0)])
    want_u, want_g = _mode_order_reference(ft, pos, 0.37, sigma)
    assert np.abs(want_g).max() > 1.0 and np.count_nonzero(want_g.reshape(-1, 9).any(axis=1) == 0) >= 103
    assert np.array_equal(air_velocity(pos, time=0.37, forces=ft), want_u)
    assert np.array_equal(air_gradient(pos, time=0.37, forces=ft, sigma=sigma), want_g)
    few = slice(0, 5)  # fewer puffs than one group of eight
    assert np.array_equal(air_gradient(pos[few], time=0.37, forces=ft, sigma=sigma[few]), want_g[few])
