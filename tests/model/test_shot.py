"""ShotNoise: validation (errors name the parameter) and the moments of the diffusion approximation."""

from __future__ import annotations

import math

import pytest

import popdens


def test_errors_name_the_parameter():
    with pytest.raises(ValueError, match="`exc_rate`"):
        popdens.ShotNoise(-1.0, 0.5)
    with pytest.raises(ValueError, match="`exc_psp`"):
        popdens.ShotNoise(100.0, 0.0)
    with pytest.raises(ValueError, match="`inh_psp`"):
        popdens.ShotNoise(100.0, 0.5, inh_rate=50.0)
    with pytest.raises(ValueError, match="`amplitudes`"):
        popdens.ShotNoise(100.0, 0.5, amplitudes="gamma")
    with pytest.raises(ValueError, match="MovingThreshold"):
        popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0, adaptation=[popdens.MovingThreshold(30.0, 1.0)]),
                           popdens.ShotNoise(100.0, 0.5))


@pytest.mark.parametrize("law,m2", [("fixed", 1.0), ("exponential", 2.0)])
def test_diffusion_moments_follow_campbells_theorem(law, m2):
    """Campbell's theorem (e.g. Tuckwell 1988, vol. 2): a Poisson train of jumps a at rate nu adds mean
    nu <a> and variance nu <a^2> per ms; in the white-noise convention sigma^2 = tau_m x that variance.
    <a^2> = a^2 (fixed), 2 a^2 (exponential)."""
    n = popdens.ShotNoise(2000.0, 0.3, 500.0, 0.8, law)
    tau = 15.0
    # Campbell's theorem (Campbell 1909; Tuckwell 1988, vol. 2), rates 2 and 0.5 per ms
    assert n.mean_input(tau) == pytest.approx(tau * (2.0 * 0.3 - 0.5 * 0.8), rel=1e-14)  # Campbell (1909): mean
    sigma = math.sqrt(tau * m2 * (2.0 * 0.09 + 0.5 * 0.64))  # Campbell (1909): sigma^2 = tau_m nu <a^2>
    assert n.diffusion_sigma(tau) == pytest.approx(sigma, rel=1e-14)  # Campbell's theorem (Campbell 1909)
