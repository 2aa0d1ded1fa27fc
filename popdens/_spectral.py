"""Spectra estimated from recorded rates: averaged periodograms with their standard errors.

Convention (the one of :mod:`popdens.theory.spectra`): two-sided spectral
density in Hz, ``S(f) = <|X_T(f)|^2> / T`` with ``X_T(f) = int_0^T (A(t) - <A>)
exp(-2 pi i f t) dt`` over segments of length ``T``, without the ``<A>^2
delta(f)`` peak; cross-spectra ``C_ij(f) = <X_i(f) X_j(f)^*> / T``.  Rates
binned with width ``b`` have, for a spectrum flat beyond ``1/b``, the
spectrum ``r0/N + (S(f) - r0/N) sinc^2(pi f b)`` (aliasing of the flat part
adds up exactly; the rest is attenuated by the bin).

Each segment gives one periodogram; the estimate is their mean over segments
and trials, and its standard error the standard deviation of the periodograms
divided by the square root of their number (for a Gaussian process the
periodogram at one frequency is exponentially distributed, so the relative
error is ``1/sqrt(segments)``; common practice, e.g. Percival & Walden 1993,
"Spectral Analysis for Physical Applications", ch. 6).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SpectrumEstimate", "estimate_spectra"]


@dataclass(frozen=True, eq=False)
class SpectrumEstimate:
    """Estimated (cross-)spectra of rates.

    Attributes
    ----------
    freqs : ndarray, shape (n_freqs,)
        Frequencies (Hz): ``k / T`` for ``k = 1 .. L/2`` (``T`` the segment length).
    power : ndarray
        Auto-spectra (Hz) of each channel, shape ``(n_freqs,)`` for one channel or
        ``(n_freqs, n_channels)``.
    standard_error : ndarray
        Standard error (Hz) of ``power``, same shape.
    cross : ndarray of complex, shape (n_freqs, n_channels, n_channels)
        The spectral matrix (Hz); its diagonal is ``power``.
    cross_error : ndarray of complex, same shape as ``cross``
        Standard errors of the real (real part) and imaginary (imaginary part) parts of ``cross``.
    segments : int
        Number of periodograms averaged.
    segment_ms : float
        Segment length (ms).
    """

    freqs: np.ndarray
    power: np.ndarray
    standard_error: np.ndarray
    cross: np.ndarray
    cross_error: np.ndarray
    segments: int
    segment_ms: float


def estimate_spectra(rates, width_ms: float, segment_ms: float, channels: bool = True) -> SpectrumEstimate:
    """Averaged periodograms of binned rates (module docstring).

    Parameters
    ----------
    rates : array_like, shape (n_bins,), (n_channels, n_bins) or (n_trials, n_channels, n_bins)
        Rates (Hz) in consecutive bins of ``width_ms``.  With ``channels=False`` a 2-d array is
        ``(n_trials, n_bins)`` of one channel.
    width_ms : float
        Bin width (ms).
    segment_ms : float
        Segment length (ms), a whole number of bins; the frequency resolution is ``1000 / segment_ms`` Hz.
    """
    x = np.asarray(rates, dtype=float)
    one = x.ndim == 1 or not channels
    if x.ndim == 1:
        x = x[None, None, :]
    elif x.ndim == 2:
        x = x[None] if channels else x[:, None, :]
    if x.ndim != 3:
        raise ValueError(f"`rates` must have 1 to 3 dimensions (trials, channels, bins), got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise ValueError("`rates` must be finite (an interrupted or failed run leaves no spectrum)")
    n_tr, n_ch, n_bins = x.shape
    seg = int(round(segment_ms / width_ms))
    if seg < 2 or abs(seg * width_ms - segment_ms) > 1e-9 * segment_ms:
        raise ValueError(f"`segment` = {segment_ms!r} ms must be a whole number (>= 2) of bins of {width_ms:g} ms")
    n_seg = n_bins // seg
    if n_seg < 1:
        raise ValueError(f"`segment` = {segment_ms!r} ms is longer than the record ({n_bins * width_ms:g} ms)")
    b = width_ms * 1e-3
    t_seg = seg * b
    segs = x[:, :, : n_seg * seg].reshape(n_tr, n_ch, n_seg, seg).transpose(0, 2, 1, 3).reshape(-1, n_ch, seg)
    spec = np.fft.rfft(segs, axis=-1)[:, :, 1: seg // 2 + 1] * b  # drop f = 0
    per = np.einsum("mif,mjf->mfij", spec, spec.conj()) / t_seg  # one periodogram matrix per segment
    m = per.shape[0]
    cross = per.mean(axis=0)
    if m > 1:
        err = (per.real.std(axis=0, ddof=1) + 1j * per.imag.std(axis=0, ddof=1)) / np.sqrt(m)
    else:
        err = np.full(cross.shape, np.nan + 1j * np.nan)
    power = np.real(np.diagonal(cross, axis1=1, axis2=2)).copy()
    se = np.real(np.diagonal(err, axis1=1, axis2=2)).copy()
    if one:
        power, se = power[:, 0], se[:, 0]
    freqs = np.arange(1, seg // 2 + 1) / t_seg
    return SpectrumEstimate(freqs=freqs, power=power, standard_error=se, cross=cross, cross_error=err,
                            segments=m, segment_ms=float(segment_ms))
