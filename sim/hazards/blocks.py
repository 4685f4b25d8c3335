"""Conditional times of the engine's most common hazards on a block of lanes, in compiled code
(numba), for the engine's one-call state rounds (:func:`sim.engine.kernels.state_round`; issue 16).

:func:`exit_block` evaluates one exit's latent times for a block of a few hundred patients that
stays in the processor's cache: the same operations in the same order as the hazards' own numpy
code (:func:`sim.hazards.gompertz.gompertz_times`, :func:`sim.hazards.shape_scale.weibull_times`,
:meth:`sim.hazards.Exponential._conditional_time`), with numpy's own ``exp``/``log``/``log1p``/
``expm1`` loops (:mod:`.numpy_loops`) between the compiled arithmetic of :mod:`._fused`, so the
bits are those of the numpy code (tests/sim/test_hazard_blocks.py). Where the numpy code would take
its slower general form for the whole array (a Gompertz value outside the short form's range, a
Weibull time that overflows), the block reports it and the engine evaluates that exit with the
numpy code instead.

:func:`block_form` says which hazards have a block form: a plain :class:`~sim.hazards.Exponential`
with a positive rate, :class:`~sim.hazards.Weibull`, and :class:`~sim.hazards.Gompertz` with a
positive slope (exactly these classes; wrapped, per-draw or sex-specific hazards keep the numpy path).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from . import _fused
from .numpy_loops import EXP, EXPM1, LOG, LOG1P, call
from .base import Hazard
from .exponential import Exponential
from .gompertz import _TINY_NORMAL, Gompertz
from .shape_scale import Weibull

__all__ = ["EXPONENTIAL", "WEIBULL", "GOMPERTZ", "block_form", "exit_block"]

#: SHA-256 (first 16 hex digits) of the files whose compiled code :func:`exit_block` calls
#: (``_fused.py``, ``numpy_loops.py``, in that order). numba's on-disk cache checks only a function's
#: own source file, so a change there must change this file too, or a stale compiled
#: :func:`exit_block` would be loaded: tests/sim/test_hazard_blocks.py checks the value.
COMPILED_DEPENDENCIES = "5fb8ed496bb58b12"

#: Family codes of :func:`exit_block`.
EXPONENTIAL, WEIBULL, GOMPERTZ = 1, 2, 3


def block_form(h: Hazard) -> tuple[int, float, float, float] | None:
    """``(family code, p0, p1, p2)`` of a hazard with a block form, else None: exponential
    ``(rate, 0, 0)``, Weibull ``(shape, log scale, 0)``, Gompertz ``(log rate, slope, log slope)``
    (the numbers its numpy code takes)."""
    if type(h) is Exponential and h.rate > 0.0:
        return EXPONENTIAL, float(h.rate), 0.0, 0.0
    # the numbers must be Python floats, as where the numpy code takes its fused form (_fused.fusable)
    if type(h) is Weibull and _fused.fusable(h._lane_params(), ()):
        k, log_lam = h._lane_params()
        return WEIBULL, k, log_lam, 0.0
    if type(h) is Gompertz and _fused.fusable(h._lane_params(), ()) and h.shape > 0.0:
        log_rate, g, log_g = h._lane_params()
        return GOMPERTZ, log_rate, g, log_g
    return None


@njit(nogil=True, cache=True)
def exit_block(fns, family, p0, p1, p2, x, x_zero, e, j, out, tmp):  # pragma: no cover - compiled
    """Latent times of one exit into ``out`` (contiguous, one per lane) from the exponential draws
    ``e[:, j]`` of the C-contiguous block ``e`` and the clocks ``x`` (all 0 if ``x_zero``; then
    ``x`` is not read); ``fns`` from :func:`sim.hazards.numpy_loops.loops`; ``tmp``: scratch of
    shape (3, >= lanes). Returns False where the numpy code would use its general form for the
    whole array (``out`` is then unfinished).

    - exponential: ``e / rate``;
    - Gompertz: ``log1p(e g / B) / g`` with ``B = b exp(g x)``, formed as ``exp(log g - (log b + g
      x))`` (the short form of :func:`sim.hazards.gompertz.gompertz_times`; False when some lane has
      ``e g / B`` outside [1e-300, 1e300) or ``g / B`` below the smallest normal double);
    - Weibull: ``scale e^(1/k)`` where every clock of the block is 0, otherwise the log-space form
      of :func:`sim.hazards.shape_scale.weibull_times` (the two agree to the bit at ``x = 0``;
      False where some lane's time overflows)."""
    n = out.size
    k = e.shape[1]
    po = out.ctypes.data
    pe = e.ctypes.data + 8 * j  # the column e[:, j]: stride 8 k bytes
    if family == EXPONENTIAL:
        for i in range(n):
            out[i] = e[i, j] / p0
        return True
    if family == GOMPERTZ:
        for i in range(n):
            xi = 0.0 if x_zero else x[i]
            out[i] = p2 - (p0 + p1 * xi)  # log(g / B)
        call(fns, EXP, po, po, n, 8, 8)
        ok = True
        for i in range(n):
            fi = out[i]
            v = e[i, j] * fi
            ok &= (v >= 1e-300) & (v < 1e300) & (fi >= _TINY_NORMAL)
            out[i] = v
        call(fns, LOG1P, po, po, n, 8, 8)
        for i in range(n):
            out[i] = out[i] / p1
        return ok
    # Weibull: k = p0, log scale = p1
    zero = x_zero
    if not zero:
        zero = True
        for i in range(n):
            zero &= x[i] == 0.0
    if zero:
        call(fns, LOG, pe, po, n, 8 * k, 8)
        for i in range(n):
            out[i] = p1 + out[i] / p0
        call(fns, EXP, po, po, n, 8, 8)
        return True
    log_hx, log_e, ends = tmp[0, :n], tmp[1, :n], tmp[2, :n]
    call(fns, LOG, x.ctypes.data, log_hx.ctypes.data, n, 8, 8)
    call(fns, LOG, pe, log_e.ctypes.data, n, 8 * k, 8)
    _fused.weibull_gaps(p0, p1, log_hx, log_e, out)
    call(fns, EXP, po, po, n, 8, 8)
    call(fns, LOG1P, po, po, n, 8, 8)  # log1p(exp(-|d|))
    _fused.weibull_ends(p0, p1, log_hx, log_e, out, log_e, ends)  # log e becomes -z
    call(fns, EXP, ends.ctypes.data, ends.ctypes.data, n, 8, 8)
    call(fns, EXPM1, log_e.ctypes.data, log_e.ctypes.data, n, 8, 8)
    return _fused.weibull_times_from(ends, log_e, e[:, j], out)
