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


@pytest.mark.parametrize(("name", "f", "a", "b"), CASES, ids=[c[0] for c in CASES])
def test_matches_scipy_brentq(name, f, a, b) -> None:
    calls = [0]

    def counted(x):
        calls[0] += 1
        return f(x)

    mine = bracketed_root(counted, a, b, xtol=1e-14, rtol=4 * EPS)
    ref, info = brentq(f, a, b, xtol=1e-14, rtol=4 * EPS, full_output=True)
    assert mine == pytest.approx(ref, abs=4e-14 + 8 * EPS * abs(ref)), name
    assert calls[0] <= info.function_calls + 4, (calls[0], info.function_calls)


def test_known_roots() -> None:
    # free-free beam, first root of cos x cosh x = 1 (Blevins, table 8-1): 4.73004074
    assert bracketed_root(lambda x: math.cos(x) * math.cosh(x) - 1.0, 4.0, 5.0,
                          xtol=1e-14) == pytest.approx(4.730040744862704, abs=1e-12)
    assert bracketed_root(lambda x: x * x - 2.0, 0.0, 2.0, xtol=1e-15) == pytest.approx(
        math.sqrt(2.0), abs=1e-15)


def test_no_sign_change_is_refused() -> None:
    with pytest.raises(ModelError, match="no sign change"):
        bracketed_root(lambda x: x * x + 1.0, -1.0, 1.0)


@pytest.mark.parametrize("a", [0.05, 0.2, 0.4, 1.0, 2.5, 7.0])
@pytest.mark.parametrize("b", [0.5, 1.0, 3.0])
def test_beta_function_matches_scipy(a: float, b: float) -> None:
    assert beta_function(a, b) == pytest.approx(float(beta(a, b)), rel=1e-13)


def test_beta_function_closed_forms() -> None:
    # B(1/2, 1/2) = pi and B(a, 1) = 1/a, from B = Gamma(a) Gamma(b) / Gamma(a + b) with
    # Gamma(1/2) = sqrt(pi) (Abramowitz & Stegun, ch. 6; equation numbers from memory)
    assert beta_function(0.5, 0.5) == pytest.approx(math.pi, rel=1e-14)
    for a in np.linspace(0.1, 5.0, 7):
        assert beta_function(float(a), 1.0) == pytest.approx(1.0 / a, rel=1e-14)
