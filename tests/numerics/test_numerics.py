"""The bracketed root finder and the beta function against scipy (reference library).

scipy.optimize.brentq implements the same published method (Brent 1973, chapter 4);
scipy.special.beta is the reference for B(a, b).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.special import beta

from synth.errors import ModelError
from synth.numerics import EPS, beta_function, bracketed_root

CASES = [
    # roots quoted from memory; the assertion is against scipy
    ("cubic", lambda x: x**3 - 2.0 * x - 5.0, 2.0, 3.0),  # Wallis' cubic, 2.0945514815...
    ("cos", lambda x: math.cos(x) - x, 0.0, 1.0),  # Dottie number 0.7390851332...
    ("flat", lambda x: (x - 1.0) ** 5 + 1e-3 * (x - 1.0), 0.0, 3.0),
    ("steep", lambda x: math.expm1(30.0 * (x - 0.3)), -1.0, 1.0),
    ("tiny root", lambda x: x - 1e-9, -1.0, 1.0),
    ("beam", lambda x: math.cos(x) * math.cosh(x) - 1.0, 4.0, 5.0),  # 4.73004074...
]


XTOL = 1e-14
RTOL = 4 * EPS


def _counted(f):
    calls = [0]

    def g(x):
        calls[0] += 1
        return f(x)

    return g, calls


@pytest.mark.parametrize(("name", "f", "a", "b"), CASES, ids=[c[0] for c in CASES])
def test_matches_scipy_brentq(name, f, a, b) -> None:
    """The same root as scipy's brentq (same published method), within both tolerances."""
    mine = bracketed_root(f, a, b, xtol=XTOL, rtol=RTOL)
    ref = brentq(f, a, b, xtol=XTOL, rtol=RTOL)
    assert mine == pytest.approx(ref, abs=4e-14 + 8 * EPS * abs(ref)), name


@pytest.mark.parametrize(("name", "f", "a", "b"), CASES, ids=[c[0] for c in CASES])
def test_root_is_bracketed_within_the_stated_width(name, f, a, b) -> None:
    """Brent's guarantee: f changes sign within xtol + 4 rtol |x| of the returned x.

    The procedure stops only when the bracket [b, c] around the root is at most
    2 (2 rtol |b| + xtol / 2) wide (Brent 1973, ch. 4; the docstring's promise), so
    f must change sign between x - w and x + w, w = xtol + 4 rtol |x|. Checked
    directly on f, with no reference to any other implementation.
    """
    x = bracketed_root(f, a, b, xtol=XTOL, rtol=RTOL)
    w = XTOL + 4 * RTOL * abs(x)
    lo, hi = f(x - w), f(x + w)
    assert lo == 0.0 or hi == 0.0 or math.copysign(1.0, lo) != math.copysign(1.0, hi), name


@pytest.mark.parametrize(("name", "f", "a", "b"), CASES, ids=[c[0] for c in CASES])
def test_superlinear_convergence_on_simple_roots(name, f, a, b) -> None:
    """Far fewer evaluations than bisection, and few more for a much tighter tolerance.

    Bisection needs k = log2((b - a) / xtol) evaluations, one bit each: 46-48 here
    for xtol = 1e-14 (the worst case Brent's method falls back to). On these smooth
    functions with simple roots the interpolation steps converge superlinearly
    (order about 1.8 for inverse quadratic interpolation; Brent 1973, ch. 3-4, from
    memory), so at most k / 2 evaluations are allowed, and tightening the tolerance
    from 1e-6 to 1e-14 (26 more bits) may cost at most 8 more, where bisection would
    need 26 (measured: 4-17 evaluations in all, 0-2 more for the tighter tolerance).
    """
    g, calls = _counted(f)
    bracketed_root(g, a, b, xtol=XTOL, rtol=RTOL)
    tight = calls[0]
    g, calls = _counted(f)
    bracketed_root(g, a, b, xtol=1e-6, rtol=RTOL)
    loose = calls[0]
    bisection = math.log2((b - a) / XTOL)
    assert tight <= bisection / 2, (tight, bisection)
    assert tight - loose <= 8, (tight, loose)


def test_known_roots() -> None:
    """Roots known in closed form or from a published table."""
    # free-free beam, first root of cos x cosh x = 1 (Blevins, table 8-1): 4.73004074
    assert bracketed_root(lambda x: math.cos(x) * math.cosh(x) - 1.0, 4.0, 5.0,
                          xtol=1e-14) == pytest.approx(4.730040744862704, abs=1e-12)
    assert bracketed_root(lambda x: x * x - 2.0, 0.0, 2.0, xtol=1e-15) == pytest.approx(
        math.sqrt(2.0), abs=1e-15)


def test_no_sign_change_is_refused() -> None:
    """Without a sign change there is no bracket: ModelError."""
    with pytest.raises(ModelError, match="no sign change"):
        bracketed_root(lambda x: x * x + 1.0, -1.0, 1.0)


@pytest.mark.parametrize("a", [0.05, 0.2, 0.4, 1.0, 2.5, 7.0])
@pytest.mark.parametrize("b", [0.5, 1.0, 3.0])
def test_beta_function_matches_scipy(a: float, b: float) -> None:
    """B(a, b) against scipy.special.beta (reference library)."""
    assert beta_function(a, b) == pytest.approx(float(beta(a, b)), rel=1e-13)


def test_beta_function_closed_forms() -> None:
    """B(1/2, 1/2) = pi and B(a, 1) = 1/a."""
    # B(1/2, 1/2) = pi and B(a, 1) = 1/a, from B = Gamma(a) Gamma(b) / Gamma(a + b) with
    # Gamma(1/2) = sqrt(pi) (Abramowitz & Stegun, ch. 6; equation numbers from memory)
    assert beta_function(0.5, 0.5) == pytest.approx(math.pi, rel=1e-14)
    for a in np.linspace(0.1, 5.0, 7):
        assert beta_function(float(a), 1.0) == pytest.approx(1.0 / a, rel=1e-14)
