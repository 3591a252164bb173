"""Brent's root finder against scipy.optimize.brentq on the same functions.

Oracle: scipy.optimize.brentq (the reference implementation of the same
algorithm); the roots agree to the tolerance asked of both.
"""
import math

import numpy as np
import pytest
from scipy.optimize import brentq

from freqpair.analysis.roots import RootError, brent_root

CASES = [
    (lambda x: x**3 - 2 * x - 5, 2.0, 3.0),                       # Wallis's cubic
    (lambda x: math.cos(x) - x, 0.0, 1.0),
    (lambda x: math.exp(x) - 10.0, 0.0, 5.0),
    (lambda x: x**3 - 1.0, -2.0, 3.0),
    (lambda x: math.atan(1e6 * (x - 0.3)), 0.0, 1.0),              # a step
    (lambda x: 20 * math.log10(1 / math.hypot(1, 10 ** x / 1e3)) + 3.0103, 0.0, 6.0),  # −3 dB
]


@pytest.mark.parametrize("f, a, b", CASES)
def test_root_matches_scipy_brentq(f, a, b):
    ours = brent_root(f, a, b, xtol=1e-14, rtol=1e-14)
    ref = brentq(f, a, b, xtol=1e-14, rtol=1e-14)
    assert ours == pytest.approx(ref, abs=1e-12)


def test_same_sign_ends_are_refused():
    with pytest.raises(RootError, match="same sign"):
        brent_root(lambda x: x * x + 1, -1.0, 1.0)


def test_exact_root_at_an_end_is_returned():
    assert brent_root(lambda x: x - 2.0, 2.0, 5.0) == 2.0
    assert brent_root(lambda x: x - 5.0, 2.0, 5.0) == 5.0


def test_many_random_cubics_agree_with_scipy():
    rng = np.random.default_rng(7)
    for _ in range(200):
        r = rng.uniform(-5, 5)
        c = rng.uniform(0.1, 3)
        f = (lambda x, r=r, c=c: (x - r) * ((x - r) ** 2 + c))
        assert brent_root(f, -6.0, 6.0, xtol=1e-13, rtol=1e-14) == pytest.approx(r, abs=1e-12)
