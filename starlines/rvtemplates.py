"""Cross-correlation templates for the velocity stage, built once and reused.

Three kinds, in the order :func:`default_template` tries them:

1. a **synthetic spectrum** (:func:`starlines.synth.synthetic_spectrum`) at the classified
   Teff, log g and He/H. The model is computed once per *type*: the parameters are rounded
   to :data:`TEFF_STEP`, :data:`LOGG_STEP` and :data:`HE_STEP` (a template need not match
   the star closely: line positions set the velocity, strengths only its precision), without
   rotation or instrument, on a rest-frame ln(lambda) grid; it is kept in a per-process
   cache. Each spectrum then only convolves it with its own rotation and instrumental
   profile (one FFT convolution);
2. lines at the catalogue wavelengths with the depths and widths measured in the line table;
3. a generic hot-star line list (:func:`catalogue_template`).

Every template is returned as a :class:`starlines.ccf.TabulatedTemplate` so that the
cross-correlation evaluates it by interpolation only.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from starlines.ccf import C_KMS, TabulatedTemplate, line_template, log_lambda_grid

__all__ = ["default_template", "catalogue_template", "synthetic_template", "type_key",
           "TEFF_STEP", "LOGG_STEP", "HE_STEP"]

#: Rounding of the synthetic template's parameters (one template per type bin): 2000 K is
#: about one O subtype (Martins et al. 2005 scale: ~1500 K per subtype at O5-O9.5), so the
#: template is never more than ~half a subtype off; log g and He/H change line strengths
#: more than positions. A new bin costs ~30 ms once per process (the model's line
#: formation); on the 33 spectra of the demo night 16 bins occur.
TEFF_STEP = 2000.0
LOGG_STEP = 0.5
HE_STEP = 0.1
#: Step (km/s) of the template's ln(lambda) grid: the synthetic model's own step.
TEMPLATE_STEP_KMS = 2.0
#: Padding (km/s) of the template beyond the spectrum, for the lags and the kernels.
TEMPLATE_PAD_KMS = 1500.0


def type_key(teff: float, logg: float, he: float) -> tuple[float, float, float]:
    """Parameters rounded to the template grid and clipped to the model's validity range."""
    from starlines.synth import PARAMETER_LIMITS

    def snap(x, step, name):
        lo, hi = PARAMETER_LIMITS[name]
        return float(np.clip(round(x / step) * step, lo, hi))

    return snap(teff, TEFF_STEP, "teff"), snap(logg, LOGG_STEP, "logg"), snap(he, HE_STEP, "he")


@lru_cache(maxsize=64)
def _unbroadened(key: tuple[float, float, float], medium: str, wmin: float, wmax: float):
    """Rest-frame synthetic depth (no rotation, no instrument) on a ln(lambda) grid."""
    from starlines.synth import synthetic_spectrum

    teff, logg, he = key
    grid = log_lambda_grid(wmin, wmax, TEMPLATE_STEP_KMS)
    flux = synthetic_spectrum(grid, teff=teff, logg=logg, he=he, vsini=0.0, rv=0.0,
                              resolution_fwhm=0.0, medium=medium)
    depth = 1.0 - np.asarray(flux, float)
    depth.setflags(write=False)
    return grid, depth


def _span(wmin: float, wmax: float) -> tuple[float, float]:
    """Template range: the spectrum's, padded, rounded outwards to 100 A (cache key)."""
    pad = 1.0 + TEMPLATE_PAD_KMS / C_KMS
    return 100.0 * math.floor(wmin / pad / 100.0), 100.0 * math.ceil(wmax * pad / 100.0)


def broadening_kernel(step_kms: float, vsini: float, sigma_kms: float) -> np.ndarray:
    """Rotation (limb darkening 0.6, common practice) convolved with a Gaussian, on a
    velocity grid of ``step_kms``, normalised to unit sum."""
    from starlines.broadening import gaussian_kernel, rotation_kernel

    kern = rotation_kernel(step_kms, max(vsini, 0.0))
    if sigma_kms > 0:
        kern = np.convolve(kern, gaussian_kernel(step_kms, sigma_kms))
    return kern / kern.sum()


def synthetic_template(teff: float, logg: float, he: float, *, vsini: float,
                       resolution_fwhm: float, medium: str, wmin: float, wmax: float,
                       pixel_step: float = 0.0) -> TabulatedTemplate:
    """Synthetic template of the type nearest (teff, logg, he), broadened for one star.

    Parameters
    ----------
    teff, logg, he : float
        Classified parameters (rounded with :func:`type_key`).
    vsini : float
        Projected rotation (km/s).
    resolution_fwhm : float
        Instrumental FWHM (Angstrom) at the middle of ``wmin``-``wmax``.
    medium : {"air", "vacuum"}
        Medium of the rest wavelengths.
    wmin, wmax : float
        Wavelength range of the spectrum (Angstrom).
    pixel_step : float
        Pixel size of the spectrum (Angstrom); 0 keeps the model's 2 km/s step.
    """
    from scipy.signal import fftconvolve

    lo, hi = _span(wmin, wmax)
    grid, depth = _unbroadened(type_key(teff, logg, he), medium, lo, hi)
    sigma = C_KMS * resolution_fwhm / (0.5 * (wmin + wmax)) / 2.354820045
    pixel = C_KMS * pixel_step / (0.5 * (wmin + wmax)) if pixel_step > 0 else 0.0
    factor = _binning(pixel, 2.354820045 * sigma)
    if factor > 1:  # averaging bins is a box of `factor` steps: negligible beside the kernel
        n = depth.size // factor
        depth = depth[:n * factor].reshape(n, factor).mean(axis=1)
        grid = grid[:n * factor].reshape(n, factor).mean(axis=1)
    kern = broadening_kernel(TEMPLATE_STEP_KMS * factor, vsini, sigma)
    if kern.size > 1:
        depth = fftconvolve(depth, kern, mode="same")
    return TabulatedTemplate(grid, depth)


def _binning(pixel_kms: float, fwhm_kms: float) -> int:
    """How many model steps to average: the template step stays below 1/8 pixel and 1/12
    of the instrumental FWHM (so the broadened profile is sampled as finely as needed)."""
    if not (pixel_kms > 0 and fwhm_kms > 0):
        return 1
    return max(1, int(min(pixel_kms / 8.0, fwhm_kms / 12.0) // TEMPLATE_STEP_KMS))


def default_template(spec, table, classification=None, *, vsini: float = math.nan):
    """Template (rest frame, normalized flux) for the cross-correlation of ``spec``.

    A synthetic spectrum at the classified parameters when :mod:`starlines.synth` and a
    classification are available; otherwise lines at the catalogue wavelengths with the
    depths and widths measured in ``table`` (Lorentzian Balmer lines, Gaussian others).

    Returns
    -------
    (TabulatedTemplate, str)
        The template and a description.
    """
    res = resolution_of(spec, table)
    vs = vsini if math.isfinite(vsini) else _finite_or(table.meta.get("vsini", 0), 0.0)
    teff = _finite_or(getattr(classification, "teff", math.nan), math.nan)
    w = spec.wavelength
    if classification is not None and math.isfinite(teff):
        try:
            key = type_key(teff, _finite_or(classification.logg, 4.0),
                           _finite_or(classification.he_abundance, 0.1))
            tmpl = synthetic_template(*key, vsini=max(vs, 0.0), resolution_fwhm=res,
                                      medium=spec.medium, wmin=float(w[0]),
                                      wmax=float(w[-1]),
                                      pixel_step=float(np.median(np.diff(w))))
            return tmpl, (f"synthetic spectrum Teff {key[0]:.0f} K, log g {key[1]:.2f}, "
                          f"He/H {key[2]:.2f}, v sin i {vs:.0f} km/s")
        except ImportError:
            pass
    desc = "lines at catalogue wavelengths, measured depths"
    return _table_template(spec, table, res), desc


def resolution_of(spec, table) -> float:
    """Instrumental FWHM (Angstrom): the spectrum's, the line table's, else 2.5 pixels."""
    res = _finite_or(spec.meta.resolution_fwhm, 0.0) or _finite_or(
        table.meta.get("resolution_fwhm", 0) if hasattr(table, "meta") else 0, 0.0)
    return res or 2.5 * float(np.median(np.diff(spec.wavelength)))


def _finite_or(x, default: float) -> float:
    try:
        return float(x) if x is not None and math.isfinite(float(x)) else default
    except (TypeError, ValueError):
        return default


def _col(table, name: str, default=np.nan) -> np.ndarray:
    if name not in table.colnames:
        return np.full(len(table), default)
    c = table[name]
    return np.asarray(getattr(c, "value", c))


def _tabulate(spec, func) -> TabulatedTemplate:
    lo, hi = _span(float(spec.wavelength[0]), float(spec.wavelength[-1]))
    grid = log_lambda_grid(lo, hi, TEMPLATE_STEP_KMS)
    return TabulatedTemplate(grid, 1.0 - np.asarray(func(grid), float))


def _table_template(spec, table, res: float) -> TabulatedTemplate:
    from starlines.lines import line

    ids = [str(x) for x in table["line"]] if "line" in table.colnames else []
    status = [str(s) for s in _col(table, "status", "")]
    depth, fwhm, ew = _col(table, "depth"), _col(table, "fwhm"), _col(table, "ew")
    emission = _col(table, "emission", False).astype(bool)
    cen, dep, fw, shp = [], [], [], []
    for k, ident in enumerate(ids):
        d = depth[k] if math.isfinite(depth[k]) else ew[k] / (1.0645 * fwhm[k])
        if status[k] == "measured" and not emission[k] and math.isfinite(d) and d > 0 \
                and fwhm[k] > 0:
            ln = line(ident)
            cen.append(ln.wavelength(spec.medium))
            dep.append(min(float(d), 0.9))
            fw.append(float(fwhm[k]))
            shp.append("lorentzian" if ln.kind == "balmer" else "gaussian")
    if len(cen) < 2:  # nothing measured: generic hot-star lines
        return catalogue_template(spec, res)
    return _tabulate(spec, lambda w: line_template(w, cen, dep, fw, shapes=shp))


def catalogue_template(spec, resolution_fwhm: float) -> TabulatedTemplate:
    """Generic hot-star template: every catalogue line in range, Balmer lines 0.3 deep and
    10 A wide (Lorentzian), others 0.08 deep (rough, common practice), at the instrumental
    resolution. The same for any spectrum of a given medium, range and resolution."""
    return _catalogue_cached(spec.medium, *_span(float(spec.wavelength[0]),
                                                 float(spec.wavelength[-1])),
                             round(float(resolution_fwhm), 3))


@lru_cache(maxsize=16)
def _catalogue_cached(medium: str, lo: float, hi: float, res: float) -> TabulatedTemplate:
    from starlines.lines import lines_in_range

    cen, dep, fw, shp = [], [], [], []
    for ln in lines_in_range(lo, hi, medium=medium):
        balmer = ln.kind == "balmer"
        cen.append(ln.wavelength(medium))
        dep.append(0.3 if balmer else 0.08)
        fw.append(10.0 if balmer else 1.0)
        shp.append("lorentzian" if balmer else "gaussian")
    grid = log_lambda_grid(lo, hi, TEMPLATE_STEP_KMS)
    flux = line_template(grid, cen, dep, fw, shapes=shp, resolution_fwhm=res)
    return TabulatedTemplate(grid, 1.0 - flux)
