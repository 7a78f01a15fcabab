"""Sample ids: unambiguous alphabet, and a check character that catches every
single substitution and every adjacent transposition (checked exhaustively)."""

from __future__ import annotations

import numpy as np
import pytest

from fieldplan.errors import OptionError
from fieldplan.samples.ids import (
    ALPHABET,
    RADIX,
    check_char,
    is_valid,
    make_sample_ids,
    normalise_id,
    plan_code,
)


def test_alphabet_avoids_confusable_characters_and_is_prime():
    # common practice, no source: 0/O and 1/I/L are confused in handwriting.
    assert not set("01OIL") & set(ALPHABET)
    assert len(set(ALPHABET)) == len(ALPHABET) == 31
    # The error-detection argument needs a prime modulus (ISO/IEC 7064 pure systems).
    assert all(31 % d for d in range(2, 31))
    # 3 is a primitive root mod 31: the weights 3**i repeat only after 30 positions.
    assert len({pow(RADIX, i, 31) for i in range(30)}) == 30


@pytest.mark.parametrize(
    ("payload", "check"),
    [
        # reference: ORCID "Structure of the ORCID identifier" (ISO/IEC 7064 MOD 11-2),
        # examples 0000-0002-1825-0097 and 0000-0002-1694-233X (from memory).
        ("000000021825009", "7"),
        ("000000021694233", "X"),
    ],
)
def test_generic_check_matches_iso_7064_mod_11_2(payload, check):
    assert check_char(payload, alphabet="0123456789X", radix=2) == check
    assert is_valid(payload + check, alphabet="0123456789X", radix=2)


def test_generated_ids_are_unique_valid_and_stable():
    code = plan_code("sha", 7)
    assert code == plan_code("sha", 7) and code != plan_code("sha", 8)
    ids = make_sample_ids(5000, code=code)
    assert len(set(ids)) == 5000
    assert all(is_valid(i) for i in ids)
    assert all(len(i) == 9 and i[4] == "-" for i in ids)
    assert all(set(i.replace("-", "")) <= set(ALPHABET) for i in ids)
    # More ids than three serial characters hold widen the serial.
    big = make_sample_ids(31**3 + 1, code=code)
    assert len(set(big)) == len(big) and len(big[-1]) == 10 and is_valid(big[-1])
    assert len(make_sample_ids(0, code=code)) == 0


def test_vectorised_check_agrees_with_scalar_check():
    ids = make_sample_ids(300, code="K7MQ")
    for sample_id in ids[::7]:
        text = normalise_id(sample_id)
        assert check_char(text[:-1]) == text[-1]


def test_hyphens_and_case_are_ignored():
    sample_id = make_sample_ids(3, code="K7MQ")[2]
    assert is_valid(sample_id.lower()) and is_valid(sample_id.replace("-", " "))
    assert not is_valid("") and not is_valid("K7MQ-0001")  # 0 is not in the alphabet


def test_every_single_substitution_and_adjacent_transposition_is_detected():
    """Exhaustive over 600 ids (400 generated, 200 random): each position replaced by each of the other 30
    characters, and each pair of unequal neighbours swapped."""
    rng = np.random.default_rng(11)
    codes = ["".join(rng.choice(list(ALPHABET), 4)) for _ in range(8)]
    ids = np.concatenate([make_sample_ids(50, code=c) for c in codes])
    payloads = ["".join(rng.choice(list(ALPHABET), 7)) for _ in range(200)]
    ids = np.concatenate([ids, [p + check_char(p) for p in payloads]])
    substitutions = transpositions = jumps = 0
    for sample_id in ids:
        text = normalise_id(sample_id)
        for i, ch in enumerate(text):
            for other in ALPHABET:
                if other != ch:
                    substitutions += 1
                    assert not is_valid(text[:i] + other + text[i + 1 :])
        for i in range(len(text) - 1):
            if text[i] != text[i + 1]:
                transpositions += 1
                assert not is_valid(text[:i] + text[i + 1] + text[i] + text[i + 2 :])
        for i in range(len(text) - 2):
            if text[i] != text[i + 2]:
                jumps += 1
                assert not is_valid(text[:i] + text[i + 2] + text[i + 1] + text[i] + text[i + 3 :])
    # 600 ids x 8 characters x 30 alternatives.
    assert substitutions == 600 * 8 * 30 == 144_000
    assert transpositions > 3_000 and jumps > 3_000
    print(f"checked {substitutions} substitutions, {transpositions} adjacent and {jumps} jump transpositions")


def test_bad_characters_are_refused():
    with pytest.raises(OptionError, match="not in the id alphabet"):
        check_char("AB0")
