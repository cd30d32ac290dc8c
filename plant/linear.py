"""Exact solution of a batch of 2-state linear systems ``x' = A x + b`` over a step.

``x(t) = x0 + t * sum_{j>=1} (t A)^(j-1)/j! (A x0 + b)`` summed by Horner to an
order chosen from a bound on ``|A| t`` so that the truncation error stays below
1e-16 relative (the series of the matrix exponential, not an Euler step); steps
with ``|A| t > 0.5`` are split.  The bound on ``|A| t`` may be given by the caller
(for any norm in which it holds: the error bound is in that norm).  Arrays have shape ``(n,)``; ``A`` is given by its
four entries.
"""
from __future__ import annotations

import math

import numpy as np

_FACT = [math.factorial(k) for k in range(40)]


def _order(rho: float) -> int:
    """Smallest K whose first omitted term, rho^K/(K+1)!, is below 1e-16 (rho <= 0.5)."""
    k = 1
    while k < 30 and rho**k / _FACT[k + 1] > 1e-16:
        k += 1
    return k


def plan(rho: float) -> tuple[int, int]:
    """(pieces, order) for a step whose ``|A| t`` is at most ``rho``."""
    pieces = max(1, int(math.ceil(rho / 0.5)))
    return pieces, _order(rho / pieces)


def advance(a11, a12, a21, a22, b1, b2, x1, x2, t, rho=None):
    """State after time ``t`` (s, array or scalar) from ``(x1, x2)``.

    ``rho``: a bound on ``|A| t`` fixed by the caller; the default takes it from the
    data.  A fixed bound makes each lane's result independent of the other lanes."""
    t = np.asarray(t, dtype=float)
    if rho is None:
        norm = np.maximum(np.abs(a11) + np.abs(a12), np.abs(a21) + np.abs(a22))
        rho = float(np.max(norm * t)) if np.size(t) else 0.0
    pieces, k = plan(rho)
    h = t / pieces
    for _ in range(pieces):
        w1 = a11 * x1 + a12 * x2 + b1
        w2 = a21 * x1 + a22 * x2 + b2
        y1, y2 = w1, w2
        for j in range(k, 1, -1):
            c = h / j
            y1, y2 = w1 + c * (a11 * y1 + a12 * y2), w2 + c * (a21 * y1 + a22 * y2)
        x1, x2 = x1 + h * y1, x2 + h * y2
    return x1, x2
