"""Barycentric velocity correction from the observation metadata, offline.

The correction follows astropy's
``SkyCoord.radial_velocity_correction(kind="barycentric", obstime=..., location=...)``:
``z_b = gamma (1 + beta . n) / (1 + Phi / c^2)`` (Wright & Eastman 2014, eq. 28, as
implemented by astropy), with ``beta`` the observer's barycentric velocity over c (Earth's,
from ``get_body_barycentric_posvel``, plus the site's GCRS velocity), ``n`` the ICRS
direction of the target and ``Phi`` the gravitational potential at the site
(``EarthLocation.gravitational_redshift``). Astropy spends 5-15 ms per call on frame
machinery, so the observer's ``beta`` and ``Phi`` are computed in one vectorised astropy
call on hourly nodes of each UTC day per site (cached), and interpolated with a cubic
spline: agreement with ``radial_velocity_correction`` is better than 1 cm/s
(tests/test_barycentric.py; 3 mm/s largest seen), at ~0.07 ms per call after ~13 ms for the
first call of a site and day. ``exact=True`` calls astropy directly.
A measured topocentric velocity is combined as ``v_bary = v_topo + v_corr + v_topo * v_corr
/ c`` (astropy documentation of ``radial_velocity_correction``).

Spectra whose wavelengths are already barycentric or heliocentric (``meta.frame``) are not
corrected again. When anything is missing the velocity stays topocentric, with a flag and
a one-line reason; it is never silently left uncorrected.
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from starlines.offline import configure_astropy_offline, iers_prediction_end_mjd
from starlines.sites import location_from_meta

__all__ = ["FrameCorrection", "barycentric_correction", "frame_correction", "apply_correction",
           "C_KMS"]

#: Speed of light in km/s (exact, SI definition).
C_KMS = 299792.458

#: Flag names set here.
FLAG_TOPOCENTRIC = "rv-topocentric"
FLAG_IERS = "iers-extrapolated"


@dataclass
class FrameCorrection:
    """How the measured velocities relate to the barycentre.

    Attributes
    ----------
    frame : {"topocentric", "barycentric", "heliocentric"}
        Frame of the velocities after :func:`apply_correction`.
    correction_kms : float
        Barycentric correction to add (km/s); NaN when none is applied.
    reason : str
        One line: what was done and why.
    flags : list of str
        ``rv-topocentric`` when no correction could be made, ``iers-extrapolated`` when the
        date lies past the bundled IERS predictions.
    """

    frame: str
    correction_kms: float
    reason: str
    flags: list[str] = field(default_factory=list)


def barycentric_correction(ra_deg: float, dec_deg: float, mjd_utc: float, location, *,
                           exact: bool = False) -> float:
    """Barycentric radial-velocity correction in km/s (astropy, offline).

    Parameters
    ----------
    ra_deg, dec_deg : float
        ICRS position of the target in degrees.
    mjd_utc : float
        UTC Modified Julian Date of mid-exposure.
    location : astropy.coordinates.EarthLocation
        Observatory.
    exact : bool
        Call ``SkyCoord.radial_velocity_correction`` itself instead of interpolating the
        cached observer velocities (same formula; ~10 ms instead of ~0.05 ms).

    Returns
    -------
    float
        Correction in km/s, to be combined with :func:`apply_correction`.
    """
    import astropy.units as u

    configure_astropy_offline()
    if exact:
        return _astropy_correction(ra_deg, dec_deg, mjd_utc, location)
    x, y, z = (float(q.to_value(u.m)) for q in location.to_geocentric())
    day = math.floor(mjd_utc)
    spline_beta, spline_phi = _observer_day(x, y, z, day)
    beta = spline_beta(mjd_utc - day)
    phi_c = float(spline_phi(mjd_utc - day))
    r, d = math.radians(ra_deg), math.radians(dec_deg)
    n = (math.cos(d) * math.cos(r), math.cos(d) * math.sin(r), math.sin(d))
    gamma = 1.0 / math.sqrt(1.0 - float(beta @ beta))
    zb = gamma * (1.0 + float(beta @ np.array(n))) / (1.0 + phi_c)
    return (zb - 1.0) * C_KMS


#: Node spacing (days) and span of the cached observer velocities per UTC day.
_NODE_STEP_D = 1.0 / 24.0
_NODE_PAD_D = 3.0 / 24.0


@lru_cache(maxsize=64)
def _observer_day(x_m: float, y_m: float, z_m: float, day: int):
    """Cubic splines (in days since ``day``) of the observer's barycentric beta (3-vector)
    and of Phi / c^2 at a geocentric site, over one UTC day plus margins."""
    import astropy.units as u
    from astropy.constants import c
    from astropy.coordinates import EarthLocation, get_body_barycentric_posvel
    from astropy.time import Time
    from scipy.interpolate import CubicSpline

    loc = EarthLocation.from_geocentric(x_m * u.m, y_m * u.m, z_m * u.m)
    t_rel = np.arange(-_NODE_PAD_D, 1.0 + _NODE_PAD_D + 1e-9, _NODE_STEP_D)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # dates past the IERS table: see frame_correction
        t = Time(day + t_rel, format="mjd", scale="utc")
        _, v_earth = get_body_barycentric_posvel("earth", t)
        _, v_site = loc.get_gcrs_posvel(t)
        phi = loc.gravitational_redshift(t)
    beta = ((v_earth + v_site).xyz / c).to_value(u.dimensionless_unscaled).T
    phi_c = (phi / c).to_value(u.dimensionless_unscaled)
    return CubicSpline(t_rel, beta, axis=0), CubicSpline(t_rel, phi_c)


def _astropy_correction(ra_deg: float, dec_deg: float, mjd_utc: float, location) -> float:
    import astropy.units as u
    from astropy.coordinates import SkyCoord
    from astropy.time import Time

    coord = SkyCoord(ra=ra_deg * u.deg, dec=dec_deg * u.deg, frame="icrs")
    obstime = Time(mjd_utc, format="mjd", scale="utc")
    with warnings.catch_warnings():
        # dates past the IERS predictions: astropy warns (iers_degraded_accuracy = "warn")
        # and ERFA calls future years "dubious"; both are reported by frame_correction.
        warnings.simplefilter("ignore")
        vcorr = coord.radial_velocity_correction(kind="barycentric", obstime=obstime,
                                                 location=location)
    return float(vcorr.to_value(u.km / u.s))


def apply_correction(rv_kms: float, correction_kms: float) -> float:
    """Combine a topocentric velocity with a barycentric correction (km/s).

    ``v + corr + v * corr / c`` as in the astropy documentation; a NaN correction returns
    ``rv_kms`` unchanged.
    """
    if not math.isfinite(correction_kms):
        return rv_kms
    return rv_kms + correction_kms + rv_kms * correction_kms / C_KMS


def _missing(meta) -> list[str]:
    missing = []
    if meta.mjd_mid is None or not math.isfinite(float(meta.mjd_mid)):
        missing.append("mid-exposure time")
    if meta.ra_deg is None or meta.dec_deg is None:
        missing.append("RA/Dec")
    return missing


def frame_correction(meta, *, site: str | None = None,
                     site_config: str | os.PathLike | None = None) -> FrameCorrection:
    """Decide and compute the barycentric correction for one observation.

    Parameters
    ----------
    meta : ObservationMeta
        Observation metadata of the spectrum.
    site : str, optional
        Observatory named by the user (overrides the file).
    site_config : path, optional
        User TOML file of sites.

    Returns
    -------
    FrameCorrection

    Raises
    ------
    ConfigError
        If ``site`` or ``site_config`` is invalid.
    """
    frame = getattr(meta, "frame", "topocentric") or "topocentric"
    if frame in ("barycentric", "heliocentric"):
        done = meta.frame_correction_kms
        note = f" ({done:+.3f} km/s applied by the reduction)" if done is not None else ""
        return FrameCorrection(frame, math.nan,
                               f"wavelengths already {frame} in the file{note}; not corrected")
    missing = _missing(meta)
    location, where = location_from_meta(meta, site=site, config=site_config)
    if location is None:
        missing.append(f"observatory site ({where})")
    if missing:
        return FrameCorrection("topocentric", math.nan,
                               "topocentric: no barycentric correction, missing "
                               + ", ".join(missing), [FLAG_TOPOCENTRIC])
    corr = barycentric_correction(float(meta.ra_deg), float(meta.dec_deg),
                                  float(meta.mjd_mid), location)
    flags = []
    reason = f"barycentric correction {corr:+.3f} km/s (astropy; location from {where})"
    if float(meta.mjd_mid) > iers_prediction_end_mjd():
        flags.append(FLAG_IERS)
        reason += "; date past the bundled IERS predictions (error << 1 m/s)"
    return FrameCorrection("barycentric", corr, reason, flags)
