"""Keyed random numbers for the simulation.

Every random number the simulation uses comes from a
``numpy.random.Generator(numpy.random.Philox(...))`` whose 128-bit key and
256-bit counter are fixed by *what the number is for*, never by when it was
asked for.  The keying is:

* ``key[0]`` = the look's ``seed`` (0 .. 2**64 - 1);
* ``key[1]`` = ``domain << 56 | index << 24 | stream``, where ``domain`` is
  :data:`PUFF` (per-puff draws, ``index`` = source index) or :data:`FORCE`
  (random phases and modes of a force, ``index`` = force index), and
  ``stream`` separates independent uses inside one source (0 for the steady
  ``rate`` emission, ``1 + b`` for burst ``b``);
* ``counter`` = ``[0, block, 0, 0]`` for per-puff draws, where
  ``block = slot // BLOCK``.

A puff's draws are row ``slot % BLOCK`` of the ``(BLOCK, n_draws)`` array of
uniforms generated for its block, so they depend only on
``(seed, source, stream, slot, n_draws)``: not on how many puffs were spawned
together, which frames were requested or how many threads ran.  Callers must
use one ``n_draws`` per stream (the simulation always uses
:data:`splatter.sim.emit.N_DRAWS`).
"""

from __future__ import annotations

import numpy as np

BLOCK = 1024
"""Slots per generated block of per-puff draws."""

PUFF = 1
"""Key domain of per-puff draws."""

FORCE = 2
"""Key domain of force modes and phases."""

_MASK64 = (1 << 64) - 1


def _key(seed: int, domain: int, index: int, stream: int) -> np.ndarray:
    if not 0 <= index < (1 << 32):
        raise ValueError(f"index must be in [0, 2**32), got {index}")
    if not 0 <= stream < (1 << 24):
        raise ValueError(f"stream must be in [0, 2**24), got {stream}")
    word1 = (domain << 56) | (index << 24) | stream
    return np.array([int(seed) & _MASK64, word1], dtype=np.uint64)


def _block_uniforms(seed: int, source: int, stream: int, block: int, n_draws: int) -> np.ndarray:
    bitgen = np.random.Philox(key=_key(seed, PUFF, source, stream),
                              counter=np.array([0, block, 0, 0], dtype=np.uint64))
    return np.random.Generator(bitgen).random((BLOCK, n_draws))


class PuffDraws:
    """Per-puff uniforms of one ``(seed, source, stream)``, with a small block cache.

    Parameters
    ----------
    seed, source, stream : int
        The key (see the module docstring).
    n_draws : int
        Uniforms per puff.
    """

    def __init__(self, seed: int, source: int, stream: int, n_draws: int):
        self.seed, self.source, self.stream, self.n_draws = int(seed), int(source), int(stream), int(n_draws)
        self._cache: dict[int, np.ndarray] = {}

    def __call__(self, slots: np.ndarray) -> np.ndarray:
        """Uniforms in [0, 1) for each slot.

        Parameters
        ----------
        slots : (n,) int64 ndarray
            Non-negative slot numbers.

        Returns
        -------
        (n, n_draws) float64 ndarray
        """
        slots = np.asarray(slots, dtype=np.int64)
        out = np.empty((slots.size, self.n_draws))
        if slots.size == 0:
            return out
        blocks = slots // BLOCK
        for b in np.unique(blocks):
            table = self._cache.get(int(b))
            if table is None:
                if len(self._cache) >= 4:  # slots arrive in order: old blocks are done
                    self._cache.pop(next(iter(self._cache)))
                table = _block_uniforms(self.seed, self.source, self.stream, int(b), self.n_draws)
                self._cache[int(b)] = table
            sel = blocks == b
            out[sel] = table[slots[sel] % BLOCK]
        return out


def puff_uniforms(seed: int, source: int, slots, n_draws: int, *, stream: int = 0) -> np.ndarray:
    """Uniform draws in [0, 1) for puffs of one source, keyed by slot.

    Parameters
    ----------
    seed : int
        The look's seed, >= 0.
    source : int
        Source index.
    slots : (n,) int64 array_like
        Slot numbers, >= 0.
    n_draws : int
        Uniforms per puff.
    stream : int, optional
        Independent stream inside the source (0: rate emission, 1 + b: burst b).

    Returns
    -------
    (n, n_draws) float64 ndarray
        Row i depends only on ``(seed, source, stream, slots[i], n_draws)``.
    """
    slots = np.asarray(slots, dtype=np.int64)
    if slots.ndim != 1:
        raise ValueError(f"slots must be one-dimensional, got shape {slots.shape}")
    if slots.size and slots.min() < 0:
        raise ValueError("slots must be >= 0")
    if int(n_draws) < 1:
        raise ValueError(f"n_draws must be >= 1, got {n_draws}")
    return PuffDraws(seed, source, stream, n_draws)(slots)


def force_generator(seed: int, force: int, stream: int = 0) -> np.random.Generator:
    """The generator for the random modes and phases of force ``force``.

    Parameters
    ----------
    seed : int
        The look's seed, >= 0.
    force : int
        Index of the force in the look.
    stream : int, optional
        Independent stream inside the force.

    Returns
    -------
    numpy.random.Generator
        A fresh Philox generator; the same arguments give the same numbers.
    """
    return np.random.Generator(np.random.Philox(key=_key(seed, FORCE, force, stream)))
