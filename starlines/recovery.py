"""How much of a line's equivalent width the measurement stage recovers, by forward modelling.

The synthetic grid holds *true* equivalent widths: each line profile integrated to the
far wings. The measurement stage sees a finite spectrum: it places a continuum through
regions that the broad Stark wings of the diffuse He I lines (4471, 4026, 4388, 4922,
4144) still depress, and it fits profiles in finite windows beside neighbouring lines.
On the model's own spectra it returns those lines 7-20 % below their true EWs (25 kK,
log g 4, 2.5 A, S/N 100-500: He I 4471 and 4026 0.80-0.87, 4388, 4922, 4144 0.91-0.93),
while the sharp He I 4713 comes back within 2 % (``tests/test_helium_fit.py`` checks both).
Comparing a measured EW directly with the grid therefore reads a normal helium abundance
as helium-poor. The loss depends on the noise: with the wings lost in the noise the fit's
linear baseline takes up part of them (He I 4471 at 20 kK, log g 4: 1.06 of the true EW
at S/N 1000, 0.83 at S/N 250), so the forward model is made at the star's S/N.

:func:`recovery_factors` removes that bias without a tuned constant: it synthesizes the
spectrum of a star of normal helium abundance at the observed star's Teff, log g,
resolution, sampling, wavelength range, rotation and S/N (noise with fixed seeds),
measures it with the same measurement stage, and returns measured / true EW for each
requested line. A measured EW divided by its factor is on the grid's scale. Results are
cached on rounded parameters (sensitivities at :data:`_ROUND`), so a night pays for a few
tens of forward models, not one per star.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from functools import lru_cache

import numpy as np

__all__ = ["recovery_factors", "RECOVERY_RANGE", "REFERENCE_HE"]

#: Helium abundance by number of the reference star (normal helium; solar 0.085, Asplund
#: et al. 2009, rounded to the grid node 0.10 used as normal throughout).
REFERENCE_HE = 0.1
#: Wavelength range (A) synthesized for the forward model: the He I lines used for helium
#: plus ~50 A of continuum on each side for the continuum fit.
RECOVERY_RANGE = (3950.0, 4980.0)
#: Rounding of the cache keys: Teff (K), log g (dex), log10 resolution FWHM, v sin i
#: (km/s), log10 S/N. Measured at 25 kK, log g 4, 2.5 A, S/N 200 (He I 4471/4026/4388/
#: 4922/4713, H-gamma, H-delta): the factors change by < 0.5 % per 1000 K, ~2 % per 0.25
#: dex in log g, ~1-2 % per 10 % of FWHM, ~1-3 % per 50 km/s and ~1-2 % per 0.25 dex of
#: S/N. Half these steps add up to a rounding error of ~3-5 %, about the fit's model
#: error (:data:`starlines.ewfit.MODEL_ERROR`, 5 %), with few distinct forward models
#: (each costs ~60 ms): a night from one instrument needs a few tens.
_ROUND = (4000.0, 0.5, 0.1, 100.0, 0.5)
#: S/N per pixel of the forward model: the star's S/N, rounded, within these limits
#: (beyond 1000 the bias no longer changes; below 30 the star's own EW errors, > 10 % for
#: the weaker He I lines, dominate whatever the factor).
_SNR_LIMITS = (30.0, 1000.0)
#: Noise realizations averaged per forward model (seeds 0..N-1: deterministic): enough
#: that the factors scatter as little as one realization at this S/N (~1-2 % for the He I
#: lines at S/N 100-250, under the model error): ceil((REFERENCE_SNR / S/N)^2), at least 1.
REFERENCE_SNR = 100.0
#: Factors outside this range mean the forward model failed to measure the line (for
#: example a line too weak at this Teff); they are not returned.
_FACTOR_LIMITS = (0.3, 1.5)


def _rounded(value: float, step: float) -> float:
    return float(round(value / step) * step)


def recovery_factors(lines: Sequence[str], *, teff: float, logg: float,
                     resolution_fwhm: float, pixel_step: float | None = None,
                     vsini: float = 0.0, snr: float = 300.0,
                     wavelength_range: tuple[float, float] | None = None) -> dict[str, float]:
    """Measured / true EW of each line for a normal-helium star like the observed one.

    Parameters
    ----------
    lines : sequence of str
        Catalogue line ids (e.g. ``"HeI4471"``).
    teff, logg : float
        Fitted parameters of the observed star (K, cgs), clamped to the grid's range.
    resolution_fwhm : float
        Instrumental FWHM of the observed spectrum (Angstrom).
    pixel_step : float, optional
        Pixel size of the observed spectrum (Angstrom); default resolution / 2.5.
    vsini : float
        Projected rotation (km/s) of the observed star; 0 when only a limit is known.
    snr : float
        S/N per pixel of the observed spectrum.
    wavelength_range : (float, float), optional
        First and last wavelength of the observed spectrum (Angstrom): the model covers its
        overlap with :data:`RECOVERY_RANGE` (rounded outward to 25 A), so lines near an
        edge of the observation meet the same edge in the model.

    Returns
    -------
    dict
        Line id -> factor, for the lines the forward model measured; empty when the
        parameters are not finite.
    """
    if not all(math.isfinite(x) for x in (teff, logg, resolution_fwhm)) or resolution_fwhm <= 0:
        return {}
    step = pixel_step if pixel_step and math.isfinite(pixel_step) and pixel_step > 0 \
        else resolution_fwhm / 2.5
    # the model is kept at least Nyquist-sampled (step <= FWHM / 2)
    vs = vsini if math.isfinite(vsini) and vsini > 0 else 0.0
    snr = float(np.clip(snr if math.isfinite(snr) else _SNR_LIMITS[1], *_SNR_LIMITS))
    lo, hi = RECOVERY_RANGE
    if wavelength_range is not None and all(math.isfinite(x) for x in wavelength_range):
        lo = max(lo, 25.0 * math.floor(wavelength_range[0] / 25.0))
        hi = min(hi, 25.0 * math.ceil(wavelength_range[1] / 25.0))
        if hi - lo < 100.0:
            return {}
    fwhm = round(10 ** _rounded(math.log10(resolution_fwhm), _ROUND[2]), 3)
    key = (_rounded(teff, _ROUND[0]), _rounded(logg, _ROUND[1]), fwhm,
           _rounded(vs, _ROUND[3]), float(f"{min(step, fwhm / 2.0):.2g}"),
           round(10 ** _rounded(math.log10(snr), _ROUND[4]), 1), lo, hi)
    table = _factors(*key)
    return {ident: table[ident] for ident in lines if ident in table}


@lru_cache(maxsize=256)
def _factors(teff: float, logg: float, fwhm: float, vsini: float, step: float,
             snr: float, lo: float, hi: float) -> dict[str, float]:
    from starlines.grid import LOGG_AXIS, TEFF_AXIS
    from starlines.measure import measure_spectrum
    from starlines.rules import line_values
    from starlines.spectrum import Spectrum
    from starlines.synth import synthetic_ews, synthetic_spectrum

    teff = float(np.clip(teff, TEFF_AXIS[0], TEFF_AXIS[-1]))
    logg = float(np.clip(logg, LOGG_AXIS[0], LOGG_AXIS[-1]))
    wave = np.arange(lo, hi, step)
    flux = synthetic_spectrum(wave, teff=teff, logg=logg, he=REFERENCE_HE, vsini=vsini,
                              resolution_fwhm=fwhm, medium="air")
    flux = np.asarray(flux, float)
    true = synthetic_ews(teff=teff, logg=logg, he=REFERENCE_HE)
    found: dict[str, list[float]] = {}
    n_real = max(1, math.ceil((REFERENCE_SNR / snr) ** 2))
    for seed in range(n_real):
        noise = np.random.default_rng(seed).normal(0.0, 1.0 / snr, wave.size)
        spec = Spectrum(wavelength=wave, flux=flux + noise,
                        uncertainty=np.full(wave.size, 1.0 / snr), medium="air",
                        path="<forward model>")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            values = line_values(measure_spectrum(spec).table)
        for ident, v in values.items():
            t = true.get(ident, math.nan)
            if v.detected and math.isfinite(t) and t > 0:
                found.setdefault(ident, []).append(v.ew / t)
    out = {}
    for ident, f in found.items():
        mean = float(np.mean(f))
        # a line measured in only some realizations is too weak to be corrected reliably
        if len(f) == n_real and _FACTOR_LIMITS[0] <= mean <= _FACTOR_LIMITS[1]:
            out[ident] = mean
    return out
