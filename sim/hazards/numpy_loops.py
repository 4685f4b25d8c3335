"""numpy's own inner loops of ``log``, ``exp``, ``log1p`` and ``expm1``, callable from compiled code
(numba) without the interpreter (issue 16).

The engine's conditional times alternate numpy's SIMD transcendental functions with basic
arithmetic. Written as numpy calls, each step is a pass over a whole state's patients, and each call
goes back to the interpreter, which with several worker threads means a hand-over of the GIL per
call (hundreds of thread wake-ups per run). Here the compiled code calls the very loop numpy calls
for ``float64 -> float64``, found through the public fields of numpy's ufunc object
(``PyUFuncObject.functions``/``data``/``types``, ``numpy/ufuncobject.h``), on small blocks that stay
in the processor's cache: the same machine code, so the same bits as ``np.log(x)`` etc.

Safety: :func:`loops` checks each loop against the ufunc itself at import, on contiguous and
strided blocks of ordinary and special values (0, -0, subnormals, +-inf, NaN, huge and tiny
numbers), and returns ``None`` if anything differs or the fields cannot be read; the engine then
keeps its numpy path (the same values, more passes). ``HAZARDTRACE_NUMPY_LOOPS=0`` switches the
compiled path off (used by the tests to compare both paths).
"""

from __future__ import annotations

import ctypes
import os
import sys
from functools import lru_cache

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

__all__ = ["LOG", "EXP", "LOG1P", "EXPM1", "loops", "call"]

#: Positions of the loops in the arrays :func:`loops` returns.
LOG, EXP, LOG1P, EXPM1 = 0, 1, 2, 3
_UFUNCS = (np.log, np.exp, np.log1p, np.expm1)
_DOUBLE = np.dtype(np.float64).num  # NPY_DOUBLE


@intrinsic
def _call_loop(typingctx, fn, data, src, dst, n, s_in, s_out):  # noqa: ARG001 - numba's intrinsic signature
    """Call the ufunc inner loop at address ``fn`` (``void f(char **args, npy_intp *dimensions,
    npy_intp *steps, void *data)``) on ``n`` elements from address ``src`` (stride ``s_in`` bytes)
    to ``dst`` (stride ``s_out``)."""
    sig = types.void(types.intp, types.intp, types.intp, types.intp, types.intp, types.intp, types.intp)

    def codegen(context, builder, signature, args):  # noqa: ARG001
        fnp, datp, s, d, nn, si, so = args
        i8p, i64 = ir.IntType(8).as_pointer(), ir.IntType(64)
        fty = ir.FunctionType(ir.VoidType(), [i8p.as_pointer(), i64.as_pointer(), i64.as_pointer(), i8p])
        two = ir.Constant(i64, 2)
        argv = builder.alloca(i8p, size=two)
        builder.store(builder.inttoptr(s, i8p), argv)
        builder.store(builder.inttoptr(d, i8p), builder.gep(argv, [ir.Constant(i64, 1)]))
        dims = builder.alloca(i64)
        builder.store(nn, dims)
        steps = builder.alloca(i64, size=two)
        builder.store(si, steps)
        builder.store(so, builder.gep(steps, [ir.Constant(i64, 1)]))
        builder.call(builder.inttoptr(fnp, fty.as_pointer()), [argv, dims, steps, builder.inttoptr(datp, i8p)])
        return context.get_dummy_value()

    return sig, codegen


@njit(inline="always")
def call(fns, which, src, dst, n, s_in, s_out):  # pragma: no cover - compiled
    """``dst[i] = f(src[i])`` for ``i < n`` with numpy's loop ``which`` (:data:`LOG` ...) of
    ``fns`` (the array :func:`loops` returns: addresses, then the loops' data pointers); ``src``
    and ``dst`` are addresses, ``s_in`` and ``s_out`` strides in bytes."""
    if n > 0:
        _call_loop(fns[which], fns[4 + which], src, dst, n, s_in, s_out)


@njit(nogil=True, cache=True)
def _apply(fns, which, x, out, block, stride):  # pragma: no cover - compiled
    """``out[i] = f(x[i * stride])`` in blocks of ``block`` elements (the self-check)."""
    n = out.size
    for a in range(0, n, block):
        call(fns, which, x.ctypes.data + 8 * a * stride, out.ctypes.data + 8 * a, min(block, n - a), 8 * stride, 8)


def _address(ufunc: np.ufunc) -> tuple[int, int]:
    """Address of ``ufunc``'s ``d->d`` inner loop and of its data pointer, read from the public
    ``PyUFuncObject`` fields (``PyObject_HEAD``; ``int nin, nout, nargs, identity``;
    ``PyUFuncGenericFunction *functions``; ``void **data``; ``int ntypes, reserved1``;
    ``const char *name``; ``const char *types``)."""
    if sys.implementation.name != "cpython" or ctypes.sizeof(ctypes.c_void_p) != 8:
        raise LookupError("needs 64-bit CPython")
    base = id(ufunc)
    head = 2 * ctypes.sizeof(ctypes.c_void_p)  # PyObject_HEAD: refcount and type
    nin, nout, nargs = (ctypes.c_int.from_address(base + head + 4 * i).value for i in range(3))
    if (nin, nout, nargs) != (1, 1, 2) or (ufunc.nin, ufunc.nout) != (1, 1):
        raise LookupError(f"unexpected layout of {ufunc.__name__}")
    functions = ctypes.c_void_p.from_address(base + head + 16).value
    data = ctypes.c_void_p.from_address(base + head + 24).value
    ntypes = ctypes.c_int.from_address(base + head + 32).value
    typecodes = ctypes.c_void_p.from_address(base + head + 48).value
    if not functions or not typecodes or ntypes != ufunc.ntypes:
        raise LookupError(f"unexpected layout of {ufunc.__name__}")
    codes = (ctypes.c_char * (2 * ntypes)).from_address(typecodes).raw
    for i in range(ntypes):
        if codes[2 * i] == _DOUBLE and codes[2 * i + 1] == _DOUBLE:
            fn = ctypes.c_void_p.from_address(functions + 8 * i).value
            dat = ctypes.c_void_p.from_address(data + 8 * i).value if data else None
            if not fn:
                break
            return int(fn), int(dat or 0)
    raise LookupError(f"no float64 loop in {ufunc.__name__}")


def _probe() -> np.ndarray:
    """Ordinary and special values for the self-check."""
    rng = np.random.default_rng(20261206)
    special = np.array([0.0, -0.0, 5e-324, -5e-324, 2.2250738585072014e-308, 1e-300, 1e-20, 0.5, 1.0, 1.0 - 2**-53,
                        1.0 + 2**-52, 2.0, 700.0, 709.78, 710.0, -745.2, -746.0, 1e300, np.inf, -np.inf, np.nan, -1.0,
                        -0.5, -1e-10, 36.0, -36.0])
    return np.concatenate([special, rng.standard_normal(3000) * 30.0, rng.exponential(size=3000),
                           np.exp(rng.uniform(-700.0, 700.0, 3000)), -rng.exponential(size=3001)])


@lru_cache(maxsize=1)
def loops() -> np.ndarray | None:
    """The four loops' addresses then their data pointers (``int64``, for :func:`call`), or ``None``
    when they cannot be found, give other bits than the ufuncs, or ``HAZARDTRACE_NUMPY_LOOPS=0``."""
    if os.environ.get("HAZARDTRACE_NUMPY_LOOPS", "1") == "0":
        return None
    try:
        found = [_address(uf) for uf in _UFUNCS]
    except (LookupError, ValueError, OSError):
        return None
    fns = np.array([f for f, _ in found] + [d for _, d in found], dtype=np.int64)
    x = _probe()
    with np.errstate(all="ignore"):
        for which, uf in enumerate(_UFUNCS):
            for stride in (1, 3):
                src = np.repeat(x, stride) if stride > 1 else x
                want = uf(src[::stride])
                for block in (1, 7, 64, 509, x.size):
                    got = np.empty(x.size)
                    _apply(fns, which, src, got, block, stride)
                    if not np.array_equal(got.view(np.uint64), want.view(np.uint64)):
                        return None
    return fns
