"""Compiled kernels of the engine's round loop (numba): keyed draws, the competing minimum and moves,
and the placement of a chunk's events.

What stays numpy's: every transcendental function (``log`` of the draws, the hazards' conditional
times), whose SIMD implementations in numpy are several times faster than the scalar libm calls a
compiled loop makes: called as numpy calls, or, inside :func:`state_round`, as numpy's own inner
loops, so the bits are exactly those of the numpy code.
What moved here is the integer and bookkeeping work that numpy can only do as many passes with
temporaries and gathers (issue 16):

- :func:`visit_units`: the Philox4x64-10 words (Salmon, Moraes, Dror & Shaw 2011, Proc. SC'11) of
  exactly the patients in a state, at each patient's own occurrence, turned into uniforms. numpy's
  C Philox can only produce consecutive counters, so a state holding a scattered tenth of a chunk's
  patients cost the words of the whole id range and a gather; here only the counters of the
  patients in the state are evaluated. The 64 x 64 -> 128-bit products are one machine multiply
  (:func:`_mulhilo`, an LLVM ``i128`` product). Same bits as :func:`sim.engine.rng.uniforms` (tested).
  :func:`range_units` does the same for a whole range of patients, each counter once (attributes).
- :func:`start_histories` and :func:`by_state`: a chunk's starting state, and each round's active
  patients grouped by state (a compaction and a counting sort).
- :func:`settle`: the earliest latent time per patient (the first exit wins ties), the move or the
  censoring at the horizon, and the event record, in one pass instead of some twenty array passes.
- :func:`state_round`: a state's whole round (words, ``-log u``, the exits' conditional times by
  :func:`sim.hazards.blocks.exit_block`, :func:`settle`) in blocks that stay in cache, and
  :func:`run_rounds`: every round of a chunk in one call, back to Python only for a state without
  block forms. ``log``/``exp``/``log1p``/``expm1`` there are numpy's own loops
  (:mod:`sim.hazards.numpy_loops`), so the bits are those of the numpy path.
- :func:`place_events`: a chunk's records written straight into the run's event columns in
  patient-then-time order (counting placement, gathering the records row by row).

All kernels release the GIL (``nogil``), so the worker threads of a run overlap them, and are cached
on disk after their first compilation (``cache=True``).
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

from ..hazards.numpy_loops import LOG, call
from ..hazards.blocks import exit_block

__all__ = ["range_units", "visit_units", "start_histories", "by_state", "settle", "state_round", "run_rounds",
           "place_events", "STATE_BLOCK", "DONE", "NEEDS_NUMPY", "NEEDS_ROOM", "NO_TIME", "TOO_MANY"]

#: SHA-256 (first 16 hex digits) of the files whose compiled code these kernels call
#: (``sim/hazards/blocks.py``, ``_fused.py``, ``numpy_loops.py``, in that order). numba's on-disk
#: cache checks only a function's own source file, so a change there must change this file too, or
#: stale compiled kernels would be loaded: tests/sim/test_hazard_blocks.py checks the value.
COMPILED_DEPENDENCIES = "037cf54653be6653"

#: Patients per block in :func:`state_round`: a block's draws, latent times and scratch stay in the
#: first-level cache.
STATE_BLOCK = 2048

#: What :func:`run_rounds` returns for: every history ended; a state the numpy code must handle; a
#: state needing room for more records; a NaN latent time; more rounds than allowed.
DONE, NEEDS_NUMPY, NEEDS_ROOM, NO_TIME, TOO_MANY = 0, 1, 2, 3, 4


@intrinsic
def _mulhilo(typingctx, a, b):  # noqa: ARG001 - numba's intrinsic signature
    """High and low 64 bits of the 128-bit product of two unsigned 64-bit words: one LLVM ``i128``
    product, which x86-64 computes with a single ``mulx``."""
    sig = types.UniTuple(types.uint64, 2)(types.uint64, types.uint64)

    def codegen(context, builder, signature, args):  # noqa: ARG001
        wide, word = ir.IntType(128), ir.IntType(64)
        product = builder.mul(builder.zext(args[0], wide), builder.zext(args[1], wide))
        hi = builder.trunc(builder.lshr(product, ir.Constant(wide, 64)), word)
        return context.make_tuple(builder, signature.return_type, (hi, builder.trunc(product, word)))

    return sig, codegen


@intrinsic
def _bits_as_float(typingctx, bits):  # noqa: ARG001
    """The float64 whose bit pattern is ``bits`` (a reinterpretation, no conversion)."""
    sig = types.float64(types.uint64)

    def codegen(context, builder, signature, args):  # noqa: ARG001
        return builder.bitcast(args[0], ir.DoubleType())

    return sig, codegen


@intrinsic
def _float_bits(typingctx, x):  # noqa: ARG001
    """The bit pattern of a float64 as an unsigned 64-bit word."""
    sig = types.uint64(types.float64)

    def codegen(context, builder, signature, args):  # noqa: ARG001
        return builder.bitcast(args[0], ir.IntType(64))

    return sig, codegen


# Philox4x64 round multipliers and Weyl key increments (Salmon et al. 2011, Table 2 / Random123).
_M0 = np.uint64(0xD2E7470EE14C6C93)
_M1 = np.uint64(0xCA5A826395121157)
_W0 = np.uint64(0x9E3779B97F4A7C15)
_W1 = np.uint64(0xBB67AE8584CAA73B)
_ONE_BITS = np.uint64(0x3FF0000000000000)  # bit pattern of 1.0


@njit(inline="always")
def _philox(c0, c1, c2, c3, k0, k1):
    """Philox4x64-10 of the counter (c0, c1, c2, c3) under the key (k0, k1): a round maps it to
    (hi(M1 c2) ^ c1 ^ k0, lo(M1 c2), hi(M0 c0) ^ c3 ^ k1, lo(M0 c0)), the key advancing by the Weyl
    constants; all arithmetic modulo 2^64."""
    for _ in range(10):
        hi0, lo0 = _mulhilo(_M0, c0)
        hi1, lo1 = _mulhilo(_M1, c2)
        c0, c1, c2, c3 = hi1 ^ c1 ^ k0, lo1, hi0 ^ c3 ^ k1, lo0
        k0 = k0 + _W0
        k1 = k1 + _W1
    return c0, c1, c2, c3


@njit(inline="always")
def _unit(word):
    """u = 1 - floor(w / 2^12) / 2^52 in (0, 1]: the top 52 bits as the mantissa of a float f in
    [1, 2), then 2 - f (exact by Sterbenz's lemma); as :func:`sim.engine.rng._to_unit`."""
    return 2.0 - _bits_as_float((word >> np.uint64(12)) | _ONE_BITS)


@njit(inline="always")
def _pick(x, a0, a1, a2, a3, b0, b1, b2, b3):
    """Word ``x`` (0-7) of two counters' words ``a`` then ``b``, by selects rather than branches."""
    v = a0
    v = a1 if x == 1 else v
    v = a2 if x == 2 else v
    v = a3 if x == 3 else v
    v = b0 if x == 4 else v
    v = b1 if x == 5 else v
    v = b2 if x == 6 else v
    return b3 if x == 7 else v


@njit(nogil=True, cache=True)
def range_units(first, count, k, stream, occurrence, k0, k1, out):  # pragma: no cover - compiled
    """Uniforms of the patients with ids ``first .. first + count - 1``, ``k`` each, at one
    ``occurrence`` into the C-contiguous ``out`` of shape ``(count, k)``: their words are the
    consecutive words ``first k .. (first + count) k - 1`` of the sequence, so each counter is
    evaluated once and its four words go to consecutive entries. Layout of :mod:`sim.engine.rng`."""
    flat = out.reshape(count * k)
    st, oc = np.uint64(stream), np.uint64(occurrence)
    lo = np.uint64(first) * np.uint64(k)
    hi = lo + np.uint64(count * k)
    c = lo >> np.uint64(2)
    while (c << np.uint64(2)) < hi:
        w0, w1, w2, w3 = _philox(c, st, oc, np.uint64(0), k0, k1)
        w = c << np.uint64(2)
        if w >= lo and w + np.uint64(4) <= hi:  # a whole counter inside the range
            d = w - lo
            flat[d] = _unit(w0)
            flat[d + np.uint64(1)] = _unit(w1)
            flat[d + np.uint64(2)] = _unit(w2)
            flat[d + np.uint64(3)] = _unit(w3)
        else:  # the first or last counter, partly outside
            for r in range(4):
                x = w + np.uint64(r)
                if x >= lo and x < hi:
                    flat[x - lo] = _unit(w0 if r == 0 else (w1 if r == 1 else (w2 if r == 2 else w3)))
        c += np.uint64(1)


@njit(nogil=True, cache=True)
def visit_units(sel, start, visits, k, stream, k0, k1, out):  # pragma: no cover - compiled
    """Uniforms for the patients ``sel`` (chunk-local indexes in increasing order, ids ``start + sel``) entering state
    ``stream - 1`` again: patient ``p``'s occurrence is ``visits[p]`` (then counted up by one) and its
    ``k`` uniforms go into ``out[i, :]`` for ``p = sel[i]``. Layout of :mod:`sim.engine.rng`: word
    ``w = id k + j`` of the patient is word ``w mod 4`` of the counter ``(w div 4, stream, o, 0)``.

    Each patient evaluates the counters of its own words, even when the patient before it used the
    same counter: a patient's work then depends on nothing carried from the previous one, so the
    processor overlaps the multiplications of consecutive patients; measured 25-45% faster per word
    than keeping the last counter's words (issue 16), although it repeats some counters. When
    ``sel`` is a whole range of patients at one occurrence (every patient of a chunk on entry) the
    words come from :func:`range_units`, each counter once."""
    m = sel.size
    if m > 0 and sel[m - 1] - sel[0] + 1 == m:  # sel increases: a whole range
        o = visits[np.uint64(sel[0])]
        same = True
        for i in range(m):
            same &= visits[np.uint64(sel[i])] == o
        if same:
            for i in range(m):
                visits[np.uint64(sel[i])] = o + 1
            range_units(start + sel[0], m, k, stream, o, k0, k1, out)
            return
    st, kk, top = np.uint64(stream), np.uint64(k), np.uint64(3)
    if k <= 4:  # straight-line code: the word loop below costs ~4 ns a patient in mispredicted branches
        for i in range(sel.size):
            p = np.uint64(sel[i])
            o = visits[p]
            visits[p] = o + 1
            oc = np.uint64(o)
            w = np.uint64(start + sel[i]) * kk
            r = w & top
            a0, a1, a2, a3 = _philox(w >> np.uint64(2), st, oc, np.uint64(0), k0, k1)
            if k == 4:  # r = 0
                out[i, 0] = _unit(a0)
                out[i, 1] = _unit(a1)
                out[i, 2] = _unit(a2)
                out[i, 3] = _unit(a3)
            elif k == 2:  # r = 0 or 2: one counter
                hi = r != np.uint64(0)
                out[i, 0] = _unit(a2 if hi else a0)
                out[i, 1] = _unit(a3 if hi else a1)
            elif k == 1:
                out[i, 0] = _unit(_pick(r, a0, a1, a2, a3, a0, a1, a2, a3))
            else:  # k = 3: words r .. r + 2, into the next counter when r >= 2
                b0, b1, b2, b3 = a0, a1, a2, a3
                if r >= np.uint64(2):
                    b0, b1, b2, b3 = _philox((w >> np.uint64(2)) + np.uint64(1), st, oc, np.uint64(0), k0, k1)
                for j in range(3):
                    out[i, j] = _unit(_pick(r + np.uint64(j), a0, a1, a2, a3, b0, b1, b2, b3))
        return
    for i in range(sel.size):
        p = np.uint64(sel[i])  # unsigned indexes: no code for negative-index wraparound
        o = visits[p]
        visits[p] = o + 1
        oc = np.uint64(o)
        w = np.uint64(start + sel[i]) * kk
        j = 0
        while j < k:
            w0, w1, w2, w3 = _philox(w >> np.uint64(2), st, oc, np.uint64(0), k0, k1)
            r = w & top
            while True:  # the words of this counter, from word r on
                out[i, j] = _unit(w0 if r == 0 else (w1 if r == 1 else (w2 if r == 2 else w3)))
                j += 1
                w += np.uint64(1)
                if j == k or r == top:
                    break
                r += np.uint64(1)


@njit(nogil=True, cache=True)
def start_histories(initial, limit, t, cur, active, absorbed, idx):  # pragma: no cover - compiled
    """Every patient of the chunk in its initial state at time 0, active if it has time to live
    (``limit > 0``), none absorbed; the active ones' indexes into ``idx`` (increasing). Returns their
    number. One pass instead of six array operations."""
    m = 0
    for i in range(t.size):
        cur[i] = initial[i]
        t[i] = 0.0
        on = limit[i] > 0.0
        active[i] = on
        absorbed[i] = False
        idx[m] = i
        m += on
    return m


@njit(nogil=True, cache=True)
def by_state(idx, m, active, cur, t, entry_age, bounds, order, ts, age):  # pragma: no cover - compiled
    """The patients of ``idx[:m]`` (increasing) still ``active``, grouped by current state; returns
    their number. They are kept in ``idx`` (compacted in place, order kept: the next round's
    candidates), and state ``s``'s are ``order[bounds[s]:bounds[s + 1]]`` in increasing order, with
    their clocks ``ts`` (time since entry, ``t[p]``) and attained ages ``age`` (``entry_age[p] +
    t[p]``) in the same rows: a compaction and a counting sort, with no branches that depend on the
    data. ``bounds`` has one more entry than there are states."""
    bounds[:] = 0
    kept = 0
    for i in range(m):
        p = idx[i]
        on = active[np.uint64(p)]  # unsigned indexes: no code for negative-index wraparound
        idx[kept] = p
        kept += on
        bounds[cur[np.uint64(p)] + 1] += on
    for s in range(bounds.size - 1):
        bounds[s + 1] += bounds[s]
    pos = bounds[:-1].copy()
    for i in range(kept):
        p = np.uint64(idx[i])
        s = cur[p]
        q = pos[s]
        pos[s] = q + 1
        order[q] = idx[i]
        x = t[p]
        ts[q] = x
        age[q] = entry_age[p] + x
    return kept


@njit(inline="always")
def _earlier(x, j, best, w, nan):
    """One exit's latent time ``x`` against the earliest so far (``best`` of exit ``w``): exit ``j``
    wins only if strictly earlier (the first on ties); ``nan`` records a NaN seen."""
    if x < best:
        return x, j, nan | (x != x)
    return best, w, nan | (x != x)


@njit(nogil=True, cache=True)
def settle(sel, k, l0, l1, l2, l3, more, later, state, rnd, limit, targets, exits, absorbing, t, cur, active,
           absorbed, rec_idx, rec_time, rec_from, rec_to, rec_exit, rec_round, count):  # pragma: no cover - compiled
    """Resolve one round of the patients ``sel`` in ``state``; returns the new number of records,
    or -1 at the first patient with a NaN latent time (nothing after it is resolved).

    The ``k`` exits' latent times are ``l0[i]``, ``l1[i]``, ``l2[i]``, ``l3[i]`` (the first ``k``; the
    others are ignored) and ``more[j - 4, i]`` for exits ``j >= 4``: the hazards' own result arrays,
    not copied into one block. For patient ``p = sel[i]`` the exit ``j`` with the smallest latent time wins
    (the first on ties, as ``numpy.argmin``); the move time is ``t[p] + latent[j, i]``, in rounds
    after the first (``later``) at least one step of the clock after ``t[p]`` (``nextafter``; move
    times stay strictly increasing). A move before ``limit[p]`` goes to ``targets[j]`` and is
    recorded (patient, time, from, to, exit code ``exits[j]``, round ``rnd``), and the patient stays
    ``active`` unless absorbed; otherwise it is censored at the limit. ``t >= +0``
    always, so the next float up is the bit pattern plus one.
    """
    n_rec = count
    for i in range(sel.size):
        p = np.uint64(sel[i])  # unsigned indexes: no code for negative-index wraparound
        best = l0[i]
        nan = best != best
        w = 0
        if k > 1:
            best, w, nan = _earlier(l1[i], 1, best, w, nan)
        if k > 2:
            best, w, nan = _earlier(l2[i], 2, best, w, nan)
        if k > 3:
            best, w, nan = _earlier(l3[i], 3, best, w, nan)
        for j in range(4, k):
            best, w, nan = _earlier(more[j - 4, i], j, best, w, nan)
        if nan:  # a hazard's internal error: the caller reports it
            return -1
        ts = t[p]
        tn = ts + best
        if later:
            up = _bits_as_float(_float_bits(ts) + np.uint64(1))
            if tn < up:
                tn = up
        lim = limit[p]
        if tn < lim:
            to = targets[w]
            t[p] = tn
            cur[p] = to
            done = absorbing[to]
            absorbed[p] = done
            active[p] = not done
            rec_idx[n_rec] = sel[i]
            rec_time[n_rec] = tn
            rec_from[n_rec] = state
            rec_to[n_rec] = to
            rec_exit[n_rec] = exits[w]
            rec_round[n_rec] = rnd
            n_rec += 1
        else:
            t[p] = lim
            active[p] = False
    return n_rec


@njit(nogil=True, cache=True)
def state_round(sel, start, visits, k, stream, k0, k1, fns, families, params, clocks, ts, age, draws, latent, tmp,
                later, state, rnd, limit, targets, exits, absorbing, t, cur, active, absorbed, rec_idx, rec_time,
                rec_from, rec_to, rec_exit, rec_round, count):  # pragma: no cover - compiled
    """One round of the patients ``sel`` in ``state`` whose ``k`` exits all have block forms
    (:func:`sim.hazards.blocks.block_form`: ``families[j]``, ``params[j, :]``; clock ``clocks[j]``:
    0 time in state, 1 time since entry ``ts``, 2 attained age ``age``), in one call: block by
    block of :data:`STATE_BLOCK` patients, their uniforms (:func:`visit_units`), ``e = -log u``
    into ``draws`` (shape (m, k)) and each exit's latent times into ``latent[j]`` (shape (k, m));
    then :func:`settle`. The values are those of the numpy path (the same operations; numpy's own
    log loop). Returns ``(failed, count)``: ``failed`` has bit ``j`` set where exit ``j`` needs the
    numpy code (nothing settled; the draws are in ``draws``), else 0 and :func:`settle`'s count."""
    m = sel.size
    failed = 0
    for a in range(0, m, STATE_BLOCK):
        b = min(a + STATE_BLOCK, m)
        e = draws[a:b]
        visit_units(sel[a:b], start, visits, k, stream, k0, k1, e)
        pe = e.ctypes.data
        call(fns, LOG, pe, pe, (b - a) * k, 8, 8)
        for i in range(b - a):
            for j in range(k):
                e[i, j] = -e[i, j]
        for j in range(k):
            c = clocks[j]
            x = ts[a:b] if c == 1 else age[a:b]
            if not exit_block(fns, families[j], params[j, 0], params[j, 1], params[j, 2], x, c == 0, e, j,
                              latent[j, a:b], tmp):
                failed |= 1 << j
    if failed:
        return failed, count
    got = settle(sel, k, latent[0], latent[min(1, k - 1)], latent[min(2, k - 1)], latent[min(3, k - 1)],
                 latent[4:], later, state, rnd, limit, targets, exits, absorbing, t, cur, active, absorbed, rec_idx,
                 rec_time, rec_from, rec_to, rec_exit, rec_round, count)
    return 0, got


@njit(nogil=True, cache=True)
def run_rounds(idx, m, active, cur, t, entry_age, bounds, order, ts, age, rnd, s_from, max_rounds, start, visits, seen,
               k0, k1, fns, planned, n_exits, families, params, clocks, targets, exits, draws, latents, tmp, limit,
               absorbing, absorbed, rec_idx, rec_time, rec_from, rec_to, rec_exit, rec_round,
               count):  # pragma: no cover - compiled
    """The rounds of a chunk's histories under one strategy, from round ``rnd`` (state ``s_from``
    of it, or a new round if ``s_from < 0``) for as long as it can: each round groups the active
    patients by state (:func:`by_state`), and each occupied state whose exits have block forms
    (``planned``; per state ``s``: ``n_exits[s]`` exits, ``families[s]``, ``params[s]``,
    ``clocks[s]``, ``targets[s]``, ``exits[s]``) takes :func:`state_round`. Row ``s`` of ``visits``
    is zeroed the first time state ``s`` is occupied (``seen``).

    Returns ``(status, s, failed, count, rnd, m)``: :data:`DONE`; :data:`NEEDS_NUMPY` for state
    ``s`` (``failed = 0``: no block form, nothing done; else the exits whose block forms failed,
    the draws made, see :func:`state_round`); :data:`NEEDS_ROOM` (state ``s`` needs record capacity
    for its patients; nothing done); :data:`NO_TIME` (a NaN latent time in state ``s``);
    :data:`TOO_MANY` (more than ``max_rounds`` rounds). The caller continues with ``s_from`` the
    next state (``s + 1``) or the same (room) and the returned ``rnd`` and ``m``. One call instead
    of one per round and state: no return to the interpreter, so no GIL hand-over, between them."""
    n_states = bounds.size - 1
    while True:
        if s_from < 0:
            m = by_state(idx, m, active, cur, t, entry_age, bounds, order, ts, age)
            if m == 0:
                return DONE, 0, 0, count, rnd, m
            rnd += 1
            if rnd > max_rounds:
                return TOO_MANY, 0, 0, count, rnd, m
            s_from = 0
        for s in range(s_from, n_states):
            a, b = bounds[s], bounds[s + 1]
            if a == b:
                continue
            if not seen[s]:
                visits[s, :] = 0
                seen[s] = True
            if not planned[s]:
                return NEEDS_NUMPY, s, 0, count, rnd, m
            if count + (b - a) > rec_idx.size:
                return NEEDS_ROOM, s, 0, count, rnd, m
            k = n_exits[s]
            failed, got = state_round(order[a:b], start, visits[s], k, 1 + s, k0, k1, fns, families[s], params[s],
                                      clocks[s], ts[a:b], age[a:b], draws[:(b - a) * k].reshape((b - a, k)),
                                      latents[:k * (b - a)].reshape((k, b - a)), tmp, rnd > 1, s, rnd, limit,
                                      targets[s], exits[s], absorbing, t, cur, active, absorbed, rec_idx, rec_time,
                                      rec_from, rec_to, rec_exit, rec_round, count)
            if failed:
                return NEEDS_NUMPY, s, failed, count, rnd, m
            if got < 0:
                return NO_TIME, s, 0, count, rnd, m
            count = got
        s_from = -1


@njit(nogil=True, cache=True)
def place_events(rec_idx, rec_time, rec_from, rec_to, rec_exit, rec_round, count, entry_age, start, code, first,
                 perm, patient, time, age, from_state, to_state, transition, strategy):  # pragma: no cover - compiled
    """Write ``count`` records of a chunk into the event columns (views of the chunk's rows) in
    patient-then-time order: a patient active in round r has made exactly r - 1 moves before it
    (each round moves or censors every active patient), so its event of round r is its r-th, at
    ``first[p] + r - 1`` where ``first`` counts the events of the patients before it (a counting
    placement). Attained age = entry age + time; patient ids ``start + p``; strategy code ``code``.
    Scratch: ``first``, one more entry than the chunk has patients; ``perm``, ``count`` entries.

    The record of each row is found first (``perm``, one scattered integer per record), then the
    columns are written row by row, reading the records where they lie: writing seven columns in
    order and reading scattered records costs ~15% less than scattering seven columns (issue 16)."""
    n = first.size - 1
    first[:] = 0
    for r in range(count):
        first[rec_idx[r] + 1] += 1
    for p in range(n):
        first[p + 1] += first[p]
    for r in range(count):
        perm[np.uint64(first[np.uint64(rec_idx[r])] + rec_round[r] - 1)] = r
    for d in range(count):
        r = np.uint64(perm[d])  # unsigned indexes: no code for negative-index wraparound
        p = rec_idx[r]
        tr = rec_time[r]
        patient[d] = start + p
        time[d] = tr
        age[d] = entry_age[np.uint64(p)] + tr
        from_state[d] = rec_from[r]
        to_state[d] = rec_to[r]
        transition[d] = rec_exit[r]
        strategy[d] = code
