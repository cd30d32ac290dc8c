"""Step plan of the exact solution of 2-state linear systems ``x' = A x + b``.

``x(t) = x0 + t * sum_{j>=1} (t A)^(j-1)/j! (A x0 + b)`` (``plant.kernel``) summed
to an order chosen from a bound on ``|A| t`` so that the truncation error stays below
1e-16 relative (the series of the matrix exponential, not an Euler step); steps
with ``|A| t > 0.5`` are split.  The bound holds in whatever norm the caller took it in
(the error bound is in that norm).
"""

from __future__ import annotations

import math

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
