"""A software prefetch hint for compiled loops (numba exposes none of its own)."""

from __future__ import annotations

from typing import Any

from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic


@intrinsic
def prefetch(typingctx: Any, array: Any, index: Any) -> Any:  # noqa: ARG001
    """Hint that ``array[index]`` (flat, unchecked) will be read soon: fetch its line into L1.

    Emits LLVM's ``llvm.prefetch`` (read, locality 3); it never faults, so an index past the end
    of the array is harmless.
    """
    sig = types.void(array, index)

    def codegen(context: Any, builder: Any, signature: Any, args: Any) -> Any:
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        ptr = builder.gep(ary.data, [args[1]])
        i32 = ir.IntType(32)
        fnty = ir.FunctionType(ir.VoidType(), [ptr.type, i32, i32, i32])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.prefetch.p0")
        builder.call(fn, [ptr, ir.Constant(i32, 0), ir.Constant(i32, 3), ir.Constant(i32, 1)])
        return context.get_dummy_value()

    return sig, codegen
