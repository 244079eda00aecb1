"""Small numerical tools shared by the physics modules.

Kept here, rather than taken from ``scipy.optimize``, because importing that
package costs about 0.16 s at every start of the command line, more than the
work these calls do.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from synth.errors import ModelError

EPS = 2.220446049250313e-16
"""Machine epsilon of IEEE 754 double precision (2**-52)."""


def bracketed_root(f: Callable[[float], float], a: float, b: float, *,
                   xtol: float = 2e-12, rtol: float = 4 * EPS, max_iter: int = 100) -> float:
    """Find a root of ``f`` between ``a`` and ``b``, where ``f`` changes sign, by Brent's method.

    Inverse quadratic interpolation or secant steps while they make fast progress,
    bisection otherwise, so the bracket always shrinks and the worst case is that of
    bisection.  Stops when the bracket is narrower than about ``xtol + 4 rtol |x|``.

    Raises
    ------
    ModelError
        If ``f(a)`` and ``f(b)`` have the same sign, or after ``max_iter`` steps.

    References
    ----------
    Brent, R. P. (1973). Algorithms for Minimization without Derivatives,
        Prentice-Hall, chapter 4 (the procedure *zero*).
    """
    fa, fb = float(f(a)), float(f(b))
    if fa == 0.0:
        return float(a)
    if fb == 0.0:
        return float(b)
    if math.copysign(1.0, fa) == math.copysign(1.0, fb):
        raise ModelError(f"no sign change of the function between {a:g} and {b:g}")
    c, fc = a, fa
    step = previous = b - a
    for _ in range(max_iter):
        if math.copysign(1.0, fb) == math.copysign(1.0, fc):
            c, fc = a, fa  # keep the root between b and c
            step = previous = b - a
        if abs(fc) < abs(fb):  # b is the best estimate so far
            a, fa = b, fb
            b, fb = c, fc
            c, fc = a, fa
        tol = 2.0 * rtol * abs(b) + 0.5 * xtol
        half = 0.5 * (c - b)
        if abs(half) <= tol or fb == 0.0:
            return float(b)
        if abs(previous) >= tol and abs(fa) > abs(fb):
            s = fb / fa
            if a == c:  # two points: secant
                p, q = 2.0 * half * s, 1.0 - s
            else:  # three points: inverse quadratic interpolation
                qa, r = fa / fc, fb / fc
                p = s * (2.0 * half * qa * (qa - r) - (b - a) * (r - 1.0))
                q = (qa - 1.0) * (r - 1.0) * (s - 1.0)
            if p > 0.0:
                q = -q
            else:
                p = -p
            if 2.0 * p < min(3.0 * half * q - abs(tol * q), abs(previous * q)):
                previous, step = step, p / q  # accept the interpolation
            else:
                previous = step = half  # bisect
        else:
            previous = step = half
        a, fa = b, fb
        b += step if abs(step) > tol else math.copysign(tol, half)
        fb = float(f(b))
    raise ModelError(f"no root found to {xtol:g} between {a:g} and {c:g} in {max_iter} steps")


def beta_function(a: float, b: float) -> float:
    """Euler's beta function B(a, b) = Gamma(a) Gamma(b) / Gamma(a + b), a, b > 0."""
    return math.exp(math.lgamma(a) + math.lgamma(b) - math.lgamma(a + b))
