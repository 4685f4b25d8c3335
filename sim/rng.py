"""Counter-based random numbers keyed on (seed, patient, stream, occurrence).

A patient's latent draw for a given transition and occurrence is a pure function of the run's
seed and of those integers, so it is the same in every strategy (common random numbers) and in every
way of splitting patients into chunks or worker threads.

The generator is Philox4x64-10 (Salmon, Moraes, Dror & Shaw 2011, "Parallel random numbers: as easy
as 1, 2, 3", Proc. SC'11), written here with numpy array arithmetic so that one call evaluates the
bijection for a whole vector of counters. Its output is checked bit for bit against
``numpy.random.Philox`` in ``tests/sim/test_rng.py``.

Counter layout used by the engine (four 64-bit words)::

    (patient id, stream, occurrence, block)

stream 0 holds patient attributes (entry age, sex); stream 1 + s holds the latent times for the exits
of state ``s``; occurrence is the number of earlier entries of the patient into that state; block
``b`` holds exits ``4 b .. 4 b + 3`` of the state (one Philox call gives four 64-bit words).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["philox4x64", "key_from_seed", "uniforms", "exponentials", "ATTRIBUTE_STREAM"]

ATTRIBUTE_STREAM = 0

# Philox4x64 round multipliers and Weyl key increments (Salmon et al. 2011, Table 2 / Random123).
_M0 = np.uint64(0xD2E7470EE14C6C93)
_M1 = np.uint64(0xCA5A826395121157)
_W0_INT = 0x9E3779B97F4A7C15
_W1_INT = 0xBB67AE8584CAA73B
_MASK64 = (1 << 64) - 1
_LO32 = np.uint64(0xFFFFFFFF)
_S32 = np.uint64(32)
_ROUNDS = 10


def _mulhilo(a: np.uint64, b: NDArray[np.uint64]) -> tuple[NDArray[np.uint64], NDArray[np.uint64]]:
    """High and low 64-bit words of the 128-bit product ``a * b`` (schoolbook on 32-bit halves)."""
    a_lo, a_hi = a & _LO32, a >> _S32
    b_lo, b_hi = b & _LO32, b >> _S32
    lo_lo = a_lo * b_lo
    hi_lo = a_hi * b_lo
    lo_hi = a_lo * b_hi
    # Cannot overflow: (2^32-1)^2 + 2 (2^32-1) = 2^64 - 1.
    cross = (lo_lo >> _S32) + (hi_lo & _LO32) + lo_hi
    hi = a_hi * b_hi + (hi_lo >> _S32) + (cross >> _S32)
    lo = a * b  # wraps modulo 2^64
    return hi, lo


def philox4x64(counter: tuple[ArrayLike, ArrayLike, ArrayLike, ArrayLike],
               key: tuple[int, int]) -> tuple[NDArray[np.uint64], ...]:
    """Philox4x64-10 bijection of a vector of 256-bit counters under a 128-bit key.

    Parameters
    ----------
    counter : four broadcastable arrays of unsigned 64-bit words ``(c0, c1, c2, c3)``.
    key : two unsigned 64-bit words.

    Returns
    -------
    Four ``uint64`` arrays: the random words for each counter.
    """
    c0, c1, c2, c3 = np.broadcast_arrays(*(np.asarray(c, dtype=np.uint64) for c in counter))
    c0, c1, c2, c3 = (c.copy() for c in (c0, c1, c2, c3))
    k0, k1 = int(key[0]), int(key[1])
    for _ in range(_ROUNDS):
        hi0, lo0 = _mulhilo(_M0, c0)
        hi1, lo1 = _mulhilo(_M1, c2)
        c0, c1, c2, c3 = hi1 ^ c1 ^ np.uint64(k0), lo1, hi0 ^ c3 ^ np.uint64(k1), lo0
        # Key schedule in Python integers modulo 2^64 (numpy scalars would warn on wrap-around).
        k0 = (k0 + _W0_INT) & _MASK64
        k1 = (k1 + _W1_INT) & _MASK64
    return c0, c1, c2, c3


def key_from_seed(seed: int) -> tuple[int, int]:
    """Derive the 128-bit Philox key from a user seed through ``numpy.random.SeedSequence``."""
    if not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
    words = np.random.SeedSequence(int(seed)).generate_state(2, dtype=np.uint64)
    return int(words[0]), int(words[1])


def _to_unit(words: NDArray[np.uint64]) -> NDArray[np.float64]:
    """Map 64-bit words to uniforms on (0, 1]: u = 1 - floor(w / 2^12) / 2^52 (exact in float64).

    The top 52 bits become the mantissa of a float in [1, 2) (bit pattern trick, no integer-to-float
    conversion); 2 - f is exact by Sterbenz's lemma.
    """
    f = ((words >> np.uint64(12)) | np.uint64(0x3FF0000000000000)).view(np.float64)
    return 2.0 - f


def _bulk_words(key: tuple[int, int], first: int, count: int, stream: int, occurrence: int,
                block: int) -> NDArray[np.uint64]:
    """Philox words for the consecutive counters (first + i, stream, occurrence, block), i < count,
    as an array (count, 4), from numpy's C implementation (``numpy.random.Philox``), which steps the
    256-bit counter by one before each block; so start it one below ``first`` (with borrow)."""
    value = (first + (stream << 64) + (occurrence << 128) + (block << 192) - 1) % (1 << 256)
    counter = np.array([(value >> (64 * i)) & _MASK64 for i in range(4)], dtype=np.uint64)
    bitgen = np.random.Philox(counter=counter, key=np.array(key, dtype=np.uint64))
    return bitgen.random_raw(4 * count).reshape(count, 4)


def uniforms(key: tuple[int, int], patient: ArrayLike, stream: int, occurrence: int,
             n: int) -> NDArray[np.float64]:
    """Uniforms on (0, 1] for each patient: array of shape ``(len(patient), n)``.

    Column ``j`` comes from block ``j // 4``, word ``j % 4`` of the counter
    ``(patient, stream, occurrence, block)``. When the patients are dense in their id range the
    words come in bulk from numpy's C Philox over that range (fast); otherwise from
    :func:`philox4x64` on just those counters. Both give the same bits.
    """
    patient = np.asarray(patient, dtype=np.int64)
    out = np.empty((patient.shape[0], n), dtype=np.float64)
    if patient.size == 0:
        return out
    lo, hi = int(patient.min()), int(patient.max())
    dense = (hi - lo + 1) <= 8 * patient.size + 4096
    for block in range((n + 3) // 4):
        width = min(4, n - 4 * block)
        if dense:
            words = _bulk_words(key, lo, hi - lo + 1, int(stream), int(occurrence), block)[patient - lo, :width]
            out[:, 4 * block:4 * block + width] = _to_unit(words)
        else:
            words = philox4x64((patient.astype(np.uint64), stream, occurrence, block), key)
            for w in range(width):
                out[:, 4 * block + w] = _to_unit(words[w])
    return out


def exponentials(key: tuple[int, int], patient: ArrayLike, stream: int,
                 occurrence: int, n: int) -> NDArray[np.float64]:
    """Standard exponential draws E = -ln U, U from :func:`uniforms`; E in [0, 36.05]."""
    return -np.log(uniforms(key, patient, stream, occurrence, n))
