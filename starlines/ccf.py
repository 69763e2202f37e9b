"""Cross-correlation velocities on a log-lambda grid.

The normalized spectrum, as line depth ``1 - flux``, is resampled onto a grid uniform in
``ln(lambda)`` (so that a Doppler shift is a translation) and cross-correlated with a template
(any callable giving normalized flux at rest wavelengths in the spectrum's medium). The
peak is located to a fraction of a pixel by a least-squares parabola over its top, and
converted to the optical-convention velocity ``v = c (lambda_obs / lambda_rest - 1)``.

Uncertainty: Zucker (2003), ``sigma_v^2 = -[N C''(s) / C(s) * C(s)^2 / (1 - C(s)^2)]^-1``
with ``N`` the number of independent pixels and ``C''`` the curvature of the normalized
correlation at the peak in (km/s)^-2 (formula from criteria.md section 7b; the
maximum-likelihood form of the CCF is transcribed from Zucker 2003, the error formula is
from memory). The Tonry & Davis (1979) ``r`` value is reported beside it (its
constant ``k = 3w/8`` is from memory).

This module also builds templates from line lists (Gaussian and Lorentzian lines with
rotational and instrumental broadening), the fallback when no synthetic spectrum is at hand.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["CCFResult", "cross_correlate", "line_template", "rotational_kernel",
           "log_lambda_grid", "TabulatedTemplate", "tabulate", "C_KMS"]

C_KMS = 299792.458


@dataclass
class CCFResult:
    """A cross-correlation function and its main peak.

    Attributes
    ----------
    velocity : numpy.ndarray
        Velocity of each lag (km/s, optical convention).
    ccf : numpy.ndarray
        Normalized cross-correlation (1 for a perfect match).
    rv, rv_err : float
        Peak velocity and its Zucker (2003) uncertainty (km/s).
    height : float
        Correlation at the peak.
    fwhm : float
        Full width at half maximum of the peak (km/s).
    tonry_davis_r : float
        Peak height over sqrt(2) times the rms of the antisymmetric part (Tonry & Davis 1979).
    noise : float
        1-sigma noise of the correlation expected from the pixel noise.
    n_pixels : int
        Number of spectrum pixels that entered.
    step_kms : float
        Velocity step of the lag grid.
    """

    velocity: np.ndarray
    ccf: np.ndarray
    rv: float
    rv_err: float
    height: float
    fwhm: float
    tonry_davis_r: float
    noise: float
    n_pixels: int
    step_kms: float


def log_lambda_grid(wmin: float, wmax: float, step_kms: float) -> np.ndarray:
    """Wavelengths from ``wmin`` to ``wmax`` uniformly spaced in ln(lambda), step in km/s."""
    dlog = math.log1p(step_kms / C_KMS)
    n = int(math.floor(math.log(wmax / wmin) / dlog)) + 1
    return wmin * np.exp(dlog * np.arange(n))


def rotational_kernel(velocity: np.ndarray, vsini: float, epsilon: float = 0.6) -> np.ndarray:
    """Rotational broadening profile (Gray, The Observation and Analysis of Stellar
    Photospheres, linear limb darkening ``epsilon``; 0.6 is common practice), unnormalized."""
    x = np.asarray(velocity, dtype=float) / vsini
    inside = np.abs(x) < 1.0
    y = np.zeros_like(x)
    s = 1.0 - x[inside] ** 2
    y[inside] = 2.0 * (1.0 - epsilon) * np.sqrt(s) + 0.5 * math.pi * epsilon * s
    return y


def _broaden(flux_depth: np.ndarray, step_kms: float, vsini: float, sigma_kms: float):
    """Convolve a depth profile on a log grid with rotation and a Gaussian (velocity units)."""
    half = 4.0 * sigma_kms + max(vsini, 0.0)
    n = int(math.ceil(half / step_kms))
    if n < 1:
        return flux_depth
    v = step_kms * np.arange(-n, n + 1)
    kern = np.exp(-0.5 * (v / sigma_kms) ** 2) if sigma_kms > 0 else (v == 0).astype(float)
    if vsini > step_kms:
        kern = np.convolve(kern, rotational_kernel(v, vsini), mode="same")
    kern /= kern.sum()
    return np.convolve(flux_depth, kern, mode="same")


def line_template(
    wavelength: np.ndarray,
    centres: Sequence[float],
    depths: Sequence[float],
    fwhms: Sequence[float],
    *,
    shapes: Sequence[str] | None = None,
    rv: float = 0.0,
    vsini: float = 0.0,
    resolution_fwhm: float = 0.0,
) -> np.ndarray:
    """Normalized spectrum made of absorption lines (negative depth = emission).

    Each line is a Gaussian or a Lorentzian of the given central depth and intrinsic FWHM
    (Angstrom) at ``centre * (1 + rv / c)``; the sum of depths is broadened by rotation
    (``vsini`` km/s) and a Gaussian instrument (``resolution_fwhm`` Angstrom at the mean
    wavelength), then evaluated on ``wavelength``. Flux is ``1 - depth`` floored at 0.01.

    Parameters
    ----------
    wavelength : numpy.ndarray
        Output wavelengths (Angstrom, increasing).
    centres, depths, fwhms : sequence of float
        Rest wavelength, central depth and FWHM of each line.
    shapes : sequence of {"gaussian", "lorentzian"}, optional
        Profile of each line (default all Gaussian).
    rv, vsini : float
        Radial velocity and projected rotation (km/s).
    resolution_fwhm : float
        Instrumental FWHM in Angstrom (0 = none).

    Returns
    -------
    numpy.ndarray
        Normalized flux on ``wavelength``.
    """
    w = np.asarray(wavelength, dtype=float)
    wmin, wmax = w[0] * 0.98, w[-1] * 1.02
    step = min(5.0, C_KMS * float(np.min(np.diff(w) / w[1:])) / 2.0)
    grid = log_lambda_grid(wmin, wmax, step)
    depth = np.zeros_like(grid)
    shapes = shapes or ["gaussian"] * len(centres)
    zfac = 1.0 + rv / C_KMS
    for c0, d, fw, shape in zip(centres, depths, fwhms, shapes):
        c = c0 * zfac
        if not (wmin - 50 * fw < c < wmax + 50 * fw):
            continue
        x = (grid - c) / fw
        if shape == "lorentzian":
            depth += d / (1.0 + 4.0 * x**2)
        elif shape == "gaussian":
            depth += d * np.exp(-4.0 * math.log(2.0) * x**2)
        else:
            raise ValueError(f"shape must be 'gaussian' or 'lorentzian', got {shape!r}")
    wmid = float(np.mean(w))
    sigma_kms = C_KMS * resolution_fwhm / wmid / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    depth = _broaden(depth, step, vsini, sigma_kms)
    return np.maximum(1.0 - np.interp(w, grid, depth), 0.01)


class TabulatedTemplate:
    """A template tabulated once: depth ``1 - flux`` on increasing rest wavelengths.

    Evaluated by linear interpolation in ln(lambda); the depth is 0 (continuum) outside the
    table. Calling it returns the normalized flux, so it can stand wherever a template
    callable is accepted.

    Parameters
    ----------
    wavelength : numpy.ndarray
        Increasing rest wavelengths (Angstrom), ideally uniform in ln(lambda).
    depth : numpy.ndarray
        ``1 - normalized flux`` at those wavelengths.
    """

    def __init__(self, wavelength, depth):
        self.wavelength = np.asarray(wavelength, dtype=float)
        self.lnw = np.log(self.wavelength)
        self.depth = np.asarray(depth, dtype=float)

    def __call__(self, wavelength) -> np.ndarray:
        return 1.0 - self.depth_at(wavelength)

    def depth_at(self, wavelength) -> np.ndarray:
        """Depth at ``wavelength`` (any shape)."""
        return np.interp(np.log(wavelength), self.lnw, self.depth, left=0.0, right=0.0)

    def shifted(self, wavelength: np.ndarray, velocities) -> np.ndarray:
        """Depth at ``wavelength`` of the template moved to each velocity: (n_v, n_pix)."""
        lnw = np.log(wavelength)[None, :] - np.log1p(np.asarray(velocities) / C_KMS)[:, None]
        return np.interp(lnw.ravel(), self.lnw, self.depth, left=0.0,
                         right=0.0).reshape(lnw.shape)


def tabulate(template, wmin: float, wmax: float, step_kms: float) -> TabulatedTemplate:
    """A template (callable, ``(wavelength, flux)`` or tabulated) as a
    :class:`TabulatedTemplate`; a callable is evaluated once on a ln(lambda) grid of
    ``step_kms`` from ``wmin`` to ``wmax``."""
    if isinstance(template, TabulatedTemplate):
        return template
    if callable(template):
        grid = log_lambda_grid(wmin, wmax, step_kms)
        return TabulatedTemplate(grid, 1.0 - np.asarray(template(grid), dtype=float))
    tw, tf = template
    return TabulatedTemplate(np.asarray(tw, float), 1.0 - np.asarray(tf, float))


def _peak_fit(lags: np.ndarray, ccf: np.ndarray, i: int) -> tuple[float, float, float, float]:
    """Sub-sample peak: least-squares parabola over the top of the peak around index ``i``.

    Returns (lag, height, curvature d2C/dlag2, fwhm in lag units).
    """
    h = ccf[i]
    lo, hi = i, i
    while lo > 0 and ccf[lo - 1] > 0.5 * h and ccf[lo - 1] <= ccf[lo] + 1e-12:
        lo -= 1
    while hi < ccf.size - 1 and ccf[hi + 1] > 0.5 * h and ccf[hi + 1] <= ccf[hi] + 1e-12:
        hi += 1
    fwhm = float(hi - lo + 1)
    half = max(2, int(round(0.25 * fwhm)))
    a, b = max(i - half, 0), min(i + half + 1, ccf.size)
    if b - a < 3:
        return float(lags[i]), float(h), math.nan, fwhm
    x = lags[a:b] - lags[i]
    c2, c1, c0 = np.polyfit(x, ccf[a:b], 2)
    if c2 >= 0:
        return float(lags[i]), float(h), math.nan, fwhm
    x0 = float(np.clip(-c1 / (2 * c2), x[0], x[-1]))
    return float(lags[i] + x0), float(c0 + c1 * x0 + c2 * x0**2), float(2 * c2), fwhm


def cross_correlate(
    wavelength: np.ndarray,
    flux: np.ndarray,
    template: TabulatedTemplate | Callable[[np.ndarray], np.ndarray]
    | tuple[np.ndarray, np.ndarray],
    *,
    noise: float | None = None,
    good: np.ndarray | None = None,
    vmax: float = 1000.0,
    oversample: int = 2,
    refine: bool = True,
) -> CCFResult:
    """Cross-correlate a normalized spectrum with a template.

    Parameters
    ----------
    wavelength, flux : numpy.ndarray
        Spectrum (Angstrom, increasing) normalized to a continuum of 1.
    template : TabulatedTemplate, callable or (wavelength, flux)
        Normalized template flux at rest. A callable is evaluated once, on a ln(lambda)
        grid of 1/8 pixel (:func:`tabulate`); pass a :class:`TabulatedTemplate` to reuse
        one template for many spectra.
    noise : float, optional
        Noise per pixel of ``flux`` (used for the CCF noise level); estimated if None.
    good : numpy.ndarray of bool, optional
        Pixels to use (others are set to the continuum).
    vmax : float
        Largest |velocity| searched (km/s).
    oversample : int
        Lag-grid points per spectrum pixel.
    refine : bool
        Refine the peak with correlations on the spectrum's own pixels (the velocity of
        record); False keeps a parabola on the resampled CCF (a quick look).

    Returns
    -------
    CCFResult
    """
    w = np.asarray(wavelength, dtype=float)
    depth = 1.0 - np.asarray(flux, dtype=float)
    use = np.isfinite(depth) if good is None else (np.asarray(good, bool) & np.isfinite(depth))
    n_pix = int(use.sum())
    if n_pix < 20:
        raise ValueError(f"only {n_pix} usable pixels for the cross-correlation")
    if noise is None:
        from starlines.snr import der_snr_noise

        noise = der_snr_noise(np.asarray(flux, float), use)
    idx = np.flatnonzero(use)  # work on the span of the used pixels only
    lo, hi = max(idx[0] - 2, 0), min(idx[-1] + 3, w.size)
    w, depth, use = w[lo:hi], depth[lo:hi], use[lo:hi]
    pix_kms = C_KMS * float(np.median(np.diff(w) / w[1:]))
    step = pix_kms / oversample
    grid = log_lambda_grid(w[0], w[-1], step)
    dlog = math.log1p(step / C_KMS)
    x = np.interp(grid, w, np.where(use, depth, 0.0))
    weight = np.interp(grid, w, use.astype(float)) > 0.999
    x = np.where(weight, x - np.mean(x[weight]), 0.0)
    wt = weight.astype(float)
    k = int(math.ceil(math.log1p(vmax / C_KMS) / dlog))
    pad = 1.0 + (vmax + 3.0 * step) / C_KMS
    tmpl = tabulate(template, w[0] / pad, w[-1] * pad, pix_kms / 8.0)
    ext = grid[0] * np.exp(dlog * np.arange(-k, grid.size + k))
    t = tmpl.depth_at(ext)
    # valid-mode correlations, cc[m] = sum_i x_i t[i + m]; reversed so that index j is the
    # lag j - k (template shifted by j - k steps to the red). The template is centred and
    # normalized over the used pixels of each window: a Pearson coefficient per lag.
    cc = np.correlate(t, x, mode="valid")[::-1]
    s1 = np.correlate(t, wt, mode="valid")[::-1]
    s2 = np.correlate(t * t, wt, mode="valid")[::-1]
    tnorm = np.sqrt(np.maximum(s2 - s1 * s1 / wt.sum(), 0.0))
    lags = np.arange(-k, k + 1, dtype=float)
    xnorm = math.sqrt(float(np.sum(x**2)))
    ccf = cc / np.maximum(xnorm * tnorm, 1e-300)
    velocity = C_KMS * np.expm1(lags * dlog)
    i = int(np.argmax(ccf))
    _, _, _, fwhm_lags = _peak_fit(lags, ccf, i)
    if refine:
        rv, height, curv = _refine_peak(w, depth, use, tmpl, float(velocity[i]), step)
    else:
        lag, height, c2, _ = _peak_fit(lags, ccf, i)
        rv = C_KMS * math.expm1(lag * dlog)
        curv = c2 / (step * step) if math.isfinite(c2) else math.nan
    ccf_noise = float(noise) * math.sqrt(oversample) / max(xnorm, 1e-300)
    rv_err = _zucker_error(height, curv, n_pix)
    r = _tonry_davis_r(ccf, i, ccf[i])
    return CCFResult(velocity, ccf, rv, rv_err, height, fwhm_lags * step, r, ccf_noise,
                     n_pix, step)


def pearson_at(wavelength, depth, use, fine: TabulatedTemplate, velocities) -> np.ndarray:
    """Pearson correlation of data depth and the template shifted to each velocity,
    computed on the spectrum's own pixels (no resampling of the data)."""
    x = depth[use] - np.mean(depth[use])
    t = fine.shifted(wavelength[use], velocities)
    t = t - t.mean(axis=1, keepdims=True)
    num = t @ x
    return num / np.maximum(np.sqrt((t * t).sum(axis=1) * (x @ x)), 1e-300)


def _refine_peak(w, depth, use, fine, v0: float, step: float) -> tuple[float, float, float]:
    """Peak of the pixel-space correlation near ``v0``: parabola on 7 points over +-1.5
    lag steps, then on 5 points over +-0.5 step.

    Returns (velocity, height, curvature in (km/s)^-2).
    """
    v, height, curv = v0, math.nan, math.nan
    for span, npt in ((1.5 * step, 7), (0.5 * step, 5)):
        vs = v + np.linspace(-span, span, npt)
        c = pearson_at(w, depth, use, fine, vs)
        c2, c1, c0 = np.polyfit(vs - v, c, 2)
        if c2 >= 0:
            break
        x0 = float(np.clip(-c1 / (2 * c2), -span, span))
        v, height, curv = v + x0, float(c0 + c1 * x0 + c2 * x0**2), float(2 * c2)
    return v, height, curv


def _zucker_error(c: float, c2: float, n: int) -> float:
    """Zucker (2003) velocity error from peak height ``c`` and curvature ``c2`` ((km/s)^-2)."""
    if not (math.isfinite(c2) and c2 < 0 and 0 < c < 1):
        return math.nan
    return math.sqrt(-1.0 / (n * c2 / c * c * c / (1.0 - c * c)))


def _tonry_davis_r(ccf: np.ndarray, i: int, height: float) -> float:
    """Tonry & Davis (1979) r: peak height over sqrt(2) x rms of the antisymmetric part."""
    n = min(i, ccf.size - 1 - i)
    if n < 3:
        return math.nan
    seg = ccf[i - n:i + n + 1]
    anti = 0.5 * (seg - seg[::-1])
    sigma_a = math.sqrt(float(np.mean(anti**2)))
    return height / (math.sqrt(2.0) * sigma_a) if sigma_a > 0 else math.inf
