"""Short sample ids that survive handwriting, phone calls and lab re-typing.

The alphabet leaves out ``0 O 1 I L`` so no two characters are easily confused,
which leaves 31 characters: a prime. Each id ends in a check character computed
like the pure check-character systems of ISO/IEC 7064 (e.g. MOD 11-2 as used by
ORCID and ISNI), here with modulus 31 and radix 3::

    sum(a_i * 3**(k - i)) + c  ==  1   (mod 31)

where ``a_i`` are the values of the ``k`` payload characters and ``c`` that of the
check character (weight ``3**0 = 1``). Because 31 is prime and every weight is a
non-zero power of 3:

* a single substitution ``a -> b`` at weight ``w`` changes the sum by
  ``(b - a) w``, never 0 mod 31, so it is always detected;
* swapping two adjacent characters changes it by ``(a - b)(w_j - w_{j+1}) =
  (a - b) w_{j+1} (3 - 1)``, never 0 mod 31 either, so every adjacent
  transposition is detected (and, as ``3**2 != 1 mod 31``, every jump
  transposition ``abc -> cba`` too).

Since the modulus equals the alphabet size, the check character is always one of
the 31 characters (MOD 11-2 needs the extra symbol ``X`` for value 10).

An id reads ``PPPP-SSSC``: a four-character plan code, a serial and the check
character. Hyphens and case are ignored when an id is checked.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

from fieldplan.errors import OptionError

__all__ = [
    "ALPHABET",
    "RADIX",
    "check_char",
    "is_valid",
    "normalise_id",
    "plan_code",
    "make_sample_ids",
    "sample_id_bytes",
    "round_sample_ids",
]

#: 31 characters (prime): digits 2-9 and A-Z without I, L, O.
ALPHABET = "23456789ABCDEFGHJKMNPQRSTUVWXYZ"
#: Radix of the weights; 3 is a primitive root mod 31, so the weights 3**i do not
#: repeat within 30 positions.
RADIX = 3
PLAN_CODE_LENGTH = 4
SERIAL_LENGTH = 3


def _values(text: str, alphabet: str) -> list[int]:
    index = {ch: i for i, ch in enumerate(alphabet)}
    try:
        return [index[ch] for ch in text]
    except KeyError as err:
        raise OptionError(
            f"{text!r}: character {err.args[0]!r} is not in the id alphabet {alphabet!r}"
        ) from None


def check_char(payload: str, *, alphabet: str = ALPHABET, radix: int = RADIX) -> str:
    """Check character for ``payload`` (ISO/IEC 7064 pure-system construction).

    Parameters
    ----------
    payload : str
        Characters of ``alphabet``.
    alphabet : str, keyword-only
        The characters in value order; its length is the (prime) modulus.
    radix : int, keyword-only
        Weight base.

    Examples
    --------
    >>> check_char("000000021825009", alphabet="0123456789X", radix=2)
    '7'
    """
    p = len(alphabet)
    total = 0
    for value in _values(payload, alphabet):
        total = (total + value) * radix % p
    return alphabet[(1 - total) % p]


def normalise_id(sample_id: str) -> str:
    """Upper-case and drop hyphens and spaces."""
    return "".join(str(sample_id).split()).replace("-", "").upper()


def is_valid(sample_id: str, *, alphabet: str = ALPHABET, radix: int = RADIX) -> bool:
    """True when ``sample_id`` (hyphens, spaces and case ignored) has a correct check character."""
    text = normalise_id(sample_id) if alphabet == ALPHABET else str(sample_id)
    if len(text) < 2 or any(ch not in alphabet for ch in text):
        return False
    return check_char(text[:-1], alphabet=alphabet, radix=radix) == text[-1]


def plan_code(*parts, length: int = PLAN_CODE_LENGTH) -> str:
    """A short code naming a plan, derived from its inputs (stable across runs).

    Parameters
    ----------
    *parts
        JSON-serialisable values, e.g. the input file's SHA-256, the seed and the
        plan parameters.
    length : int, keyword-only
        Number of characters (31**4 = 923,521 codes for the default 4).
    """
    digest = hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).digest()
    number = int.from_bytes(digest[:8], "big")
    chars = []
    for _ in range(length):
        number, r = divmod(number, len(ALPHABET))
        chars.append(ALPHABET[r])
    return "".join(chars)


def make_sample_ids(n: int, *, code: str, serial_length: int | None = None) -> np.ndarray:
    """``n`` sample ids ``CODE-SSSC`` numbered in order, with check characters.

    Vectorised: serial digits and check characters are computed with numpy.

    Parameters
    ----------
    n : int
        Number of ids.
    code : str, keyword-only
        Plan code from :func:`plan_code`.
    serial_length : int, optional, keyword-only
        Digits of the serial; by default 3, more when ``n`` needs them.
    """
    return _as_text(sample_id_bytes(n, code=code, serial_length=serial_length))


def sample_id_bytes(n: int, *, code: str, serial_length: int | None = None) -> np.ndarray:
    """:func:`make_sample_ids` as one fixed-width ASCII byte string per id (``numpy.bytes_``).

    For building a text column without a Python string per id first.
    """
    p = len(ALPHABET)
    code_values = np.asarray(_values(code, ALPHABET), dtype=np.int64)
    if serial_length is None:
        serial_length = SERIAL_LENGTH
        while p**serial_length < n:
            serial_length += 1
    if p**serial_length < n:
        raise OptionError(f"{n} ids do not fit in {serial_length} serial characters")
    serial = np.arange(n, dtype=np.int64)
    digits = (serial[:, None] // p ** np.arange(serial_length - 1, -1, -1)) % p
    payload = np.hstack([np.broadcast_to(code_values, (n, len(code_values))), digits])
    return _encode_bytes(payload, len(code_values))


def _as_text(ids: np.ndarray) -> np.ndarray:
    """Python strings (an object array) of ASCII byte-string ids."""
    if not ids.size:
        return np.array([], dtype=object)
    return ids.astype(f"<U{ids.dtype.itemsize}").astype(object)


def _encode(payload: np.ndarray, head: int) -> np.ndarray:
    """Ids ``HEAD-TAIL`` + check character from an ``(n, k)`` array of character values."""
    return _as_text(_encode_bytes(payload, head))


def _encode_bytes(payload: np.ndarray, head: int) -> np.ndarray:
    """:func:`_encode` as fixed-width ASCII byte strings."""
    p = len(ALPHABET)
    n, k = payload.shape
    # Horner's rule unrolled: payload char i carries weight radix**(k - i).
    weights = np.array([pow(RADIX, k - i, p) for i in range(k)], dtype=np.int64)
    checks = (1 - payload @ weights) % p if n else np.zeros(0, dtype=np.int64)
    # One byte per character, the hyphen after the head: each row read as one string.
    letters = np.frombuffer(ALPHABET.encode("ascii"), dtype=np.uint8)
    out = np.empty((n, k + 2), dtype=np.uint8)
    out[:, :head] = letters[payload[:, :head]]
    out[:, head] = ord("-")
    out[:, head + 1 : k + 1] = letters[payload[:, head:]]
    out[:, k + 1] = letters[checks]
    return out.view(f"S{k + 2}").reshape(n)


def round_sample_ids(sample_ids, round_no: int) -> np.ndarray:
    """The ids of a later sampling round of the same points.

    Round 1 keeps the plan's ids. Round ``r`` swaps each id's plan code for one
    derived from it and ``r`` (see :func:`plan_code`) and keeps the serial, so
    weekly ripeness samples of one plan never share an id at the lab.

    Examples
    --------
    >>> round_sample_ids(["RZUT-222U"], 1)[0]
    'RZUT-222U'
    >>> is_valid(round_sample_ids(["RZUT-222U"], 2)[0])
    True
    """
    ids = np.asarray(sample_ids, dtype=object)
    if not isinstance(round_no, int | np.integer) or round_no < 1:
        raise OptionError(f"--round must be a whole number from 1 up, got {round_no!r}")
    if round_no == 1 or len(ids) == 0:
        return ids.copy()
    parts = np.char.partition(ids.astype(str), "-")
    codes, tails = parts[:, 0], parts[:, 2]
    if (parts[:, 1] != "-").any() or len(set(np.char.str_len(tails).tolist())) != 1:
        raise OptionError("sample ids are not all of the form CODE-SERIAL; re-run 'fieldplan plan'")
    index = np.full(128, -1, dtype=np.int64)
    index[[ord(ch) for ch in ALPHABET]] = np.arange(len(ALPHABET))
    unique, inverse = np.unique(codes, return_inverse=True)
    heads = np.array([_values(plan_code(c, int(round_no)), ALPHABET) for c in unique.tolist()])
    width = len(tails[0])
    # Code points of each fixed-width tail; its last character is the old check.
    points = np.frombuffer(tails.astype(f"<U{width}").tobytes(), dtype=np.uint32).reshape(-1, width)
    serial = np.where(points[:, :-1] < 128, index[np.minimum(points[:, :-1], 127)], -1)
    if (serial < 0).any():
        raise OptionError("sample ids hold characters outside the id alphabet; re-run 'fieldplan plan'")
    return _encode(np.hstack([heads[inverse], serial]), heads.shape[1])
