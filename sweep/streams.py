"""Random streams keyed by what a row is, never by where or when it runs.

A row's population is drawn from generators keyed by ``(sweep seed, base index, population
source, stream)``: the same row gets the same planets whatever the block size, the worker or the
number of restarts (DESIGN.md, "Rows, seeds and common random numbers").

:func:`row_generators` makes the generators of many rows at once, the same as
:func:`row_generator` row by row: it computes the keyed ``SeedSequence`` states of all rows with
array arithmetic, since making one ``SeedSequence`` object per row costs more than drawing a
row's numbers.

References
----------
.. [1] O'Neill, M. E. 2015, "Developing a seed_seq alternative", blog post at pcg-random.org
   (the hash and mixing functions of ``numpy.random.SeedSequence``; from memory).
"""

from __future__ import annotations

import functools

import numpy as np
from numpy.random.bit_generator import ISeedSequence

#: Stream numbers: one per independent purpose, so adding a purpose never shifts another's numbers.
CANDIDATES = 0  #: planets drawn from the envelope rate, with their per-planet uniforms
EXCESS = 1  #: planets beyond the envelope (rare), drawn from a separately keyed stream
STAR_PROPERTIES = 2  #: per-star draws (exozodi level and the like)
DESIGN = 3  #: Monte Carlo design quantiles

# numpy.random.SeedSequence's constants: pool of 4 32-bit words, hash multipliers and mixing
_POOL = 4
_MASK32 = 0xFFFFFFFF
_INIT_A, _MULT_A = 0x43B0D7E5, 0x931E8875
_INIT_B, _MULT_B = 0x8B51F9DD, 0x58F38DED
_MIX_L, _MIX_R = 0xCA01F9DD, 0x4973F715
_XSHIFT = 16


def row_generator(seed: int, base_index: int, population_source: int, stream: int) -> np.random.Generator:
    """A generator for one row and purpose: PCG64 seeded by a keyed ``SeedSequence``.

    Parameters
    ----------
    seed : int
        The sweep's seed.
    base_index : int
        The row's base index (position within its design block).
    population_source : int
        0 when the population seed comes from design block A (or Monte Carlo), 1 for block B.
    stream : int
        Purpose of the stream (:data:`CANDIDATES`, :data:`EXCESS`, ...).
    """
    sequence = np.random.SeedSequence(int(seed), spawn_key=(int(base_index), int(population_source), int(stream)))
    return np.random.Generator(np.random.PCG64(sequence))


def row_generators(seed: int, base_index, population_source, stream: int) -> list[np.random.Generator]:
    """The generators of many rows: ``row_generator(seed, b, s, stream)`` for each pair ``(b, s)``.

    Parameters
    ----------
    seed : int
        The sweep's seed.
    base_index : array_like of int
        The rows' base indices.
    population_source : array_like of int
        The rows' population sources, same length.
    stream : int
        Purpose of the streams.

    Returns
    -------
    list of numpy.random.Generator
        One per row, each giving the same numbers as :func:`row_generator` for its key.
    """
    base_index = np.asarray(base_index, dtype=np.int64).ravel()
    population_source = np.asarray(population_source, dtype=np.int64).ravel()
    keys = (base_index, population_source, np.full(len(base_index), int(stream), np.int64))
    # keys of one 32-bit word each (all that a sweep makes) have the array path; any other goes
    # through SeedSequence itself
    if not (_seed_supported(int(seed)) and all(bool(np.all((k >= 0) & (k <= _MASK32))) for k in keys)):
        return [row_generator(seed, b, s, stream) for b, s in zip(base_index, population_source)]
    states = _pcg64_seeds(int(seed), np.stack(keys, axis=1).astype(np.uint32))
    return [np.random.Generator(np.random.PCG64(_KnownState(state))) for state in states]


class _KnownState(ISeedSequence):
    """A seed sequence whose ``generate_state(4, np.uint64)`` (what PCG64 asks for) is known."""

    __slots__ = ("state",)

    def __init__(self, state: np.ndarray):
        self.state = state

    def generate_state(self, n_words, dtype=np.uint32):
        if n_words != 4 or dtype is not np.uint64:  # identity: a cheap check on every generator made
            raise ValueError("this seed sequence only gives the 4 uint64 words PCG64 asks for")
        return self.state


def _words(n: int) -> list[int]:
    """32-bit words of a non-negative integer, least significant first (``[0]`` for 0)."""
    words = [n & _MASK32]
    while n > _MASK32:
        n >>= 32
        words.append(n & _MASK32)
    return words


@functools.lru_cache(maxsize=8)
def _seed_pool(seed: int) -> tuple[tuple[int, ...], int]:
    """SeedSequence's pool after the seed's words, and the hash constant then (same for every key)."""
    run = _words(seed)
    run += [0] * (_POOL - len(run))  # padded to the pool size when a spawn key follows
    const = _INIT_A

    def hashmix(value):
        nonlocal const
        value ^= const
        const = (const * _MULT_A) & _MASK32
        value = (value * const) & _MASK32
        return value ^ (value >> _XSHIFT)

    def mix(x, y):
        result = (_MIX_L * x - _MIX_R * y) & _MASK32
        return result ^ (result >> _XSHIFT)

    pool = [hashmix(word) for word in run[:_POOL]]
    for src in range(_POOL):
        for dst in range(_POOL):
            if src != dst:
                pool[dst] = mix(pool[dst], hashmix(pool[src]))
    for word in run[_POOL:]:
        for dst in range(_POOL):
            pool[dst] = mix(pool[dst], hashmix(word))
    return tuple(pool), const


def _pcg64_seeds(seed: int, key_words: np.ndarray) -> np.ndarray:
    """``SeedSequence(seed, spawn_key=k).generate_state(4, np.uint64)`` for each row ``k`` of ``key_words``.

    ``key_words`` has one uint32 word per key element (elements below 2**32), shape ``(n, k)``.
    The hash constants follow one another whatever the data, so they are computed first and
    each step works on all four pool words of all rows at once.
    """
    start, const = _seed_pool(seed)
    n, n_key = key_words.shape
    consts = [const]  # hash constant before each hashmix, then after the last
    for _ in range(n_key * _POOL):
        consts.append((consts[-1] * _MULT_A) & _MASK32)
    pool = np.empty((n, _POOL), np.uint32)
    pool[:] = start
    for j in range(n_key):  # each word of the key, mixed into every pool word in turn
        before = np.array(consts[j * _POOL:(j + 1) * _POOL], np.uint32)
        after = np.array(consts[j * _POOL + 1:(j + 1) * _POOL + 1], np.uint32)
        value = key_words[:, j, None] ^ before  # hashmix, for the four pool words
        value *= after
        value ^= value >> _XSHIFT
        pool *= np.uint32(_MIX_L)  # mix(pool, value)
        value *= np.uint32(_MIX_R)
        pool -= value
        pool ^= pool >> _XSHIFT
    consts = [_INIT_B]
    for _ in range(2 * _POOL):
        consts.append((consts[-1] * _MULT_B) & _MASK32)
    # generate_state: 8 words from the pool (cycled), read as 4 little-endian uint64
    out = np.tile(pool, 2)
    out ^= np.array(consts[:-1], np.uint32)
    out *= np.array(consts[1:], np.uint32)
    out ^= out >> _XSHIFT
    return out.astype("<u4").view("<u8").astype(np.uint64)


@functools.lru_cache(maxsize=8)
def _seed_supported(seed: int) -> bool:
    """Whether the array path gives ``SeedSequence``'s state for this seed (checked on one key)."""
    if seed < 0:
        return False
    key = (1, 0, CANDIDATES)
    expected = np.random.SeedSequence(seed, spawn_key=key).generate_state(4, np.uint64)
    return bool(np.array_equal(_pcg64_seeds(seed, np.array([key], np.uint32))[0], expected))
