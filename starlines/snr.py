"""Signal-to-noise from the flux alone: the DER_SNR estimator.

Stoehr et al. (2008), ASP Conf. Ser. 394, 505: for a spectrum whose noise is uncorrelated
from pixel to pixel and whose true signal is smooth over five pixels,

    noise = 1.482602 / sqrt(6) * median(|2 f_i - f_(i-2) - f_(i+2)|)

(1.482602 / sqrt(6) = 0.6052697) and ``S/N = median(f) / noise``. The second difference
over two pixels cancels any signal linear over five pixels, so continuum slopes do not
leak into the noise; sharp lines do, which is why :func:`der_snr_noise` can restrict the
estimate to pixels chosen by the caller (for example the continuum pixels).
"""

from __future__ import annotations

import numpy as np

__all__ = ["der_snr", "der_snr_noise", "DER_SNR_FACTOR"]

#: 1.482602 / sqrt(6): MAD-to-sigma factor over the variance of the 2f_i - f_(i-2) - f_(i+2)
#: stencil (Stoehr et al. 2008).
DER_SNR_FACTOR = 0.6052697


def _stencil(flux: np.ndarray, use: np.ndarray | None) -> np.ndarray:
    """|2 f_i - f_(i-2) - f_(i+2)| where all five pixels are usable."""
    f = np.asarray(flux, dtype=float)
    if f.size < 5:
        return np.empty(0)
    d = np.abs(2.0 * f[2:-2] - f[:-4] - f[4:])
    ok = np.isfinite(d)
    if use is not None:
        u = np.asarray(use, dtype=bool)
        ok &= u[2:-2] & u[:-4] & u[4:] & u[1:-3] & u[3:-1]
    return d[ok]


def der_snr_noise(flux: np.ndarray, use: np.ndarray | None = None) -> float:
    """Noise per pixel of ``flux`` by the DER_SNR stencil.

    Parameters
    ----------
    flux : numpy.ndarray
        Flux on a regular pixel grid.
    use : numpy.ndarray of bool, optional
        Pixels that may enter the estimate; a stencil value is used only when all five
        pixels it spans are usable.

    Returns
    -------
    float
        Estimated 1-sigma noise per pixel, NaN when fewer than 10 stencils are usable.
    """
    d = _stencil(flux, use)
    if d.size < 10:
        return float("nan")
    return float(DER_SNR_FACTOR * np.median(d))


def der_snr(flux: np.ndarray, use: np.ndarray | None = None) -> float:
    """Median signal-to-noise per pixel (Stoehr et al. 2008).

    Parameters
    ----------
    flux : numpy.ndarray
        Flux on a regular pixel grid (any unit).
    use : numpy.ndarray of bool, optional
        Usable pixels (see :func:`der_snr_noise`).

    Returns
    -------
    float
        ``median(flux[use]) / noise``; NaN when it cannot be estimated, ``inf`` for
        noiseless data.
    """
    f = np.asarray(flux, dtype=float)
    sel = np.isfinite(f) if use is None else (np.asarray(use, dtype=bool) & np.isfinite(f))
    if sel.sum() < 10:
        return float("nan")
    noise = der_snr_noise(f, sel)
    signal = float(np.median(f[sel]))
    if not np.isfinite(noise):
        return float("nan")
    if noise == 0.0:
        return float("inf")
    return signal / noise
