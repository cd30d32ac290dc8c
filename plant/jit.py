"""The JIT of the plant's kernels: numba's ``njit`` when installed (cached, no GIL, numpy's
error model), otherwise the plain Python function."""

from __future__ import annotations

try:  # numba compiles the kernels; without it they run as Python
    from numba import njit as _njit

    def jit(fn):
        # error_model="numpy": a division by zero gives inf/nan as in numpy, with no check per
        # division
        return _njit(cache=True, nogil=True, error_model="numpy")(fn)

    def jit_inline(fn):
        """A small helper, inlined where it is called (no call, no reference counting of its
        array arguments)."""
        return _njit(cache=True, nogil=True, error_model="numpy", inline="always")(fn)

    COMPILED = True
except ImportError:  # pragma: no cover - exercised only where numba is missing

    def jit(fn):
        return fn

    jit_inline = jit
    COMPILED = False
