"""Floating-point operations per interior point of the constraint kernel, counted as written.

Run:  python benchmarks/constraint_flops.py

Runs the Python source of ``kernels.constraints.adm_constraints_grid`` (and of every point
function it calls) on a small grid whose values are a float subclass that counts +, -, *, /
and sqrt. Loop bookkeeping, comparisons, abs and max are not counted; a multiply-add counts 2,
as in a peak figure of 2 flops per FMA lane. The count per point is the difference between
runs over one grid column of ``LONG`` and ``SHORT`` interior points along z, divided by
``LONG - SHORT``: the strip kernel's once-per-strip set-up (weights times 1/h) is not counted
as work per point. The compiled kernel may do fewer (LLVM removes common subexpressions and
multiplications by 0), so the rate derived from this count is an upper estimate of the work
done. The same count of the point-at-a-time kernel that preceded the strips
(``constraint_point_kernel.py``) is given for comparison. ``bench_constraints.py`` divides
these counts by its measured seconds per point for the GFLOP/s.
"""

import math
import types
from collections import Counter

import numpy as np

from constraint_point_kernel import SYM, point_at_a_time_constraints
from emsource.kernels import constraints as kernel_module
from emsource.kernels.stencils import first_derivative_weights, second_derivative_weights

#: Interior points along z of the two counting runs (LONG - SHORT of them are counted).
SHORT, LONG = 1, 9

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


def _count(kernel, order, interior_along_z, point_kernel):
    radius = order // 2
    n = 2 * radius + 1  # one interior column in the middle
    shape = (n, n, 2 * radius + interior_along_z)
    rng = np.random.default_rng(1)
    identity = np.array([1, 0, 0, 1, 0, 1.0])[:, None, None, None]
    gamma = counting_array((6,) + shape, rng, 0.05, identity)
    K = counting_array((6,) + shape, rng, 0.1)
    rho = counting_array(shape, rng, 0.1)
    S = counting_array((3,) + shape, rng, 0.1)
    interior = np.zeros(shape, np.uint8)
    interior[radius, radius, radius:shape[2] - radius] = 1
    as_counting = lambda w: np.array([CountingFloat(x) for x in w], dtype=object)  # noqa: E731
    outputs = [np.empty(s, dtype=object) for s in (shape, (3,) + shape, shape, (3,) + shape)]
    extra = (SYM,) if point_kernel else ()
    COUNTS.clear()
    kernel(gamma, K, rho, S, interior, as_counting(first_derivative_weights(order)),
           as_counting(second_derivative_weights(order)), as_counting([1.0] * 3), *extra,
           CountingFloat(16 * math.pi), CountingFloat(8 * math.pi), *outputs)
    return Counter(COUNTS)


def flops_per_point(order, point_kernel=False):
    """(operations per interior point, their kinds) of the strip kernel, or with
    ``point_kernel`` of the point-at-a-time kernel it replaced."""
    dispatcher = point_at_a_time_constraints if point_kernel else kernel_module.adm_constraints_grid
    kernel = interpreted(dispatcher, {})
    short = _count(kernel, order, SHORT, point_kernel)
    long = _count(kernel, order, LONG, point_kernel)
    detail = {op: (long[op] - short[op]) / (LONG - SHORT) for op in long}
    return sum(detail.values()), detail


if __name__ == "__main__":
    for order in (2, 4, 6):
        total, detail = flops_per_point(order)
        before, _ = flops_per_point(order, point_kernel=True)
        print(f"order {order}: {total:.0f} floating-point operations per interior point "
              f"({detail}); the point-at-a-time kernel: {before:.0f}")
