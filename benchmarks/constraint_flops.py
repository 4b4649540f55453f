"""Floating-point operations per interior point of the constraint kernel, counted as written.

Run:  python benchmarks/constraint_flops.py

Runs the Python source of ``kernels.constraints.adm_constraints_grid`` (and of every point
function it calls) on a small grid whose values are a float subclass that counts +, -, *, /
and sqrt. Loop bookkeeping, comparisons, abs and max are not counted; a multiply-add counts 2,
as in a peak figure of 2 flops per FMA lane. The count per point is the mixed difference of
four runs over one x-plane of ``SHORT`` or ``LONG`` interior columns along y, each of
``SHORT`` or ``LONG`` interior points along z, divided by ``(LONG - SHORT)^2``: work done once
per strip (weights times 1/h), once per column (the ends of the z-strip widened by the stencil
radius) or once per walk along y (the first 2 r columns that enter the ring of d_x g) drops
out, so the count is the work per point of a large grid. The compiled kernel may do fewer
(LLVM removes common subexpressions and multiplications by 0), so the rate derived from this
count is an upper estimate of the work done. The same count of main's kernel at
``bench_constraints.BEFORE`` and of the point-at-a-time kernel at
``bench_constraints.POINT_AT_A_TIME`` (both read from git with
``kernel_revision.revision_module``) is given for comparison. ``bench_constraints.py`` divides
these counts by its measured seconds per point for the GFLOP/s.
"""

import math
import types
from collections import Counter

import numpy as np

from kernel_revision import revision_module
from emsource.kernels import constraints as kernel_module
from emsource.kernels.stencils import first_derivative_weights, second_derivative_weights

#: Interior columns along y and points along z of the counting runs (module docstring).
SHORT, LONG = 1, 9

#: Revisions of kernels/constraints.py counted beside the current kernel: main's strip kernel
#: before the contracted scalar curvature (it built the six rows of R_ij from 36 rows of second
#: derivatives), and the last point-at-a-time kernel.
BEFORE = "186142a"
POINT_AT_A_TIME = "3ae0157"

#: Packed component of the index pair (a, b) of a symmetric 3x3 tensor (the point-at-a-time
#: kernel takes it as an argument).
PACKED_PAIR = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]], dtype=np.int64)

COUNTS = Counter()


class CountingFloat(float):
    """A float whose arithmetic is tallied in COUNTS."""


def _counted(op):
    def method(self, other):
        COUNTS[op] += 1
        return CountingFloat(getattr(float, f"__{op}__")(self, other))
    return method


for _op in ("add", "sub", "mul", "truediv", "radd", "rsub", "rmul", "rtruediv"):
    setattr(CountingFloat, f"__{_op}__", _counted(_op))
CountingFloat.__neg__ = lambda self: CountingFloat(-float(self))
CountingFloat.__abs__ = lambda self: CountingFloat(abs(float(self)))


def _sqrt(x):
    COUNTS["sqrt"] += 1
    return CountingFloat(math.sqrt(x))


def interpreted(dispatcher, seen):
    """The Python function behind a Numba dispatcher, with every dispatcher it calls replaced
    likewise, np.empty giving object arrays (so that counting floats survive) and prange
    as range."""
    function = getattr(dispatcher, "py_func", dispatcher)
    if not isinstance(function, types.FunctionType):
        return dispatcher
    if function in seen:
        return seen[function]
    namespace = dict(function.__globals__)
    copy = types.FunctionType(function.__code__, namespace, function.__name__,
                              function.__defaults__, function.__closure__)
    seen[function] = copy
    for name, value in list(namespace.items()):
        if hasattr(value, "py_func"):
            namespace[name] = interpreted(value, seen)
    fake_np = types.SimpleNamespace(**{k: getattr(np, k) for k in dir(np) if not k.startswith("__")})
    fake_np.empty = lambda shape, dtype=None: np.empty(shape, dtype=object)
    fake_np.nan = CountingFloat(math.nan)
    fake_math = types.SimpleNamespace(**{k: getattr(math, k) for k in dir(math)
                                         if not k.startswith("__")})
    fake_math.sqrt = _sqrt
    namespace.update(np=fake_np, prange=range, math=fake_math)
    if "strip_buffer" in namespace:  # a buffer on the thread's stack: an object array here
        namespace["strip_buffer"] = lambda rows, points, like: np.empty((rows, points), dtype=object)
    if "sqrt" in namespace:
        namespace["sqrt"] = _sqrt
    return copy


def counting_array(shape, rng, scale, offset=None):
    values = rng.uniform(-scale, scale, shape) + (0.0 if offset is None else offset)
    array = np.empty(shape, dtype=object)
    for index in np.ndindex(shape):
        array[index] = CountingFloat(values[index])
    return array


def _count(kernel, order, columns_along_y, interior_along_z, point_kernel):
    radius = order // 2
    shape = (2 * radius + 1, 2 * radius + columns_along_y, 2 * radius + interior_along_z)
    rng = np.random.default_rng(1)
    identity = np.array([1, 0, 0, 1, 0, 1.0])[:, None, None, None]
    gamma = counting_array((6,) + shape, rng, 0.05, identity)
    K = counting_array((6,) + shape, rng, 0.1)
    rho = counting_array(shape, rng, 0.1)
    S = counting_array((3,) + shape, rng, 0.1)
    interior = np.zeros(shape, np.uint8)
    interior[radius, radius:shape[1] - radius, radius:shape[2] - radius] = 1
    as_counting = lambda w: np.array([CountingFloat(x) for x in w], dtype=object)  # noqa: E731
    outputs = [np.empty(s, dtype=object) for s in (shape, (3,) + shape, shape, (3,) + shape)]
    extra = (PACKED_PAIR,) if point_kernel else ()
    COUNTS.clear()
    kernel(gamma, K, rho, S, interior, as_counting(first_derivative_weights(order)),
           as_counting(second_derivative_weights(order)), as_counting([1.0] * 3), *extra,
           CountingFloat(16 * math.pi), CountingFloat(8 * math.pi), *outputs)
    return Counter(COUNTS)


def flops_per_point(order, revision=None):
    """(operations per interior point, their kinds) of the current strip kernel, or of
    kernels/constraints.py at git ``revision`` (the point-at-a-time kernel at
    :data:`POINT_AT_A_TIME` takes the packed-pair table as an extra argument)."""
    module = kernel_module if revision is None else revision_module(revision, "constraints")
    kernel = interpreted(module.adm_constraints_grid, {})
    point_kernel = revision == POINT_AT_A_TIME
    runs = {(y, z): _count(kernel, order, y, z, point_kernel)
            for y in (SHORT, LONG) for z in (SHORT, LONG)}
    kinds = set().union(*runs.values())
    detail = {op: (runs[LONG, LONG][op] - runs[SHORT, LONG][op] - runs[LONG, SHORT][op]
                   + runs[SHORT, SHORT][op]) / (LONG - SHORT) ** 2 for op in kinds}
    return sum(detail.values()), detail


if __name__ == "__main__":
    for order in (2, 4, 6):
        total, detail = flops_per_point(order)
        before, _ = flops_per_point(order, BEFORE)
        point, _ = flops_per_point(order, POINT_AT_A_TIME)
        print(f"order {order}: {total:.0f} floating-point operations per interior point "
              f"({detail}); main's strip kernel at {BEFORE}: {before:.0f}; the point-at-a-time "
              f"kernel at {POINT_AT_A_TIME}: {point:.0f}")
