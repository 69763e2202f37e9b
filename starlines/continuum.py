"""Continuum placement for hot-star spectra with broad Balmer and He II lines.

Method
------
1. Mask a window around every catalogue line. Windows scale with the line width: Balmer
   lines get tens of Angstrom (their Stark wings), the rest a few FWHM, where the FWHM is
   the instrument's (header, or 2.5 pixels assumed) or, when broader, the width measured on
   a clean reference line (He I 4471, 4922, 4388, 4026, ...) after a first pass, so fast
   rotators get wider windows.
2. Fit a penalized cubic B-spline (knots every ``knot_spacing`` Angstrom, weak second-
   difference penalty so that masked gaps are bridged smoothly) to the remaining pixels.
3. Clip iteratively and asymmetrically: pixels more than ``clip_low`` sigma *below* the
   fit (weak lines, wings) or ``clip_high`` sigma above it (emission, cosmics) are dropped
   and the spline refitted. Sigma comes from the positive residuals only, so clipping the
   absorption side does not make the estimate shrink from one pass to the next.
4. A spectrum whose continuum pixels sit at 1 within the noise is recognised as already
   normalized; its continuum is then exactly 1.

Quality figures: ``scatter`` (robust rms of the normalized continuum pixels, ~1/(S/N)),
``fraction_kept`` (continuum pixels / usable pixels) and a per-pixel relative continuum
error from the spline's covariance, used by :mod:`starlines.measure` as the continuum-
placement term of every equivalent-width error.

A default polynomial over all pixels (what a generic continuum fitter does) is pulled down
by the Balmer wings and loses ~30 % of H-gamma; see ``tests/test_continuum.py``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import BSpline

from starlines.blas import one_blas_thread
from starlines.errors import MeasurementError
from starlines.fitting import fit_single_line
from starlines.lines import Line, lines_in_range
from starlines.snr import der_snr_noise
from starlines.spectrum import Spectrum

__all__ = ["ContinuumFit", "fit_continuum", "line_windows", "expected_fwhm", "BALMER_HALFWIDTH"]

#: Half-width (Angstrom) of the continuum mask of a Balmer line by upper level n at narrow
#: instrumental width; higher members get 10 A. Common practice for B-star Balmer wings.
BALMER_HALFWIDTH = {3: 60.0, 4: 60.0, 5: 60.0, 6: 50.0, 7: 30.0, 8: 18.0, 9: 14.0}
#: Typical intrinsic (Stark + thermal) FWHM in Angstrom added in quadrature to the measured
#: line width for each kind of line (common practice, rough).
INTRINSIC_FWHM = {"hei": 0.8, "heii": 3.5, "metal": 0.3, "balmer": 6.0}
#: Distance (Angstrom) from the nearest continuum pixel over which the interpolation error
#: of the continuum grows by one ``scatter``.
GAP_SCALE = 30.0
#: A reference line found further than this (km/s) from its rest wavelength is ignored.
MAX_GUESS_KMS = 300.0
#: Lines tried, in order, as the width reference.
REFERENCE_LINES = ("HeI4471", "HeI4922", "HeI4388", "HeI4026", "HeI4144", "HeII4541",
                   "SiIII4553", "HeII4686")


@dataclass
class ContinuumFit:
    """A fitted continuum and its quality.

    Attributes
    ----------
    continuum : numpy.ndarray
        Per-pixel continuum in the flux unit of the spectrum.
    normalized, normalized_err : numpy.ndarray
        Flux / continuum and its 1-sigma error (from the spectrum's uncertainty, else the
        DER_SNR noise of the continuum pixels).
    continuum_err : numpy.ndarray
        Relative 1-sigma error of the continuum placement per pixel.
    kept : numpy.ndarray
        Boolean, the pixels the final continuum was fitted to.
    scatter : float
        Robust rms of the normalized continuum pixels.
    fraction_kept : float
        Continuum pixels over usable pixels.
    already_normalized : bool
        True when the input was recognised as normalized (continuum set to 1).
    snr : float
        Median S/N per pixel of the continuum (from the uncertainty when given, else DER_SNR).
    snr_source : str
        ``"uncertainty"`` or ``"DER_SNR"``.
    line_fwhm : float
        Line FWHM (Angstrom) the windows were scaled to.
    instrument_fwhm : float
        Instrumental FWHM (Angstrom) used.
    resolution_source : str
        ``"header"``, ``"argument"`` or ``"assumed (2.5 pixels)"``.
    reference_line : str
        Id of the line that set ``line_fwhm`` (empty if none).
    velocity_guess : float
        Doppler velocity (km/s) of the reference line, a starting point for line fits.
    """

    continuum: np.ndarray
    normalized: np.ndarray
    normalized_err: np.ndarray
    continuum_err: np.ndarray
    kept: np.ndarray
    scatter: float
    fraction_kept: float
    already_normalized: bool
    snr: float
    snr_source: str
    line_fwhm: float
    instrument_fwhm: float
    resolution_source: str
    reference_line: str = ""
    velocity_guess: float = 0.0


def expected_fwhm(ln: Line, fwhm: float) -> float:
    """Expected FWHM (Angstrom) of line ``ln`` when metal/He lines have width ``fwhm``."""
    return float(np.hypot(fwhm, INTRINSIC_FWHM[ln.kind]))


def _halfwidth(ln: Line, fwhm: float) -> float:
    if ln.kind == "balmer":
        base = BALMER_HALFWIDTH.get(ln.upper, 10.0)
        return float(np.hypot(base, fwhm))
    # +-1 FWHM leaves 6 % of a Gaussian's depth at the edge; the asymmetric clipping takes
    # the rest, so broad-lined spectra keep enough continuum pixels
    return max(expected_fwhm(ln, fwhm), 3.0)


def line_windows(lines: list[Line], medium: str, fwhm: float) -> list[tuple[Line, float, float]]:
    """(line, low, high) mask windows in Angstrom for line FWHM ``fwhm``."""
    out = []
    for ln in lines:
        lam, hw = ln.wavelength(medium), _halfwidth(ln, fwhm)
        out.append((ln, lam - hw, lam + hw))
    return out


def _window_mask(w: np.ndarray, windows, shift: float = 0.0) -> np.ndarray:
    m = np.zeros(w.size, dtype=bool)
    for _, lo, hi in windows:
        i0, i1 = np.searchsorted(w, [lo * (1 + shift), hi * (1 + shift)])
        m[i0:i1] = True
    return m


class _PSpline:
    """Penalized cubic B-spline on fixed knots, refitted cheaply with new weights."""

    def __init__(self, w: np.ndarray, spacing: float, penalty: float = 1e-2):
        span = w[-1] - w[0]
        nint = max(1, int(round(span / spacing)))
        inner = np.linspace(w[0], w[-1], nint + 1)
        t = np.concatenate([[w[0]] * 3, inner, [w[-1]] * 3])
        self.B = BSpline.design_matrix(w, t, 3).toarray()
        nb = self.B.shape[1]
        D = np.diff(np.eye(nb), 2, axis=0) if nb > 2 else np.zeros((0, nb))
        self.P = D.T @ D
        self.penalty = penalty

    def fit(self, y: np.ndarray, use: np.ndarray):
        Bu = self.B[use]
        A = Bu.T @ Bu
        lam = self.penalty * np.trace(A) / max(np.trace(self.P), 1e-30) if self.P.any() else 0.0
        M = np.linalg.inv(A + lam * self.P + 1e-12 * np.eye(A.shape[0]))
        coef = M @ (Bu.T @ y[use])
        return self.B @ coef, M

    def pointwise_var(self, M: np.ndarray) -> np.ndarray:
        """Variance factor b(x)^T M b(x) for unit pixel noise."""
        return ((self.B @ M) * self.B).sum(axis=1)


_SPLINES: dict[tuple, tuple[np.ndarray, _PSpline]] = {}


def _spline(w: np.ndarray, spacing: float) -> _PSpline:
    """The :class:`_PSpline` of grid ``w``, reused for spectra on the same grid (a night
    of one instrument): its design matrix costs more than a dozen refits."""
    key = (w.size, float(w[0]), float(w[-1]), float(spacing))
    hit = _SPLINES.get(key)
    if hit is not None and np.array_equal(hit[0], w):
        return hit[1]
    if len(_SPLINES) >= 8:
        _SPLINES.pop(next(iter(_SPLINES)))
    spline = _PSpline(w, spacing)
    _SPLINES[key] = (w.copy(), spline)
    return spline


def _clip_fit(w, y, good, linemask, spline, clip_low, clip_high, max_iter):
    kept = good & ~linemask
    if kept.sum() < max(20, 0.1 * good.sum()):  # windows cover nearly everything
        kept = good.copy()
    c, M = spline.fit(y, kept)
    sig = np.nan
    for _ in range(max_iter):
        r = y / c - 1.0
        pos = r[kept & (r > 0)]
        sig = float(np.median(pos) / 0.6745) if pos.size > 5 else float(np.std(r[kept]))
        new = good & ~linemask & (r > -clip_low * sig) & (r < clip_high * sig)
        if new.sum() < 10 or np.array_equal(new, kept):
            break
        kept = new
        c, M = spline.fit(y, kept)
    return c, M, kept, sig


def _reference_width(w, ynorm, err, good, lines, medium, fwhm):
    """FWHM and velocity of the first clean, well-detected reference line."""
    by_id = {ln.id: ln for ln in lines}
    best = None
    for ident in REFERENCE_LINES:
        ln = by_id.get(ident)
        if ln is None:
            continue
        res = fit_single_line(w, ynorm, err, good, ln.wavelength(medium), fwhm)
        if res is None:
            continue
        if abs(res["rv"]) > MAX_GUESS_KMS:  # locked onto something else
            continue
        if res["significance"] > 8 and res["ew"] > 0:
            return ident, res
        if best is None or res["significance"] > best[1]["significance"]:
            best = (ident, res)
    if best is not None and best[1]["significance"] > 5 and best[1]["ew"] > 0:
        return best
    return "", None


def fit_continuum(
    spec: Spectrum,
    *,
    resolution_fwhm: float | None = None,
    line_fwhm: float | None = None,
    knot_spacing: float = 200.0,
    clip_low: float = 2.0,
    clip_high: float = 3.0,
    max_iter: int = 10,
) -> ContinuumFit:
    """Fit the continuum of ``spec`` (see the module docstring for the method).

    Parameters
    ----------
    spec : Spectrum
        Flux-calibrated, sloped or normalized spectrum.
    resolution_fwhm : float, optional
        Instrumental FWHM in Angstrom; default the header value, else 2.5 pixels.
    line_fwhm : float, optional
        Line FWHM to scale the windows to; default measured on a reference line.
    knot_spacing : float
        Spline knot spacing in Angstrom.
    clip_low, clip_high : float
        Clipping thresholds in sigma below and above the continuum.
    max_iter : int
        Maximum number of clipping passes.

    Returns
    -------
    ContinuumFit

    Raises
    ------
    MeasurementError
        If fewer than 20 usable pixels remain.
    """
    w, good = spec.wavelength, spec.good
    if good.sum() < 20:
        raise MeasurementError("fewer than 20 usable pixels to fit a continuum", path=spec.path)
    with one_blas_thread():
        return _fit(spec, w, good, resolution_fwhm, line_fwhm, knot_spacing, clip_low,
                    clip_high, max_iter)


def _fit(spec, w, good, resolution_fwhm, line_fwhm, knot_spacing, clip_low, clip_high,
         max_iter) -> ContinuumFit:
    scale = float(np.median(spec.flux[good]))
    y = np.where(good, spec.flux / scale, 1.0)
    dx = float(np.median(np.diff(w)))
    if resolution_fwhm is not None:
        fwhm_ins, source = float(resolution_fwhm), "argument"
    elif spec.meta.resolution_fwhm:
        fwhm_ins, source = float(spec.meta.resolution_fwhm), "header"
    else:
        fwhm_ins, source = 2.5 * dx, "assumed (2.5 pixels)"
    lines = lines_in_range(w[0] - 60.0, w[-1] + 60.0, medium=spec.medium)
    spline = _spline(w, max(knot_spacing, 20 * dx))
    lw = fwhm_ins if line_fwhm is None else float(line_fwhm)
    mask = _window_mask(w, line_windows(lines, spec.medium, lw))
    c, M, kept, sig = _clip_fit(w, y, good, mask, spline, clip_low, clip_high, max_iter)
    ref_id, vguess = "", 0.0
    if line_fwhm is None and lines:
        err0 = np.full(w.size, sig if np.isfinite(sig) and sig > 0 else 0.01)
        ref_id, ref = _reference_width(w, y / c, err0, good, lines, spec.medium, lw)
        if ref is not None:
            vguess = ref["rv"]
            if ref["fwhm"] > 1.25 * lw:
                lw = ref["fwhm"]
                mask = _window_mask(w, line_windows(lines, spec.medium, lw), vguess / 3e5)
                c, M, kept, sig = _clip_fit(w, y, good, mask, spline, clip_low, clip_high,
                                            max_iter)
    already = _is_normalized(spec.flux, good, kept, c * scale, sig)
    if already:
        c = np.ones_like(y) / scale
    cont = c * scale
    normalized = np.where(good, spec.flux / cont, np.nan)
    r = normalized[kept] - 1.0
    scatter = float(1.4826 * np.median(np.abs(r - np.median(r)))) if r.size else float("nan")
    if spec.uncertainty is not None:
        nerr = spec.uncertainty / cont
        snr = float(np.median(1.0 / nerr[kept])) if kept.any() else float("nan")
        snr_source = "uncertainty"
    else:
        noise = der_snr_noise(np.where(good, normalized, 1.0), kept)
        if not np.isfinite(noise) or noise <= 0:
            noise = scatter if np.isfinite(scatter) and scatter > 0 else 0.01
        nerr = _local_noise(np.where(good, normalized, 1.0), kept, noise)
        snr, snr_source = 1.0 / noise, "DER_SNR"
    cerr = np.zeros(w.size) if already else np.hypot(
        np.sqrt(spline.pointwise_var(M)) * scatter, _gap_error(w, kept, scatter))
    return ContinuumFit(
        continuum=cont, normalized=normalized, normalized_err=nerr, continuum_err=cerr,
        kept=kept, scatter=scatter, fraction_kept=float(kept.sum() / max(good.sum(), 1)),
        already_normalized=already, snr=snr, snr_source=snr_source, line_fwhm=float(lw),
        instrument_fwhm=fwhm_ins, resolution_source=source, reference_line=ref_id,
        velocity_guess=float(vguess),
    )


def _local_noise(norm: np.ndarray, kept: np.ndarray, global_noise: float,
                 chunk: int = 400) -> np.ndarray:
    """Per-pixel DER_SNR noise of the normalized flux in chunks of ``chunk`` pixels,
    interpolated between chunk centres; chunks with too few continuum stencils take the
    global value. Flux-calibrated hot-star spectra are often much noisier in the blue."""
    n = norm.size
    if n < 2 * chunk:
        return np.full(n, global_noise)
    edges = np.linspace(0, n, n // chunk + 1).astype(int)
    centres, values = [], []
    for i0, i1 in zip(edges[:-1], edges[1:]):
        v = der_snr_noise(norm[i0:i1], kept[i0:i1])
        centres.append(0.5 * (i0 + i1 - 1))
        values.append(v if np.isfinite(v) and v > 0 else global_noise)
    return np.interp(np.arange(n), centres, values)


def _gap_error(w: np.ndarray, kept: np.ndarray, scatter: float) -> np.ndarray:
    """Interpolation term of the continuum error: grows with the distance to kept pixels.

    ``scatter * d / GAP_SCALE``, capped at 3 ``scatter``, with ``d`` the distance (Angstrom)
    to the nearest continuum pixel: a smooth curve bridged over a masked gap is uncertain
    by more than its statistical error (common practice, scale chosen here).
    """
    if kept.sum() < 2:
        return np.full(w.size, 3.0 * scatter)
    wk = w[kept]
    i = np.clip(np.searchsorted(wk, w), 1, wk.size - 1)
    d = np.minimum(np.abs(w - wk[i - 1]), np.abs(wk[i] - w))
    return scatter * np.minimum(d / GAP_SCALE, 3.0)


def _is_normalized(flux, good, kept, cont, sig) -> bool:
    """Continuum pixels at 1 within the noise (or 1 %) everywhere."""
    if not kept.any() or not np.isfinite(sig):
        return False
    med = float(np.median(flux[kept]))
    if abs(med - 1.0) > 0.05:
        return False
    dev = np.abs(cont[good] - 1.0)
    return bool(np.percentile(dev, 98) < max(0.01, 3.0 * sig))
