"""Error-free transformations of floating-point sums and products, for kernels that must carry
the exact rounding error of an operation (T. J. Dekker, "A floating-point technique for
extending the available precision", Numer. Math. 18 (1971) 224-242; D. E. Knuth, The Art of
Computer Programming vol. 2, sec. 4.2.2 [from memory]; common practice).

`fma` is LLVM's fused multiply-add intrinsic: one rounding of a * b + c. It compiles to the
hardware instruction where there is one and to a correctly rounded library routine where there
is not, so `two_prod` is exact everywhere (it is only faster with the instruction).
"""

from __future__ import annotations

from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic


@intrinsic
def fma(typingctx, a, b, c):
    """a * b + c with a single rounding."""
    sig = types.float64(types.float64, types.float64, types.float64)

    def codegen(context, builder, signature, args):
        d = ir.DoubleType()
        fn = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(d, [d, d, d]), "llvm.fma.f64"
        )
        return builder.call(fn, args)

    return sig, codegen


@njit(cache=True, inline="always")
def two_sum(a, b):
    """(s, e) with s = fl(a + b) and s + e = a + b exactly, whatever |a| against |b| (Knuth)."""
    s = a + b
    bp = s - a
    return s, (a - (s - bp)) + (b - bp)


@njit(cache=True, inline="always")
def two_prod(a, b):
    """(p, e) with p = fl(a * b) and p + e = a * b exactly (barring underflow)."""
    p = a * b
    return p, fma(a, b, -p)
