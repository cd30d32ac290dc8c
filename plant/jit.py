"""The JIT of the plant's kernels: numba's ``njit`` when installed (cached, no GIL, numpy's
error model), otherwise the plain Python function."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path


def _cache_dir() -> str:
    """numba's cache, in a folder named by a digest of every plant module: numba keys its
    cache on the one source file of a kernel, not on the layout constants that kernel reads
    from ``plant.layout``, so a changed layout would otherwise run kernels compiled against
    the old one."""
    here = Path(__file__).resolve().parent
    h = hashlib.sha256()
    for f in sorted(here.glob("*.py")):
        h.update(f.name.encode() + b"\0" + f.read_bytes())
    base = os.environ.get("NUMBA_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.expanduser("~/.cache"), "pfcrig"
    )
    return os.path.join(base, f"numba-{h.hexdigest()[:16]}")


try:  # numba compiles the kernels; without it they run as Python
    import numba
    from numba import njit as _njit

    numba.config.CACHE_DIR = _cache_dir()  # read when each kernel below is decorated

    def jit(fn):
        # error_model="numpy": a division by zero gives inf/nan as in numpy, with no check per
        # division
        return _njit(cache=True, nogil=True, error_model="numpy")(fn)

    def jit_inline(fn):
        """A small helper, inlined where it is called (no call, no reference counting of its
        array arguments)."""
        return _njit(cache=True, nogil=True, error_model="numpy", inline="always")(fn)

    def jit_parallel(fn):
        """A kernel whose ``numba.prange`` loops run on numba's threads."""
        return _njit(cache=True, nogil=True, error_model="numpy", parallel=True)(fn)

    COMPILED = True
except ImportError:  # pragma: no cover - exercised only where numba is missing

    def jit(fn):
        return fn

    jit_inline = jit
    jit_parallel = jit
    COMPILED = False
