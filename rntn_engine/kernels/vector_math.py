"""exp and tanh in arithmetic the compiler can vectorise: the activation and the softmax.

``np.exp`` / ``np.tanh`` inside a compiled loop are one call into the C math library per
element (about 13.6 ns an element for tanh in float64 on this project's machine). Here every
step is plain arithmetic with no call and no branch, so LLVM turns a loop over an array into
SIMD code (2.1 ns an element for tanh, float64; `python scripts/bench_vector_math.py`).

Both rest on e^y for y <= 0, as in a C library's exp and expm1 (Cody-Waite range reduction):

    k = round(y / ln 2),   r = y - k ln2_hi - k ln2_lo,   |r| <= ln(2)/2
    q = e^r - 1 = r + r^2/2! + ... + r^14/14!    (Taylor; the first term left out is below
                                                  1e-17 of q at |r| = ln(2)/2)
    e^y = 2^k (1 + q),    e^y - 1 = 2^k q + (2^k - 1)        (2^k built from its IEEE bits: exact)

ln2_hi has its last 32 bits zero, so k ln2_hi is exact for every k that occurs; LN2_HI and
LN2_LO are the classic split of ln 2 used by the freely available C math libraries. Then

    tanh(x) = -m / (2 + m),   m = e^(-2|x|) - 1 in (-1, 0],   with the sign of x

(no cancellation anywhere: m is computed without forming 1 + ...). |x| is capped at 20, where
float64 tanh is already 1. ``exp_nonpositive`` flushes results below the smallest normal float64
(y < -708.39) to 0, as the AdaGrad step does with near-subnormal parameters: subnormal operands
make every later multiply slow. Every function computes in float64; a float32 caller rounds
once. Measured against mpmath (tests/test_vector_math.py): float64 exp within 2 units in the last
place, float64 tanh within 3 (2.54 at worst over 20,000 points; the C library's tanh: 1.34);
float32 results within 1. NaN stays NaN; tanh keeps the sign of zero.

NumPy twins: ``np.tanh`` and ``np.exp``. Backward needs neither: d tanh(z)/dz = 1 - p^2 from
the stored p (tree_compose.py), and the softmax's gradient is y - onehot (node_classifier.py).
"""

from __future__ import annotations

import numpy as np
from numba import types
from numba.extending import intrinsic

from rntn_engine.jit_setup import numeric_kernel

LOG2E = 1.4426950408889634  # 1 / ln 2
LN2_HI = 6.93147180369123816490e-01  # ln 2 in two parts: LN2_HI + LN2_LO = ln 2 to about 1e-27
LN2_LO = 1.90821492927058770002e-10
TANH_CAP = 20.0  # |x| beyond this: tanh(x) = +-1 in float64
EXP_FLOOR = -708.39  # e^y below the smallest normal float64 (2.2e-308) for y below this: 0


@intrinsic
def float64_from_bits(typingctx, bits):
    """The float64 whose IEEE-754 bits are the int64 ``bits`` (a reinterpretation, no conversion)."""
    signature = types.float64(types.int64)

    def codegen(context, builder, sig, args):
        return builder.bitcast(args[0], context.get_value_type(types.float64))

    return signature, codegen


@numeric_kernel
def _reduced(y):
    """(2^k, q) with e^y = 2^k (1 + q), for -708.4 <= y <= 0 (module docstring)."""
    kf = np.floor(y * LOG2E + 0.5)  # k = round(y / ln 2), in [-1022, 0]
    r = (y - kf * LN2_HI) - kf * LN2_LO
    q = 1.0 / 87178291200.0  # q = e^r - 1 by Horner, 1/14! first
    q = q * r + 1.0 / 6227020800.0
    q = q * r + 1.0 / 479001600.0
    q = q * r + 1.0 / 39916800.0
    q = q * r + 1.0 / 3628800.0
    q = q * r + 1.0 / 362880.0
    q = q * r + 1.0 / 40320.0
    q = q * r + 1.0 / 5040.0
    q = q * r + 1.0 / 720.0
    q = q * r + 1.0 / 120.0
    q = q * r + 1.0 / 24.0
    q = q * r + 1.0 / 6.0
    q = q * r + 0.5
    q = q * r + 1.0
    q = q * r
    return float64_from_bits((np.int64(kf) + 1023) << 52), q


@numeric_kernel
def tanh_value(x):
    """tanh(x) for one float64 (module docstring); inlined into the callers' loops by LLVM."""
    s, q = _reduced(-2.0 * min(abs(x), TANH_CAP))
    m = s * q + (s - 1.0)  # e^(-2|x|) - 1, in (-1, 0]
    return np.copysign(-m / (2.0 + m), x)


@numeric_kernel
def exp_nonpositive(y):
    """e^y for one float64 y <= 0 (module docstring); 0 below EXP_FLOOR, NaN for NaN."""
    s, q = _reduced(max(y, EXP_FLOOR))  # (max keeps a NaN in its first argument)
    value = s * q + s
    return 0.0 if y < EXP_FLOOR else value


@numeric_kernel
def tanh_bias_rows(P, Z, b, order, a, z):
    """P[order[m]] = tanh(Z[m] + b) for m in a..z-1; Z[a:z] is overwritten with the result.

    P (N, d) out; Z (M, d) in: pre-activations without the bias; b (d,); order (M,) int32.
    The tanh runs over the contiguous rows Z[a:z] as one flat loop (vectorised), then the
    rows are scattered to their nodes.
    """
    d = Z.shape[1]
    for m in range(a, z):
        for k in range(d):
            Z[m, k] += b[k]
    flat = Z[a:z].reshape(-1)
    for j in range(flat.shape[0]):
        flat[j] = tanh_value(np.float64(flat[j]))
    for m in range(a, z):
        i = order[m]
        for k in range(d):
            P[i, k] = Z[m, k]
