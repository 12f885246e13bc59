"""Bit operations shared by the numba kernels of the statistics."""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

from llvmlite import ir
from numba import types
from numba.extending import intrinsic


@intrinsic
def popcount(typingctx, value):  # type: ignore[no-untyped-def]  # pragma: no cover - compiled
    """Set bits of a uint64 (LLVM's ctpop: one instruction where the CPU has it)."""
    if not (isinstance(value, types.Integer) and value.bitwidth == 64 and not value.signed):
        return None

    def codegen(context, builder, signature, args):  # type: ignore[no-untyped-def]
        function = builder.module.declare_intrinsic("llvm.ctpop", [ir.IntType(64)])
        return builder.call(function, args)

    return types.uint64(value), codegen
