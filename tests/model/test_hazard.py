"""Escape functions against their defining formulas; derivatives against finite differences."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import norm

from popdens import hazard

U = np.linspace(-5.0, 30.0, 15)


def test_formulas():
    np.testing.assert_allclose(hazard.Exponential(10.0, 2.0).rate(U, 20.0), 10.0 * np.exp((U - 20.0) / 2.0))
    np.testing.assert_allclose(hazard.Linear(3.0).rate(U, 20.0), 3.0 * np.maximum(0.0, U - 20.0))
    # (1 + erf(x/sqrt2))/2 is the standard normal CDF
    np.testing.assert_allclose(hazard.ErfEscape(200.0, 1.5).rate(U, 20.0), 200.0 * norm.cdf((U - 20.0) / 1.5))
    # Arrhenius & current (Plesser & Gerstner 2000): [c1/tau + c2/sigma [du/dt]_+] exp(-[theta-u]_+^2/sigma^2)
    ac = hazard.ArrheniusCurrent(sigma=2.0, tau=10.0, c1=0.7, c2=1.1)
    dudt = np.linspace(-1.0, 1.0, U.size)
    expected = 1000.0 * (0.7 / 10.0 + 1.1 * np.maximum(dudt, 0) / 2.0) * np.exp(-np.maximum(20.0 - U, 0) ** 2 / 4.0)
    np.testing.assert_allclose(ac.rate(U, 20.0, dudt), expected)
    cu = hazard.CustomEscape("a*max(u - threshold, 0)**2", {"a": 0.5})
    np.testing.assert_allclose(cu.rate(U, 20.0), 0.5 * np.maximum(U - 20.0, 0) ** 2)


@pytest.mark.parametrize(
    "h",
    [hazard.Exponential(10.0, 2.0), hazard.ErfEscape(200.0, 1.5),
     hazard.ArrheniusCurrent(2.0, 10.0, 0.7, 1.1), hazard.CustomEscape("r*exp(u - threshold)", {"r": 3.0})],
)
def test_slopes_match_central_differences(h):
    u = np.linspace(10.0, 19.0, 9)  # away from kinks
    eps = 1e-6
    fd = (h.rate(u + eps, 20.0, 0.3) - h.rate(u - eps, 20.0, 0.3)) / (2 * eps)
    np.testing.assert_allclose(h.slope(u, 20.0, 0.3), fd, rtol=1e-6, atol=1e-9)


def test_invalid_parameters():
    for call, name in [
        (lambda: hazard.Exponential(0.0, 1.0), "rate"),
        (lambda: hazard.Exponential(1.0, -1.0), "width"),
        (lambda: hazard.Linear(-2.0), "slope"),
        (lambda: hazard.ErfEscape(math.nan, 1.0), "max_rate"),
        (lambda: hazard.ArrheniusCurrent(0.0, 1.0, 1.0, 1.0), "sigma"),
        (lambda: hazard.ArrheniusCurrent(1.0, 1.0, 0.0, 0.0), "c1"),
    ]:
        with pytest.raises(ValueError, match=f"`{name}`"):
            call()
