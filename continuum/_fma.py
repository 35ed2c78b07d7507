"""Fused multiply-add, written out where the arithmetic wants one.

The finite-difference kernels are compiled without the compiler's licence to fuse a
product and a sum on its own (fast-math "contract"). With that licence, which pairs get
fused is the backend's choice, and the choice can change with things that have nothing
to do with the arithmetic: inlining, how much the compiler knows about pointer overlap,
whether the kernel was compiled in this process or loaded from numba's cache. The
results then differ in the last bits between such builds. Instead, every fused
multiply-add is written in the source with :func:`fmadd`, one rounding of the exact
``a * b + c`` (IEEE 754-2008 fusedMultiplyAdd), so the source fixes every rounding.

:func:`fmadd` works on scalars inside compiled code (one fused instruction, ``llvm.fma``;
on an x86-64 CPU with FMA3; both methods' kernels call the term functions of
:mod:`._terms` this way, point by point) and on arrays (``a * b + c``, two roundings, as
numpy does), so the term functions keep accepting arrays too.
"""

from __future__ import annotations

from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic, overload

__all__ = ["fma", "fmadd"]


@intrinsic
def fma(typingctx, a, b, c):
    """``a * b + c`` with one rounding (float64 scalars; compiled code only)."""
    if not all(isinstance(t, (types.Float, types.Integer)) for t in (a, b, c)):
        return None
    sig = types.float64(types.float64, types.float64, types.float64)

    def codegen(context, builder, signature, args):
        d = ir.DoubleType()
        fn = builder.module.declare_intrinsic("llvm.fma", [d], ir.FunctionType(d, [d, d, d]))
        return builder.call(fn, list(args))

    return sig, codegen


def fmadd(a, b, c):
    """``a * b + c``: fused (one rounding) on scalars in compiled code, else two roundings.

    Called from Python (not compiled) it computes ``a * b + c`` with two roundings.
    """
    return a * b + c


@overload(fmadd, inline="always")
def _fmadd(a, b, c):
    scalar = (types.Float, types.Integer)
    if all(isinstance(t, scalar) for t in (a, b, c)):
        return lambda a, b, c: fma(a, b, c)
    return lambda a, b, c: a * b + c
