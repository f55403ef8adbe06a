"""Keyed random numbers: the same key gives the same draws, whatever else was asked for."""

import numpy as np
import pytest
from scipy import stats

from splatter.sim.rng import BLOCK, force_generator, puff_uniforms


def test_draws_depend_only_on_the_slot():
    # Keying invariant (common practice for reproducible particle systems): a
    # slot's draws must not depend on which other slots were drawn with it.
    full = puff_uniforms(7, 2, np.arange(3 * BLOCK), 16)
    some = puff_uniforms(7, 2, np.array([5, BLOCK + 3, 2 * BLOCK + 1000, 5]), 16)
    np.testing.assert_array_equal(some, full[[5, BLOCK + 3, 2 * BLOCK + 1000, 5]])


def test_keys_separate_seed_source_and_stream():
    base = puff_uniforms(7, 2, np.arange(64), 4)
    assert not np.array_equal(base, puff_uniforms(8, 2, np.arange(64), 4))
    assert not np.array_equal(base, puff_uniforms(7, 3, np.arange(64), 4))
    assert not np.array_equal(base, puff_uniforms(7, 2, np.arange(64), 4, stream=1))
    # Different blocks are different counters, not copies of each other.
    assert not np.array_equal(puff_uniforms(7, 2, np.arange(64), 4),
                              puff_uniforms(7, 2, np.arange(BLOCK, BLOCK + 64), 4))


def test_draws_are_uniform():
    # Kolmogorov-Smirnov test against U(0, 1) (scipy.stats.kstest); fixed key,
    # so the p-value is a fixed number, asserted well away from rejection.
    u = puff_uniforms(0, 0, np.arange(4 * BLOCK), 3).ravel()
    assert u.min() >= 0.0 and u.max() < 1.0
    assert stats.kstest(u, "uniform").pvalue > 1e-3


def test_force_generator_repeats():
    a = force_generator(3, 1).random(8)
    np.testing.assert_array_equal(a, force_generator(3, 1).random(8))
    assert not np.array_equal(a, force_generator(3, 2).random(8))


def test_bad_arguments_name_the_parameter():
    with pytest.raises(ValueError, match="slots"):
        puff_uniforms(0, 0, np.array([-1]), 2)
    with pytest.raises(ValueError, match="n_draws"):
        puff_uniforms(0, 0, np.array([1]), 0)
