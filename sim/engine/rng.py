"""Counter-based random numbers keyed on (seed, patient, stream, occurrence).

A patient's latent draw for a given transition and occurrence is a pure function of the run's
seed and of those integers, so it is the same in every strategy (common random numbers) and in every
way of splitting patients into chunks or worker threads.

The generator is Philox4x64-10 (Salmon, Moraes, Dror & Shaw 2011, "Parallel random numbers: as easy
as 1, 2, 3", Proc. SC'11), written here with numpy array arithmetic so that one call evaluates the
bijection for a whole vector of counters. Its output is checked bit for bit against
``numpy.random.Philox`` in ``tests/sim/test_rng.py``.

Stream layout (version :data:`STREAM_LAYOUT`, recorded in run metadata). A request for ``k`` draws
per patient in ``(stream, occurrence)`` reads the words of the counters::

    (c, stream, occurrence, 0),  c = 0, 1, 2, ...

as one sequence, four 64-bit words per counter: draw ``j`` of patient ``p`` is word
``w = p k + j``, that is word ``w mod 4`` of counter ``c = floor(w / 4)``. Every word of every
Philox call is used, and the draws of consecutive patients are consecutive in memory, so a dense
range of patients is one call to numpy's C Philox and a reshape, with no gather. The engine draws
through the compiled :mod:`sim.engine.kernels` (``visit_units``, ``range_units``), which give the
same bits as :func:`uniforms` (tested); this module is their numpy reference and the public API.

stream 0 holds patient attributes (occurrence 0: entry age and sex, ``k = 2``; occurrence 1: the
initial state of a mix, ``k = 1``); stream 1 + s holds the latent times for the exits of state
``s`` (``k`` = the state's number of exits); occurrence is the number of earlier entries of the
patient into that state.

Layout 1 (before issue 16) used one counter ``(patient, stream, occurrence, block)`` per patient
and block of four draws, so that a state with two exits used half of each call's words.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["philox4x64", "key_from_seed", "uniforms", "exponentials", "ATTRIBUTE_STREAM", "STREAM_LAYOUT"]

ATTRIBUTE_STREAM = 0
#: Version of the layout of draws on Philox counters (see the module docstring); recorded in run
#: metadata because it fixes the exact draws of a seed.
STREAM_LAYOUT = 2

# Philox4x64 round multipliers and Weyl key increments (Salmon et al. 2011, Table 2 / Random123).
_M0 = np.uint64(0xD2E7470EE14C6C93)
_M1 = np.uint64(0xCA5A826395121157)
_W0_INT = 0x9E3779B97F4A7C15
_W1_INT = 0xBB67AE8584CAA73B
_MASK64 = (1 << 64) - 1
_LO32 = np.uint64(0xFFFFFFFF)
_S32 = np.uint64(32)
_ROUNDS = 10


_M0_INT, _M1_INT = int(_M0), int(_M1)


def _mulhilo_into(a_lo: NDArray[np.uint64], a_hi: NDArray[np.uint64], a: NDArray[np.uint64],
                  b: NDArray[np.uint64], hi: NDArray[np.uint64], lo: NDArray[np.uint64],
                  t1: NDArray[np.uint64], t2: NDArray[np.uint64], t3: NDArray[np.uint64]) -> None:
    """High and low 64-bit words of the 128-bit products ``a * b`` (``a``: constants broadcast against
    ``b``, given with their 32-bit halves), by schoolbook multiplication on 32-bit halves, written
    into ``hi`` and ``lo`` with the scratch arrays ``t1``-``t3`` instead of fresh temporaries."""
    np.bitwise_and(b, _LO32, out=t1)  # b_lo
    np.right_shift(b, _S32, out=t2)  # b_hi
    np.multiply(a_hi, t1, out=t3)  # hi_lo
    np.multiply(a_lo, t1, out=t1)  # lo_lo
    np.right_shift(t1, _S32, out=t1)  # lo_lo >> 32
    np.multiply(a_hi, t2, out=hi)  # a_hi * b_hi
    np.multiply(a_lo, t2, out=t2)  # lo_hi
    np.add(t1, t2, out=t1)
    np.bitwise_and(t3, _LO32, out=t2)
    np.add(t1, t2, out=t1)  # cross; cannot overflow: (2^32-1)^2 + 2 (2^32-1) = 2^64 - 1
    np.right_shift(t3, _S32, out=t3)
    np.add(hi, t3, out=hi)
    np.right_shift(t1, _S32, out=t1)
    np.add(hi, t1, out=hi)
    np.multiply(a, b, out=lo)  # wraps modulo 2^64


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

    Notes
    -----
    A round maps (c0, c1, c2, c3) to (hi(M1 c2) ^ c1 ^ k0, lo(M1 c2), hi(M0 c0) ^ c3 ^ k1,
    lo(M0 c0)). The words are kept as two stacked pairs, A = (c0, c2) and B = (c1, c3), so that
    both multiplications of a round run as one (A times (M0, M1)); the round is then
    A' = swap(hi) ^ B ^ (k0, k1), B' = swap(lo). All updates are in place in preallocated
    buffers. This halves the number of numpy calls (which dominate the cost for a few thousand
    counters) and saves about a fifth of the time on large vectors.
    """
    words = np.broadcast_arrays(*(np.asarray(c, dtype=np.uint64) for c in counter))
    shape = words[0].shape
    size = words[0].size
    a = np.empty((2, size), dtype=np.uint64)
    b = np.empty((2, size), dtype=np.uint64)
    a[0], a[1] = words[0].reshape(-1), words[2].reshape(-1)
    b[0], b[1] = words[1].reshape(-1), words[3].reshape(-1)
    m = np.array([[_M0_INT], [_M1_INT]], dtype=np.uint64)
    m_lo, m_hi = m & _LO32, m >> _S32
    hi, lo, t1, t2, t3 = (np.empty((2, size), dtype=np.uint64) for _ in range(5))
    k = np.empty((2, 1), dtype=np.uint64)
    k0, k1 = int(key[0]), int(key[1])
    for _ in range(_ROUNDS):
        _mulhilo_into(m_lo, m_hi, m, a, hi, lo, t1, t2, t3)  # rows: M0 c0, M1 c2
        k[0, 0], k[1, 0] = k0, k1
        np.bitwise_xor(hi[::-1], b, out=a)  # (hi(M1 c2) ^ c1, hi(M0 c0) ^ c3)
        np.bitwise_xor(a, k, out=a)
        b, lo = lo[::-1], b  # (lo(M1 c2), lo(M0 c0)); the old B becomes the next lo buffer
        if not lo.flags.c_contiguous:
            lo = lo[::-1]
        # Key schedule in Python integers modulo 2^64 (numpy scalars would warn on wrap-around).
        k0 = (k0 + _W0_INT) & _MASK64
        k1 = (k1 + _W1_INT) & _MASK64
    return tuple(w.reshape(shape) for w in (a[0], b[0], a[1], b[1]))


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


def _unit_into(words: NDArray[np.uint64], out: NDArray[np.float64]) -> None:
    """:func:`_to_unit` of ``words`` written into ``out``, overwriting ``words`` (scratch) instead of
    allocating temporaries. Same bits as ``out[...] = _to_unit(words)``."""
    np.right_shift(words, np.uint64(12), out=words)
    np.bitwise_or(words, np.uint64(0x3FF0000000000000), out=words)
    np.subtract(2.0, words.view(np.float64), out=out)


def _philox_state(key: NDArray[np.uint64], first: int, stream: int, occurrence: int, block: int) -> dict:
    """State of ``numpy.random.Philox`` whose next block is the counter (first, stream, occurrence,
    block): numpy steps its 256-bit counter by one before each block, so it starts one below
    (with borrow)."""
    value = (first + (stream << 64) + (occurrence << 128) + (block << 192) - 1) % (1 << 256)
    counter = np.array([(value >> (64 * i)) & _MASK64 for i in range(4)], dtype=np.uint64)
    return {"bit_generator": "Philox", "state": {"counter": counter, "key": key},
            "buffer": np.zeros(4, dtype=np.uint64), "buffer_pos": 4, "has_uint32": 0, "uinteger": 0}


class _BulkWords:
    """numpy's C Philox under one key, re-positioned for each bulk request (setting the state is
    much cheaper than building a generator; that matters for small chunks). Not thread-safe: one
    per chunk of work."""

    def __init__(self, key: tuple[int, int]) -> None:
        self.pair = (int(key[0]), int(key[1]))
        self.key = np.array(key, dtype=np.uint64)
        self.bitgen = np.random.Philox(counter=np.zeros(4, dtype=np.uint64), key=self.key)

    def __call__(self, first: int, count: int, stream: int, occurrence: int, block: int) -> NDArray[np.uint64]:
        """Words for the consecutive counters (first + i, stream, occurrence, block), i < count,
        as an array (count, 4)."""
        self.bitgen.state = _philox_state(self.key, first, stream, occurrence, block)
        return self.bitgen.random_raw(4 * count).reshape(count, 4)


def _bulk_words(key: tuple[int, int], first: int, count: int, stream: int, occurrence: int,
                block: int) -> NDArray[np.uint64]:
    """Philox words for the consecutive counters (first + i, stream, occurrence, block), i < count,
    as an array (count, 4), from numpy's C implementation (``numpy.random.Philox``)."""
    return _BulkWords(key)(first, count, stream, occurrence, block)


def _dense(lo: int, hi: int, size: int, k: int) -> bool:
    """Whether to draw the words of the whole id range ``lo..hi`` in bulk rather than run
    :func:`philox4x64` on the counters of the ``size`` ids alone. Measured costs (numpy 2.4, this
    project's VM): the C generator ~3.6 ns per word of the range; the vectorised bijection ~65 ns
    per counter plus ~110 us of fixed cost (some 170 numpy calls)."""
    return (hi - lo + 1) * k <= 18 * size * _span(k) + 30_000


def _span(k: int) -> int:
    """Most counters that the ``k`` words of one patient touch: they start at word ``p k mod 4``,
    a multiple of gcd(k, 4), so at offset 4 - gcd(k, 4) at the latest."""
    return (4 - math.gcd(k, 4) + k + 3) // 4


def _bulk_range(bulk: _BulkWords, lo: int, count: int, stream: int, occurrence: int, k: int) -> NDArray[np.uint64]:
    """Words of patients ``lo .. lo + count - 1`` (``k`` each) as a C-contiguous ``(count, k)`` view of
    the C Philox's output: words ``lo k .. (lo + count) k - 1`` of the sequence of (stream, occurrence)."""
    w0 = lo * k
    c0 = w0 >> 2
    c1 = (w0 + count * k + 3) >> 2
    raw = bulk(c0, c1 - c0, int(stream), int(occurrence), 0).reshape(-1)
    off = w0 - 4 * c0
    return raw[off:off + count * k].reshape(count, k)


def _sparse_words(key: tuple[int, int], patient: NDArray[np.int64], stream: int, occurrence: int,
                  k: int) -> NDArray[np.uint64]:
    """Words ``(len(patient), k)`` of arbitrary ids from :func:`philox4x64` on just the counters they
    touch (a fresh C-contiguous array)."""
    w0 = patient.astype(np.uint64) * np.uint64(k)
    ncols = _span(k)
    counters = (w0 >> np.uint64(2))[:, None] + np.arange(ncols, dtype=np.uint64)
    words = philox4x64((counters.reshape(-1), stream, occurrence, 0), key)
    stacked = np.stack(words, axis=-1).reshape(patient.size, 4 * ncols)
    cols = (w0 & np.uint64(3)).astype(np.int64)[:, None] + np.arange(k)
    return np.ascontiguousarray(np.take_along_axis(stacked, cols, axis=1))


def _words_of(key: tuple[int, int], bulk: _BulkWords | None, patient: NDArray[np.int64], lo: int, hi: int,
              contiguous: bool, stream: int, occurrence: int, k: int) -> NDArray[np.uint64]:
    """Words ``(len(patient), k)`` of the given ids (C-contiguous, writable, not shared), given their
    smallest and largest id and whether they are exactly ``lo, lo + 1, ..., hi`` in order."""
    m = patient.size
    if not _dense(lo, hi, m, k):
        return _sparse_words(key, patient, stream, occurrence, k)
    block = _bulk_range(bulk if bulk is not None else _BulkWords(key), lo, hi - lo + 1, stream, occurrence, k)
    return block if contiguous else block.take(patient - lo, axis=0)


def _check_ids(patient: NDArray[np.int64], k: int) -> None:
    if patient.size and (int(patient.min()) < 0 or (int(patient.max()) + 1) * k > 2**63):
        raise ValueError(f"patient ids must be >= 0 and below 2^63 / {k}")


def uniforms(key: tuple[int, int], patient: ArrayLike, stream: int, occurrence: int,
             n: int) -> NDArray[np.float64]:
    """Uniforms on (0, 1] for each patient: array of shape ``(len(patient), n)``.

    Entry ``(i, j)`` comes from word ``w = patient[i] n + j`` of the sequence of
    ``(stream, occurrence)`` (layout :data:`STREAM_LAYOUT`, module docstring), mapped by
    u = 1 - floor(w / 2^12) / 2^52. When the patients are dense in their id range the words come in
    bulk from numpy's C Philox over that range (fast); otherwise from :func:`philox4x64` on just
    the counters they touch. Both give the same bits.
    """
    patient = np.asarray(patient, dtype=np.int64).reshape(-1)
    n = int(n)
    if patient.size == 0 or n == 0:
        return np.empty((patient.size, n), dtype=np.float64)
    _check_ids(patient, n)
    lo, hi = int(patient.min()), int(patient.max())
    contiguous = (hi - lo + 1 == patient.size and int(patient[0]) == lo
                  and (patient.size < 3 or bool(np.all(np.diff(patient) == 1))))
    words = _words_of(key, None, patient, lo, hi, contiguous, stream, occurrence, n)
    out = words.view(np.float64)
    _unit_into(words, out)
    return out


def exponentials(key: tuple[int, int], patient: ArrayLike, stream: int,
                 occurrence: int, n: int) -> NDArray[np.float64]:
    """Standard exponential draws E = -ln U, U from :func:`uniforms`; E in [0, 36.05]."""
    out = uniforms(key, patient, stream, occurrence, n)
    np.log(out, out=out)
    return np.negative(out, out=out)
