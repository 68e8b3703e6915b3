"""Keyed row generators: the array path that makes many at once equals numpy's SeedSequence."""

from __future__ import annotations

import numpy as np
import pytest

from sweep import streams


def _state(generator):
    return generator.bit_generator.state["state"]


@pytest.mark.parametrize("seed", [0, 1, 314159, 2**32 - 1, 2**32, 2**64 + 5, 2**130 + 12345])
@pytest.mark.parametrize("stream", [streams.CANDIDATES, streams.EXCESS, streams.STAR_PROPERTIES, streams.DESIGN])
def test_many_generators_at_once_equal_one_seed_sequence_each(seed, stream):
    # Reference: numpy.random.SeedSequence(seed, spawn_key=...) feeding PCG64 (numpy's own,
    # one object per row), which row_generator uses.
    base_index = np.array([0, 1, 2, 511, 2**31, 2**32 - 1], np.int64)
    source = np.array([0, 1, 0, 1, 1, 0], np.int8)
    made = streams.row_generators(seed, base_index, source, stream)
    for generator, b, s in zip(made, base_index, source):
        expected = np.random.Generator(np.random.PCG64(
            np.random.SeedSequence(seed, spawn_key=(int(b), int(s), stream))))
        assert _state(generator) == _state(expected)
        np.testing.assert_array_equal(generator.random(5), expected.random(5))


def test_keys_beyond_32_bits_take_numpys_own_path():
    made = streams.row_generators(7, np.array([2**32, 3]), np.array([0, 1]), streams.CANDIDATES)
    assert [_state(g) for g in made] == [_state(streams.row_generator(7, 2**32, 0, streams.CANDIDATES)),
                                         _state(streams.row_generator(7, 3, 1, streams.CANDIDATES))]


def test_no_rows_no_generators():
    assert streams.row_generators(1, np.zeros(0, np.int64), np.zeros(0, np.int8), streams.CANDIDATES) == []
