"""A prefetch hint for the word rows' AdaGrad step, which reads scattered rows of L and of its sums.

A minibatch touches a few hundred rows of L (and of its AdaGrad sums G) spread over the whole
vocabulary, so each row the word rows' AdaGrad step reads is usually a cache miss, and the loop
waits on one miss after another. Asking for the row a few iterations ahead (LLVM's
``llvm.prefetch``, the CPU's prefetch instruction) lets those misses overlap. A hint changes no
result: it loads nothing into a register, and a processor may ignore it (the reference hashes of
tests/test_reference_hashes.py did not move). Measured with the caches flushed before each call
(430 rows of a 15,493 x 25 float32 array, ad-hoc, medians of 55 calls): 139-142 -> 87-94 us; inside
a training step at d = 25 float32 (per-kernel timers): 65 -> 40 us. The leaves' lookup in the
forward pass gained 1-2 of its 15-30 us per chunk, too little to keep the hint there."""

from __future__ import annotations

from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic

ROWS_AHEAD = 8  # how many rows ahead of the one being worked on to ask for
LINE_BYTES = 64  # a cache line on the x86-64 and ARM64 processors numba targets


@intrinsic
def prefetch_row(typingctx, array, row):
    """Hint that row ``row`` of the C-contiguous 2-D ``array`` will be read soon: one hint per cache line
    of the row. Generated in place (no call, no reference counting); no effect on any value; ``row``
    must be a row of the array."""
    signature = types.void(array, row)

    def codegen(context, builder, sig, args):
        ary = context.make_array(sig.args[0])(context, builder, args[0])
        i64 = ir.IntType(64)
        i32 = ir.IntType(32)
        byte = ir.IntType(8).as_pointer()
        width = builder.extract_value(ary.shape, 1)
        row_bytes = builder.mul(width, ir.Constant(i64, context.get_abi_sizeof(context.get_data_type(sig.args[0].dtype))))
        first = builder.gep(ary.data, [builder.mul(context.cast(builder, args[1], sig.args[1], types.int64), width)])
        start = builder.bitcast(first, byte)
        hint = builder.module.declare_intrinsic(
            "llvm.prefetch", fnty=ir.FunctionType(ir.VoidType(), [byte, i32, i32, i32]))
        with cgutils.for_range_slice(builder, ir.Constant(i64, 0), row_bytes, ir.Constant(i64, LINE_BYTES),
                                     intp=i64) as (offset, _):
            # read (0), keep in every cache level (3), data cache (1)
            builder.call(hint, [builder.gep(start, [offset]), ir.Constant(i32, 0), ir.Constant(i32, 3),
                                ir.Constant(i32, 1)])
        last = builder.gep(start, [builder.sub(row_bytes, ir.Constant(i64, 1))])  # a row starting mid-line
        builder.call(hint, [last, ir.Constant(i32, 0), ir.Constant(i32, 3), ir.Constant(i32, 1)])  # ends one later
        return context.get_dummy_value()

    return signature, codegen
