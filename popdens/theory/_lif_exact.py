"""Closed-form linear response of the white-noise LIF (parabolic-cylinder functions).

For ``tau du = (-(u - rest) + mu) dt + sigma sqrt(tau) dW`` with threshold
``theta``, reset ``u_r`` and refractory period ``tau_ref``, write time in
units of ``tau``, ``D = sigma^2 / 2``, ``y_T = (mu + rest - theta)/sqrt(D)``,
``y_R = (mu + rest - u_r)/sqrt(D)`` and ``Delta = (y_R^2 - y_T^2)/4``.  With
``D_a(z)`` the parabolic-cylinder function and ``w`` the dimensionless
angular frequency (Brunel & Hakim 1999, Neural Comput. 11:1621; Lindner &
Schimansky-Geier 2001, Phys. Rev. Lett. 86:2934),

.. math::
    \\chi_\\mu(w) = \\frac{r_0\\, i w}{\\sqrt{D}\\,(i w - 1)}
        \\frac{D_{iw-1}(y_T) - e^{\\Delta} D_{iw-1}(y_R)}
             {D_{iw}(y_T) - e^{\\Delta} e^{i w \\tau_{ref}} D_{iw}(y_R)},

.. math::
    \\chi_D(w) = \\frac{r_0\\, i w (i w - 1)}{D\\,(2 - i w)}
        \\frac{D_{iw-2}(y_T) - e^{\\Delta} D_{iw-2}(y_R)}
             {D_{iw}(y_T) - e^{\\Delta} e^{i w \\tau_{ref}} D_{iw}(y_R)},

for modulations of ``mu`` and of ``D``; these papers write the modulation as
``exp(-i w t)``, so with this library's ``exp(+i w t)`` the result is the
complex conjugate, i.e. ``w -> -w``.  Complex frequencies are reached by
analytic continuation (``i w -> -s tau`` with ``s`` the Laplace variable).
The stationary rate is the Siegert formula.

Needs mpmath (imported here only); each frequency costs a few milliseconds.
"""

from __future__ import annotations

import numpy as np

#: Working precision (decimal digits) of the mpmath evaluation.
DIGITS = 30


def _mpmath():
    try:
        import mpmath
    except ImportError as exc:  # pragma: no cover - depends on the installation
        raise ImportError("the closed-form LIF response needs mpmath (pip install mpmath)") from exc
    return mpmath


def _siegert_mp(mp, neuron, mu, sigma2):
    """Siegert rate (Hz) as an mpmath number, for drive ``mu`` (mV) and ``sigma2`` (mV^2)."""
    sd = mp.sqrt(sigma2)
    yt = (neuron.threshold - neuron.rest - mu) / sd
    yr = (neuron.reset - neuron.rest - mu) / sd
    integral = mp.quad(lambda x: mp.exp(x * x) * mp.erfc(-x), [yr, yt])
    return 1000 / (neuron.refractory + neuron.tau_m * mp.sqrt(mp.pi) * integral)


def siegert_rate(neuron, mu: float, sigma: float) -> float:
    """Stationary rate (Hz) of the white-noise LIF (Siegert 1951; Brunel & Hakim 1999)."""
    mp = _mpmath()
    with mp.workdps(DIGITS):
        return float(_siegert_mp(mp, neuron, mp.mpf(mu), mp.mpf(sigma) ** 2))


def siegert_slope(neuron, mu: float, sigma: float, modulate: str = "mean") -> float:
    """d(rate)/d(mu) (Hz/mV) or d(rate)/d(sigma^2) (Hz/mV^2) of the Siegert rate, by mpmath."""
    mp = _mpmath()
    with mp.workdps(DIGITS):
        if modulate == "mean":
            d = mp.diff(lambda m: _siegert_mp(mp, neuron, m, mp.mpf(sigma) ** 2), mp.mpf(mu))
        else:
            d = mp.diff(lambda s2: _siegert_mp(mp, neuron, mp.mpf(mu), s2), mp.mpf(sigma) ** 2)
        return float(d)


def lif_response(neuron, mu: float, sigma: float, s, modulate: str = "mean") -> np.ndarray:
    """Closed-form transfer function of the white-noise LIF.

    Parameters
    ----------
    neuron : LIF
    mu, sigma : float
        Drive and noise amplitude (mV).
    s : array_like of complex
        Laplace variable (1/ms); ``s = 2 pi i f / 1000`` for frequency ``f`` in Hz.
    modulate : {"mean", "sigma2"}
        Modulated input: ``mu`` (result in Hz/mV) or ``sigma**2`` (Hz/mV^2).

    Returns
    -------
    ndarray of complex
    """
    mp = _mpmath()
    s = np.asarray(s, dtype=complex)
    out = np.empty(s.shape, dtype=complex)
    tau, tref = neuron.tau_m, neuron.refractory
    with mp.workdps(DIGITS):
        r0 = mp.mpf(siegert_rate(neuron, mu, sigma)) * tau / 1000  # per tau
        big_d = mp.mpf(sigma) ** 2 / 2
        sd = mp.sqrt(big_d)
        yt = (mu + neuron.rest - neuron.threshold) / sd
        yr = (mu + neuron.rest - neuron.reset) / sd
        e_delta = mp.exp((yr ** 2 - yt ** 2) / 4)
        for idx, sv in np.ndenumerate(s):
            # their i w with exp(-i w t) equals -s tau here (exp(+s t) modulation)
            iw = -mp.mpc(sv.real, sv.imag) * tau
            if iw == 0:
                raise ValueError("the closed form is singular at zero frequency; use the gain slope")
            denom = mp.pcfd(iw, yt) - e_delta * mp.exp(iw * tref / tau) * mp.pcfd(iw, yr)
            if modulate == "mean":
                num = mp.pcfd(iw - 1, yt) - e_delta * mp.pcfd(iw - 1, yr)
                chi = r0 * iw / (sd * (iw - 1)) * num / denom  # per tau per mV
                out[idx] = complex(chi * 1000 / tau)
            else:
                num = mp.pcfd(iw - 2, yt) - e_delta * mp.pcfd(iw - 2, yr)
                chi = r0 * iw * (iw - 1) / (big_d * (2 - iw)) * num / denom  # per tau per mV^2 of D
                out[idx] = complex(chi * 1000 / tau / 2)  # d(sigma^2) = 2 dD
    return out
