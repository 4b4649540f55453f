"""Numba kernels of emsource: pure functions over arrays.

Nothing here validates arguments, reads files or builds Python objects; the public wrappers in
``emsource`` do that and then make one kernel call. Every kernel is compiled through
:mod:`emsource.kernels._compile`, which owns Numba's options (on-disk cache, parallel, fastmath
flags that keep NaN and Inf checks alive). Kernels compile lazily on first call, per signature.
"""
