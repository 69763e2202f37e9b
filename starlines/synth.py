"""Synthetic equivalent widths and spectra of O and early-B stars (calibrated grey LTE model).

The forward model: a grey plane-parallel LTE atmosphere (:mod:`starlines.atmosphere`), LTE
line formation line by line (:mod:`starlines.lineform`) with Holtsmark Stark wings for H I
and He II. Hot-star atmospheres are non-LTE and have winds, so the raw model is off in
absolute terms; an empirical calibration (:mod:`starlines.synthcal`) maps the star's Teff to
the model temperature and scales each line group's strength. ``synthetic_ews`` and
``synthetic_spectrum`` use the same calibrated profiles, so the equivalent width of an
isolated line in the spectrum equals the value from ``synthetic_ews`` (rotation and the
instrument conserve it).

Doppler shifts are relativistic: lambda_obs = lambda_rest sqrt((1 + b) / (1 - b)), b = rv/c.
N III 4634-42 and He II 4686 *emission* (Of stars) and Balmer emission (Be/Oe stars) are
non-LTE/wind/disc effects that are not modelled; :func:`add_emission` and the
``emission_lines`` option of :func:`synthetic_spectrum` add them as Gaussian components.
"""

from __future__ import annotations

from collections.abc import Mapping
from functools import lru_cache

import numpy as np

from starlines.atmosphere import grey_atmosphere
from starlines.atomic import line_data
from starlines.broadening import gaussian_kernel, rotation_kernel
from starlines.errors import ConfigError
from starlines.lineform import residual_profiles
from starlines.lines import all_lines, line
from starlines.synthcal import MODEL_VERSION, model_temperature, strength_exponent

__all__ = [
    "synthetic_ews",
    "synthetic_spectrum",
    "add_emission",
    "doppler_factor",
    "parameters_for_type",
    "line_profile",
    "MODEL_VERSION",
    "PARAMETER_LIMITS",
]

C_KMS = 299792.458

#: Valid parameter ranges of the model: Teff (K), log g (cgs), He/H by number.
PARAMETER_LIMITS = {"teff": (14000.0, 58000.0), "logg": (2.3, 4.7), "he": (0.02, 0.5)}

#: Step (km/s) of the internal log-wavelength grid of synthetic spectra.
_SPECTRUM_STEP_KMS = 2.0

#: Default intrinsic FWHM (km/s) of emission components.
DEFAULT_EMISSION_FWHM = 150.0


def _check_parameters(teff: float, logg: float, he: float) -> tuple[float, float, float]:
    values = {"teff": teff, "logg": logg, "he": he}
    for name, value in values.items():
        lo, hi = PARAMETER_LIMITS[name]
        if not np.isfinite(value) or not lo <= value <= hi:
            raise ConfigError(f"{name}={value!r} is outside the synthetic model range {lo}-{hi}")
    return float(teff), float(logg), float(he)


@lru_cache(maxsize=256)
def _line_profiles(teff: float, logg: float, he: float) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Calibrated half profiles (d lambda >= 0, residual flux) of every catalogue line."""
    atm = grey_atmosphere(model_temperature(teff, logg), logg, he)
    lines = all_lines()
    profiles = residual_profiles([(line_data(ln.id), ln.wavelength_air) for ln in lines], atm)
    out = {}
    for ln, (dl, resid) in zip(lines, profiles):
        out[ln.id] = (dl, np.clip(resid, 1e-6, 1.0) ** strength_exponent(ln.id))
    return out


def line_profile(ident: str, *, teff: float, logg: float, he: float):
    """Calibrated intrinsic half profile of one line (no rotation, no instrument).

    Returns
    -------
    dl, residual : numpy.ndarray
        Distance from line centre (Angstrom, >= 0) and residual flux.
    """
    teff, logg, he = _check_parameters(teff, logg, he)
    line(ident)  # raises KeyError listing the valid ids
    return _line_profiles(teff, logg, he)[ident]


def synthetic_ews(
    teff: float, logg: float, he: float, *, vsini: float = 0.0,
    resolution_fwhm: float | None = None,
) -> dict[str, float]:
    """Equivalent widths (Angstrom, absorption positive) of every catalogue line.

    Parameters
    ----------
    teff : float
        Effective temperature (K) on the calibrated scale (see grids/README.md).
    logg : float
        Surface gravity log10(g / cm s^-2).
    he : float
        Helium abundance by number, N(He)/N(H) (solar ~0.1).
    vsini, resolution_fwhm : float, optional
        Accepted for symmetry with :func:`synthetic_spectrum`; rotation and the instrument
        conserve the equivalent width of an isolated line, so they do not change the result.

    Returns
    -------
    dict
        Line id -> equivalent width in Angstrom, for every line of :mod:`starlines.lines`.
    """
    if vsini < 0 or (resolution_fwhm is not None and resolution_fwhm < 0):
        raise ConfigError("vsini and resolution_fwhm must be >= 0")
    teff, logg, he = _check_parameters(teff, logg, he)
    profiles = _line_profiles(teff, logg, he)
    return {ident: float(2.0 * np.trapezoid(1.0 - r, dl)) for ident, (dl, r) in profiles.items()}


def doppler_factor(rv: float) -> float:
    """Relativistic Doppler factor lambda_obs / lambda_rest for radial velocity ``rv`` (km/s)."""
    b = rv / C_KMS
    return float(np.sqrt((1.0 + b) / (1.0 - b)))


def _emission_component(lam: np.ndarray, center: float, ew: float, fwhm_kms: float,
                        separation_kms: float) -> np.ndarray:
    """Flux added by an emission line of equivalent width ``ew`` (negative = emission)."""
    sigma = center * fwhm_kms / C_KMS / 2.354820045
    if separation_kms > 0:
        offsets = center * np.array([-0.5, 0.5]) * separation_kms / C_KMS
    else:
        offsets = np.zeros(1)
    prof = sum(np.exp(-0.5 * ((lam - center - d) / sigma) ** 2) for d in offsets)
    prof = prof / (len(offsets) * np.sqrt(2 * np.pi) * sigma)
    return -ew * prof


def _parse_emission(spec) -> tuple[float, float, float]:
    if isinstance(spec, Mapping):
        unknown = set(spec) - {"ew", "fwhm_kms", "peak_separation_kms"}
        if unknown or "ew" not in spec:
            raise ConfigError(
                "an emission line needs 'ew' and optionally 'fwhm_kms', "
                f"'peak_separation_kms'; got {sorted(spec)}"
            )
        return (float(spec["ew"]), float(spec.get("fwhm_kms", DEFAULT_EMISSION_FWHM)),
                float(spec.get("peak_separation_kms", 0.0)))
    return float(spec), DEFAULT_EMISSION_FWHM, 0.0


def _check_wavelength(wavelength) -> np.ndarray:
    try:
        import astropy.units as u

        if isinstance(wavelength, u.Quantity):
            wavelength = wavelength.to_value(u.AA)
    except u.UnitConversionError as exc:
        raise ConfigError(f"wavelength must be a length: {exc}") from None
    wl = np.asarray(wavelength, dtype=float)
    if wl.ndim != 1 or wl.size < 2 or not np.all(np.isfinite(wl)) or np.any(np.diff(wl) <= 0):
        raise ConfigError("wavelength must be a finite, strictly increasing 1-D array (Angstrom)")
    return wl


def synthetic_spectrum(
    wavelength, *, teff: float, logg: float, he: float, vsini: float = 0.0, rv: float = 0.0,
    resolution_fwhm: float | None = 2.5, medium: str = "air", macroturbulence: float = 0.0,
    emission_lines: Mapping | None = None,
) -> np.ndarray:
    """Continuum-normalised synthetic spectrum on ``wavelength``.

    Parameters
    ----------
    wavelength : array or Quantity
        Strictly increasing wavelengths (Angstrom if plain numbers) in ``medium``.
    teff, logg, he : float
        Model parameters as in :func:`synthetic_ews`.
    vsini : float
        Projected rotation (km/s); classical rotation kernel, limb darkening 0.6.
    rv : float
        Radial velocity (km/s), relativistic Doppler shift.
    resolution_fwhm : float or None
        Instrumental Gaussian FWHM in Angstrom (constant in Angstrom: applied on the
        log-wavelength grid with the width it has at the middle of the range); None or 0
        for none.
    medium : {"air", "vacuum"}
        Medium of ``wavelength``.
    macroturbulence : float
        Gaussian macroturbulence, 1/e half width zeta (km/s).
    emission_lines : mapping, optional
        Line id -> emission EW (Angstrom, negative) or a mapping with keys ``ew``,
        ``fwhm_kms`` (intrinsic, default 150) and ``peak_separation_kms`` (double-peaked
        profile when > 0). Emission is added after rotation, before the instrument.

    Returns
    -------
    numpy.ndarray
        Normalised flux at each wavelength.
    """
    if medium not in ("air", "vacuum"):
        raise ConfigError(f"medium must be 'air' or 'vacuum', got {medium!r}")
    for name, value in (("vsini", vsini), ("macroturbulence", macroturbulence)):
        if not np.isfinite(value) or value < 0:
            raise ConfigError(f"{name} must be a finite number >= 0, got {value!r}")
    if not np.isfinite(rv) or abs(rv) > 0.1 * C_KMS:
        raise ConfigError(f"rv={rv!r} km/s is not a finite velocity below 0.1 c")
    wl = _check_wavelength(wavelength)
    teff, logg, he = _check_parameters(teff, logg, he)
    factor = doppler_factor(rv)
    # rest-frame internal grid, padded for the kernels and the line wings
    pad = 80.0 + wl[-1] * (vsini + 3 * macroturbulence + 500.0) / C_KMS
    lo, hi = wl[0] / factor - pad, wl[-1] / factor + pad
    step = _SPECTRUM_STEP_KMS / C_KMS
    lam = lo * np.exp(np.arange(0.0, np.log(hi / lo) + step, step))
    flux = np.ones_like(lam)
    for ident, (dl, resid) in _line_profiles(teff, logg, he).items():
        center = line(ident).wavelength(medium)
        if center + dl[-1] < lam[0] or center - dl[-1] > lam[-1]:
            continue
        i0, i1 = np.searchsorted(lam, [center - dl[-1], center + dl[-1]])
        flux[i0:i1] *= np.interp(np.abs(lam[i0:i1] - center), dl, resid, right=1.0)
    broad = rotation_kernel(_SPECTRUM_STEP_KMS, vsini)
    if macroturbulence > 0:
        broad = np.convolve(
            broad, gaussian_kernel(_SPECTRUM_STEP_KMS, macroturbulence / np.sqrt(2.0))
        )
    flux = _convolve(flux, broad)
    for ident, spec in (emission_lines or {}).items():
        ew, fwhm, sep = _parse_emission(spec)
        flux += _emission_component(lam, line(ident).wavelength(medium), ew, fwhm, sep)
    if resolution_fwhm:
        if resolution_fwhm < 0:
            raise ConfigError(f"resolution_fwhm must be >= 0, got {resolution_fwhm!r}")
        mid = 0.5 * (wl[0] + wl[-1])
        sigma_kms = C_KMS * resolution_fwhm / mid / 2.354820045
        flux = _convolve(flux, gaussian_kernel(_SPECTRUM_STEP_KMS, sigma_kms))
    return np.interp(wl, lam * factor, flux)


def _convolve(flux: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """Convolve with a normalised kernel, padding with the edge values (continuum ~ 1)."""
    if kernel.size == 1:
        return flux
    from scipy.signal import fftconvolve

    n = kernel.size // 2
    padded = np.concatenate([np.full(n, flux[0]), flux, np.full(n, flux[-1])])
    return fftconvolve(padded, kernel, mode="same")[n:-n]


def add_emission(
    flux, wavelength, line_id: str, ew: float, *, fwhm_kms: float = DEFAULT_EMISSION_FWHM,
    rv: float = 0.0, peak_separation_kms: float = 0.0, medium: str = "air",
) -> np.ndarray:
    """Return ``flux`` plus a Gaussian emission line (single- or double-peaked).

    Parameters
    ----------
    flux : array
        Normalised flux (not modified).
    wavelength : array
        Wavelengths (Angstrom) in ``medium``.
    line_id : str
        Catalogue line at whose rest wavelength the emission is centred.
    ew : float
        Equivalent width (Angstrom); negative for emission, as in line tables.
    fwhm_kms : float
        FWHM of each peak (km/s), as observed (include the instrument yourself).
    rv : float
        Radial velocity of the emitting gas (km/s).
    peak_separation_kms : float
        Separation of two equal peaks (km/s); 0 for a single peak (Of-type emission).
    medium : {"air", "vacuum"}
        Medium of ``wavelength``.
    """
    wl = _check_wavelength(wavelength)
    out = np.array(flux, dtype=float, copy=True)
    if out.shape != wl.shape:
        raise ConfigError("flux and wavelength must have the same shape")
    if fwhm_kms <= 0 or peak_separation_kms < 0:
        raise ConfigError("fwhm_kms must be > 0 and peak_separation_kms >= 0")
    center = line(line_id).wavelength(medium) * doppler_factor(rv)
    return out + _emission_component(wl, center, ew, fwhm_kms, peak_separation_kms)


_LUMCLASS_NUMBER = {"V": 5.0, "IV": 4.0, "III": 3.0, "II": 2.0, "IB": 1.0, "IAB": 1.0,
                    "IA": 1.0, "I": 1.0}


def parameters_for_type(subtype: float, lumclass: str = "V") -> tuple[float, float]:
    """(Teff in K, log g) of an MK type, from the published scales.

    Reads the tracks of :mod:`starlines.teffscale`: Martins, Schaerer & Hillier (2005)
    observational scale for O stars (Table 4 V, Table 5 III, Table 6 I; log g from their
    Tables 1-3), Pecaut & Mamajek (2013, Table 5, version 2024.05.15) for B dwarfs, Zorec
    et al. (2009, Table 6) for B giants and Markova & Puls (2008, eq. 1) for B supergiants.

    Parameters
    ----------
    subtype : float
        O3 -> 3.0 ... O9.7 -> 9.7, B0 -> 10.0, B0.5 -> 10.5 ... B3 -> 13.0 (up to B5 =
        15.0; the model is calibrated for O3-B3).
    lumclass : str
        "V", "IV", "III", "II", "I", "Ib", "Iab" or "Ia".
    """
    from starlines.teffscale import type_parameters

    key = str(lumclass).strip().upper()
    if key not in _LUMCLASS_NUMBER:
        raise ConfigError(
            f"unknown luminosity class {lumclass!r}; valid: V, IV, III, II, Ib, Iab, Ia, I"
        )
    if not np.isfinite(subtype) or not 3.0 <= subtype <= 15.0:
        raise ConfigError(f"subtype {subtype!r} is outside O3-B5 (3.0-15.0)")
    teff, logg = type_parameters(float(subtype), _LUMCLASS_NUMBER[key])
    return float(teff), float(logg)
