"""Ramps: linear between keys, held flat outside (look spec, "A ramp is ...")."""

import numpy as np
from scipy.interpolate import interp1d

from splatter.sim.ramps import evaluate_color_ramp, evaluate_ramp


def test_scalar_ramp_matches_piecewise_linear_reference():
    ramp = ((0.0, 0.0), (0.1, 0.5), (1.0, 0.0))
    x = np.linspace(-0.5, 1.5, 201)
    # Reference: scipy's linear interpolation with the end values held outside.
    ref = interp1d([0.0, 0.1, 1.0], [0.0, 0.5, 0.0], bounds_error=False, fill_value=(0.0, 0.0))(x)
    np.testing.assert_allclose(evaluate_ramp(ramp, x), ref, atol=1e-15)


def test_hand_values_and_held_ends():
    ramp = ((0.2, 1.0), (0.6, 3.0))
    got = evaluate_ramp(ramp, [0.0, 0.2, 0.4, 0.5, 0.6, 2.0])
    np.testing.assert_allclose(got, [1.0, 1.0, 2.0, 2.5, 3.0, 3.0], atol=1e-15)


def test_constant_ramp():
    np.testing.assert_array_equal(evaluate_ramp(((0.0, 0.7),), [0.0, 0.5, 1.0]), [0.7, 0.7, 0.7])


def test_colour_ramp_per_channel():
    ramp = ((0.0, (1.0, 0.0, 0.5)), (1.0, (0.0, 1.0, 0.5)))
    got = evaluate_color_ramp(ramp, [-1.0, 0.25, 2.0])
    np.testing.assert_allclose(got, [[1.0, 0.0, 0.5], [0.75, 0.25, 0.5], [0.0, 1.0, 0.5]], atol=1e-15)
