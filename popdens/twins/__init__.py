"""Monte Carlo twins: direct simulations of the neurons each prediction describes.

:mod:`.population` is the front end for one population, :mod:`.agreement` tests a twin against a
prediction; the compiled kernels are private
(:mod:`._escape`, :mod:`._diffusive`, :mod:`._network` — the last is driven by
:func:`popdens.network.montecarlo_network`)."""

from .agreement import Agreement, agreement
from .population import montecarlo

__all__ = [
    "Agreement", "agreement", "montecarlo",
]
