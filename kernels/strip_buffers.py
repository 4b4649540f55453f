"""Scratch arrays for strip kernels on the stack of the thread that runs a grid column.

:func:`strip_buffer` returns a C-ordered (rows, points) array whose shape is a compile-time
constant and whose memory is a stack slot (an LLVM ``alloca`` in the entry block of the compiled
function, so one slot per call of the parallel loop body, reused by every column it runs).

Why not ``np.empty`` inside the ``prange`` body (what the strip kernels did first): LLVM
vectorises a loop only if it can prove, or check at run time with at most 8 comparisons, that
its stores do not overlap its loads. Memory from ``np.empty`` comes back from a call into
Numba's allocator, so LLVM must assume it may overlap every input array: a stencil loop that
reads 9 rows of an input and stores 3 rows of the buffer would need 9 checks, one more than
LLVM inserts by default, and the point values had to be copied into the buffer row by row
(one short loop each) before the algebra could vectorise. A stack slot that never escapes is
known to LLVM to overlap no argument, so loops that read any number of input rows and write
only the buffer need no run-time checks at all (LLVM's alias analysis of identified local
objects; common practice).
The machine code of such loops holds packed arithmetic (checked with ``inspect_asm`` on an
uncached serial copy). Speed: ``benchmarks/bench_conservation.py`` (see README "Speed").

The array has no memory owner (``meminfo`` is null, as for arrays made from raw pointers), so
it must not outlive the function that creates it: never return it, store it in another array
or hand it to Python. The size must fit the threads' stacks: a few hundred KiB at most
(a worker thread's stack is 2 MiB or more with every Numba threading layer; from memory).
"""

from __future__ import annotations

from numba import types
from numba.core import cgutils
from numba.core.errors import TypingError
from numba.extending import intrinsic

__all__ = ["strip_buffer", "MAX_STRIP_BUFFER_BYTES"]

#: Largest stack slot :func:`strip_buffer` gives (bytes): a quarter of a 2 MiB thread stack.
MAX_STRIP_BUFFER_BYTES = 512 * 1024


@intrinsic(prefer_literal=True)
def strip_buffer(typingctx, rows, points, like):
    """A C-ordered (rows, points) array of ``like``'s dtype on the calling thread's stack.

    ``rows`` and ``points`` must be compile-time integer constants (literals or module-level
    constants); the values are not initialised.
    """
    if not (isinstance(rows, types.IntegerLiteral) and isinstance(points, types.IntegerLiteral)):
        raise TypingError(f"strip_buffer needs literal integer sizes (module constants), found "
                          f"{rows} and {points}")
    if not isinstance(like, types.Array):
        raise TypingError(f"strip_buffer takes its dtype from an array, found {like}")
    nrows = rows.literal_value
    npoints = points.literal_value
    dtype = like.dtype
    result = types.Array(dtype, 2, "C")

    def codegen(context, builder, signature, arguments):
        element = context.get_data_type(dtype)
        itemsize = context.get_abi_sizeof(element)
        if nrows < 1 or npoints < 1 or nrows * npoints * itemsize > MAX_STRIP_BUFFER_BYTES:
            raise ValueError(f"strip_buffer: rows * points * itemsize must be 1 to "
                             f"{MAX_STRIP_BUFFER_BYTES} bytes, found {nrows} * {npoints} * "
                             f"{itemsize}")
        intp = lambda value: context.get_constant(types.intp, value)  # noqa: E731
        with builder.goto_entry_block():
            data = builder.alloca(element, size=intp(nrows * npoints), name="strip_buffer")
            data.align = 64
        array = context.make_array(result)(context, builder)
        context.populate_array(
            array, data=data, shape=cgutils.pack_array(builder, [intp(nrows), intp(npoints)]),
            strides=cgutils.pack_array(builder, [intp(npoints * itemsize), intp(itemsize)]),
            itemsize=intp(itemsize), meminfo=None)
        return array._getvalue()

    return result(rows, points, like), codegen
