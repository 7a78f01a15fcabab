"""Seeded streams: the bulk-seeded generators are numpy's own, number for number.

reference: numpy.random.SeedSequence and numpy.random.PCG64 (the generators ``stream`` builds
one key at a time); ``streams`` must hand out generators in the same state.
"""

from __future__ import annotations

import pickle

import numpy as np
import pytest

from fieldplan.rng import key_words, stream, streams

NAMES = [f"B{i:04d}" for i in range(300)] + ["", "Pinot noir", "zone 3 / north", "é"]


@pytest.mark.parametrize("seed", [0, 1, 7, 2**31, 2**32 - 1, 2**32, 2**40 + 5, 2**64 - 1, 2**64 + 3, 2**80])
def test_streams_draw_what_stream_draws(seed):
    bulk = streams(seed, ("design",), NAMES)
    for name, rng in zip(NAMES, bulk, strict=True):
        ref = stream(seed, "design", name)
        assert rng.bit_generator.state == ref.bit_generator.state
        assert rng.integers(0, 2**62, 4).tolist() == ref.integers(0, 2**62, 4).tolist()
        assert rng.random(3).tolist() == ref.random(3).tolist()


@pytest.mark.parametrize("prefix", [(), ("grid-start",), ("a", "b", "c")])
def test_streams_take_any_prefix(prefix):
    got = [g.random() for g in streams(3, prefix, NAMES[:40])]
    assert got == [stream(3, *prefix, name).random() for name in NAMES[:40]]
    assert streams(3, prefix, []) == []


def test_bulk_seed_sequence_gives_numpy_s_state_words():
    # reference: numpy.random.SeedSequence.generate_state and .spawn on the same entropy
    seq = streams(11, ("cores",), ["B7"])[0].bit_generator.seed_seq
    ref = np.random.SeedSequence([11, 0, *key_words("cores"), *key_words("B7")])
    for n in (1, 4, 9):
        assert seq.generate_state(n).tolist() == ref.generate_state(n).tolist()
        assert seq.generate_state(n, np.uint64).tolist() == ref.generate_state(n, np.uint64).tolist()
    assert [s.generate_state(2).tolist() for s in seq.spawn(2)] == [
        s.generate_state(2).tolist() for s in ref.spawn(2)
    ]
    with pytest.raises(ValueError):
        seq.generate_state(2, np.float64)


def test_bulk_generators_pickle_and_refuse_negative_seeds():
    rng = streams(5, ("design",), ["B01"])[0]
    copy = pickle.loads(pickle.dumps(rng))
    assert copy.random(3).tolist() == rng.random(3).tolist()
    with pytest.raises(ValueError):
        streams(-1, ("design",), ["B01"])
