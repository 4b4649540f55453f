"""The per-loop vector width of kernels/_compile.py (``prefer_512_bit_vectors``).

LLVM's x86 back end reads the vector width of each function from its "prefer-vector-width"
attribute (LLVM Language Reference, "Function Attributes": string attributes are passed to the
back end; the x86 meaning of this one is from memory). The checks read the compiled code itself:
the attribute in the IR of the parallel loop's body, and, where the host has 512-bit vectors,
512-bit registers in its machine code and none in the same loop compiled without the call; a
host without them must get no 512-bit register either way (the preference never exceeds the
hardware).
"""

import numba
import numpy as np
from llvmlite import binding
from numba import prange

from emsource.kernels._compile import (FASTMATH_FLAGS, PREFERRED_WIDTH_ATTRIBUTE,
                                       prefer_512_bit_vectors)

# Compiled here, not through grid_kernel: the disk cache would hand back machine code without
# the IR this test reads (plain Numba options otherwise, as in _compile).
_OPTIONS = dict(parallel=True, fastmath=set(FASTMATH_FLAGS), error_model="numpy")


@numba.njit(**_OPTIONS)
def _wide(a, b, c):
    for i in prange(a.shape[0]):
        prefer_512_bit_vectors()
        for k in range(a.shape[1]):
            a[i, k] = b[i, k] * c[i, k] + b[i, k]


@numba.njit(**_OPTIONS)
def _default(a, b, c):
    for i in prange(a.shape[0]):
        for k in range(a.shape[1]):
            a[i, k] = b[i, k] * c[i, k] + b[i, k]


def _compiled(kernel):
    a = np.zeros((4, 256))
    b = np.arange(1024.0).reshape(4, 256)
    kernel(a, b, b)
    np.testing.assert_array_equal(a, b * b + b)  # the call changes nothing computed
    signature = kernel.signatures[0]
    return kernel.inspect_llvm(signature), kernel.inspect_asm(signature)


def _features():
    """The CPU features Numba compiles for: NUMBA_CPU_FEATURES where set, else the host's."""
    return numba.config.CPU_FEATURES or binding.get_host_cpu_features().flatten()


def _host_has_512_bit_vectors():
    return "+avx512f" in _features().split(",")


def test_the_loop_body_carries_the_width_attribute():
    attribute = f'"{PREFERRED_WIDTH_ATTRIBUTE}"="512"'
    wide_ir, _ = _compiled(_wide)
    default_ir, _ = _compiled(_default)
    assert attribute in wide_ir
    assert PREFERRED_WIDTH_ATTRIBUTE not in default_ir


def test_512_bit_registers_exactly_where_asked_and_the_host_has_them():
    """Asked for, 512-bit arithmetic appears exactly where the host has it. Not asked for, the
    width is LLVM's tuning for the host: 256 bits on the Intel parts this was first measured
    on, 512 on an AMD Zen 4 (seen: ``vfmadd132pd`` on zmm registers in ``_default``), never
    beyond the hardware."""
    _, wide_asm = _compiled(_wide)
    _, default_asm = _compiled(_default)
    assert ("zmm" in wide_asm) == _host_has_512_bit_vectors()
    if not _host_has_512_bit_vectors():
        assert "zmm" not in default_asm


def _guarded(wide):
    """The drivers' pattern (kernels/sources.py ``_adm_sources_flat_for(form, line_steps)``):
    the request behind a closure constant."""
    @numba.njit(**_OPTIONS)
    def kernel(a, b, c):
        for i in prange(a.shape[0]):
            if wide:
                prefer_512_bit_vectors()
            for k in range(a.shape[1]):
                a[i, k] = b[i, k] * c[i, k] + b[i, k]

    return kernel


def test_a_request_behind_a_false_closure_constant_leaves_no_attribute():
    """Numba prunes the branch on a constant, so the default drivers of a factory that guards
    the request with its ``line_steps`` argument carry no width attribute."""
    attribute = f'"{PREFERRED_WIDTH_ATTRIBUTE}"="512"'
    wide_ir, _ = _compiled(_guarded(True))
    default_ir, _ = _compiled(_guarded(False))
    assert attribute in wide_ir
    assert PREFERRED_WIDTH_ATTRIBUTE not in default_ir
