"""``prefetch_row(array, i)``: ask the CPU to bring row ``i`` of an array into cache, without waiting for it.

A kernel that visits rows of a large table in an order it knows ahead (the home slots of the keys to come) can
start each row's memory load early and go on working: unlike an ordinary load of that row, a prefetch retires at
once, so the out-of-order window is not held up behind a cache miss (LLVM's ``llvm.prefetch`` intrinsic, which x86
compiles to ``prefetchw`` for a row about to be written). A prefetch never faults and changes no result: only the
time the kernel takes.
"""

from __future__ import annotations

from typing import Any

from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic

_READ, _WRITE = 0, 1
_KEEP = 3  # locality: keep in all cache levels
_DATA = 1  # a data, not an instruction, cache


@intrinsic
def prefetch_row(typingctx: Any, array: Any, index: Any) -> Any:  # pragma: no cover - compiled
    """Prefetch, for writing, the first element of row ``index`` of a C-contiguous ``array`` (no bounds check is
    needed: a prefetch of any address is harmless)."""
    if not isinstance(array, types.Array) or not isinstance(index, types.Integer):
        return None
    sig = types.void(array, index)

    def codegen(context: Any, builder: Any, signature: Any, args: Any) -> Any:
        array_type, index_type = signature.args
        ary = context.make_array(array_type)(context, builder, args[0])
        intp = context.get_value_type(types.intp)
        row = context.cast(builder, args[1], index_type, types.intp)
        where = [row] + [ir.Constant(intp, 0)] * (array_type.ndim - 1)
        pointer = cgutils.get_item_pointer(context, builder, array_type, ary, where, wraparound=False)
        byte_pointer = ir.IntType(8).as_pointer()
        i32 = ir.IntType(32)
        fn = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(ir.VoidType(), [byte_pointer, i32, i32, i32]), "llvm.prefetch.p0"
        )
        constants = [ir.Constant(i32, v) for v in (_WRITE, _KEEP, _DATA)]
        builder.call(fn, [builder.bitcast(pointer, byte_pointer), *constants])
        return context.get_dummy_value()

    return sig, codegen
