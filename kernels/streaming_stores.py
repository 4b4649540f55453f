"""Non-temporal ("streaming") stores of whole cache lines, for the flat drivers of large grids.

An ordinary store to a line that is not in cache first reads the line from memory (a read for
ownership), so a kernel that writes 11 rows and reads 12 moves 34 rows' worth of lines, not 23.
A non-temporal store writes a whole line straight to memory without reading it. LLVM's loop
vectoriser does not emit them (it needs a proven vector alignment, and x86 has no non-temporal
store of one double), so a driver computes one line's worth of points into a stack buffer
(:func:`~.strip_buffers.strip_buffer`, a constant trip count that vectorises into whole
registers) and hands each output row's line to :func:`stream_line`.

Measured on the source kernel (12 rows in, 11 out; padded grid functions, float64, interleaved
with a triad, the hand-written C kernel and the current driver in one process; 2 shared cores,
load near 1, a probe): time / C 0.47-0.75 from 32^3 to 262^3 (32, 48, 64, 96, 128, 256, 262^3:
0.54, 0.75, 0.67, 0.61, 0.56, 0.55, 0.47), where the ordinary driver ran at 0.94-1.15.
A buffer of a whole strip per row (256 points) flushed line by line was slower than both (its
copy loop cost 2.4 ns per point in cache); one line at a time keeps the buffer in registers.
``benchmarks/bench_sources.py`` (README "Speed"): 0.68-0.69 of the ordinary driver's time on
padded grid functions at 128, 134, 256 and 262^3, 0.69-0.74 of the C kernel's. (AMD EPYC, Zen 4.)

Contract: :func:`stream_line` needs the destination line 64-byte aligned (the instruction faults
otherwise). A driver therefore checks every output row with :func:`rows_at_offset` before it
streams, and stores the points before the first whole line (and after the last) the ordinary
way. Non-temporal stores are weakly ordered: a driver ends each parallel task with
:func:`store_fence` (``sfence`` on x86-64; a portable LLVM fence elsewhere, so the kernels also
compile on CPUs without x86's instructions, where the hint is LLVM's to honour).

Why only on large grids: the stored lines leave the cache, so a consumer that would have found
the outputs there (an evolution step on a grid that fits in the last-level cache) reads them
from memory instead. The drivers take this form where the output rows reach
:data:`~.vector_loops.STREAMING_ROW_BYTES` (see there).
"""

from __future__ import annotations

import platform

from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.core.errors import TypingError
from numba.extending import intrinsic

from ._compile import point_function

__all__ = ["LINE_BYTES", "STREAMING_BUFFER_LANES", "stream_line", "store_fence", "line_offset",
           "rows_at_offset", "line_extent", "buffer_ten"]

#: Bytes of one cache line, the unit of a streaming store (x86-64 and most 64-bit CPUs).
LINE_BYTES = 64
#: Points per row of a driver's line buffer: a line of float32 (float64 uses half of it).
STREAMING_BUFFER_LANES = LINE_BYTES // 4


def _two_dimensional(name, array):
    if not (isinstance(array, types.Array) and array.ndim == 2):
        raise TypingError(f"{name} takes 2-D arrays, found {array}")


@intrinsic
def stream_line(typingctx, dst, row, col, src, src_row):
    """Store the line ``src[src_row, 0:lanes]`` at ``dst[row, col:col + lanes]`` without reading
    the destination line first; ``lanes`` = :data:`LINE_BYTES` / itemsize. The destination
    address must be a multiple of :data:`LINE_BYTES`; ``src`` may be any 2-D array of the same
    dtype (read with the element's alignment)."""
    _two_dimensional("stream_line", dst)
    _two_dimensional("stream_line", src)
    for index in (row, col, src_row):
        if not isinstance(index, types.Integer):
            raise TypingError(f"stream_line: indices must be integers, found {index}")
    if dst.dtype != src.dtype:
        raise TypingError(f"stream_line: dtypes differ, {dst.dtype} and {src.dtype}")

    def codegen(context, builder, signature, arguments):
        dst_type, row_type, col_type, src_type, src_row_type = signature.args
        target, row, col, source, src_row = arguments
        row = context.cast(builder, row, row_type, types.intp)
        col = context.cast(builder, col, col_type, types.intp)
        src_row = context.cast(builder, src_row, src_row_type, types.intp)
        target = context.make_array(dst_type)(context, builder, target)
        source = context.make_array(src_type)(context, builder, source)
        element = context.get_data_type(dst_type.dtype)
        itemsize = context.get_abi_sizeof(element)
        line = ir.VectorType(element, LINE_BYTES // itemsize)
        zero = context.get_constant(types.intp, 0)
        src_pointer = cgutils.get_item_pointer(context, builder, src_type, source,
                                               [src_row, zero])
        dst_pointer = cgutils.get_item_pointer(context, builder, dst_type, target,
                                               [row, col])
        value = builder.load(builder.bitcast(src_pointer, line.as_pointer()), align=itemsize)
        store = builder.store(value, builder.bitcast(dst_pointer, line.as_pointer()),
                              align=LINE_BYTES)
        store.set_metadata("nontemporal",
                           builder.module.add_metadata([ir.Constant(ir.IntType(32), 1)]))
        return context.get_dummy_value()

    return types.none(dst, row, col, src, src_row), codegen


#: Whether the kernels compile for x86-64 (Numba compiles for the host).
_X86 = platform.machine().lower() in ("x86_64", "amd64")


@intrinsic
def store_fence(typingctx):
    """Order every earlier store, streaming ones included, before every later store: ``sfence``
    on x86-64 (LLVM's own ``fence seq_cst`` becomes a locked instruction there, which is not
    documented to drain streaming stores), a ``fence seq_cst`` elsewhere."""

    def codegen(context, builder, signature, arguments):
        if _X86:
            fence = cgutils.get_or_insert_function(
                builder.module, ir.FunctionType(ir.VoidType(), []), "llvm.x86.sse.sfence")
            builder.call(fence, [])
        else:
            builder.fence("seq_cst")
        return context.get_dummy_value()

    return types.none(), codegen


@intrinsic
def _address(typingctx, array, row):
    """Byte address of ``array[row, 0]`` (2-D array)."""
    _two_dimensional("line_offset", array)

    def codegen(context, builder, signature, arguments):
        array_type = signature.args[0]
        view = context.make_array(array_type)(context, builder, arguments[0])
        pointer = cgutils.get_item_pointer(context, builder, array_type, view,
                                           [arguments[1], context.get_constant(types.intp, 0)])
        return builder.ptrtoint(pointer, context.get_value_type(types.intp))

    return types.intp(array, types.intp), codegen


@point_function
def line_offset(array, row):
    """Byte offset of ``array[row, 0]`` within its cache line (0 to :data:`LINE_BYTES` - 1)."""
    return _address(array, row) % LINE_BYTES


@point_function
def rows_at_offset(array, offset):
    """Whether every row of the 2-D ``array`` starts ``offset`` bytes into a cache line, and
    its elements lie whole within lines (``offset`` a multiple of the itemsize)."""
    if offset % array.itemsize:
        return False
    for row in range(array.shape[0]):
        if line_offset(array, row) != offset:
            return False
    return True


@point_function
def line_extent(offset, itemsize, npoints):
    """(head, lines, lanes) of a row of ``npoints`` elements that starts ``offset`` bytes into a
    cache line: ``head`` points before the first whole line, then ``lines`` whole lines of
    ``lanes`` points; the points from ``head + lines * lanes`` on end mid-line."""
    lanes = LINE_BYTES // itemsize
    head = min(npoints, (LINE_BYTES - offset) % LINE_BYTES // itemsize)
    return head, (npoints - head) // lanes, lanes


@point_function
def buffer_ten(buffer, m, v0, v1, v2, v3, v4, v5, v6, v7, v8, v9):
    """Put ten output values of one point into column ``m`` of a driver's line buffer
    (rows 0 to 9), in the order the driver streams them."""
    buffer[0, m] = v0
    buffer[1, m] = v1
    buffer[2, m] = v2
    buffer[3, m] = v3
    buffer[4, m] = v4
    buffer[5, m] = v5
    buffer[6, m] = v6
    buffer[7, m] = v7
    buffer[8, m] = v8
    buffer[9, m] = v9
