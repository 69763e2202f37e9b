"""The in-memory spectrum every pipeline stage works on.

Units live at the boundary: a :class:`Spectrum` holds plain float arrays with the wavelength
in Angstrom, and records the medium (air or vacuum) of that wavelength explicitly, together
with whether the medium was stated by the file or assumed by the reader.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from starlines.errors import InputFormatError

__all__ = ["Spectrum", "ObservationMeta", "VelocityFrame", "Medium"]

Medium = Literal["air", "vacuum"]
VelocityFrame = Literal["topocentric", "barycentric", "heliocentric"]


@dataclass
class ObservationMeta:
    """What is known about the observation, all optional.

    Attributes
    ----------
    object : str or None
        Target name as written in the file.
    ra_deg, dec_deg : float or None
        ICRS coordinates in degrees.
    mjd_mid : float or None
        UTC Modified Julian Date of mid-exposure.
    exptime : float or None
        Exposure time in seconds.
    site_name : str or None
        Observatory name as written in the file.
    site_lat_deg, site_lon_deg, site_height_m : float or None
        Geodetic latitude, longitude (east positive) and height of the site.
    frame : {"topocentric", "barycentric", "heliocentric"}
        Velocity frame of the wavelength scale as read from the file.
    frame_correction_kms : float or None
        Correction already applied by the reduction, if stated.
    resolution_fwhm : float or None
        Instrumental FWHM in Angstrom if the file states it.
    header : dict
        Selected raw header cards, for provenance.
    """

    object: str | None = None
    ra_deg: float | None = None
    dec_deg: float | None = None
    mjd_mid: float | None = None
    exptime: float | None = None
    site_name: str | None = None
    site_lat_deg: float | None = None
    site_lon_deg: float | None = None
    site_height_m: float | None = None
    frame: VelocityFrame = "topocentric"
    frame_correction_kms: float | None = None
    resolution_fwhm: float | None = None
    header: dict = field(default_factory=dict)


@dataclass
class Spectrum:
    """A 1D spectrum with wavelength in Angstrom.

    Attributes
    ----------
    wavelength : numpy.ndarray
        Strictly increasing wavelength in Angstrom, in ``medium``.
    flux : numpy.ndarray
        Flux (any unit; ``flux_unit`` names it); bad pixels flagged in ``mask``.
    uncertainty : numpy.ndarray or None
        1-sigma flux uncertainty in the flux unit, or None when the file has none.
    mask : numpy.ndarray
        Boolean, True where a pixel must not be used (NaN, zero used as "no data", <= 0).
    medium : {"air", "vacuum"}
        Medium of the wavelength scale.
    medium_assumed : bool
        True when the file did not state the medium and the reader's default was used.
    path : str
        File the spectrum came from.
    label : str
        Part of the file (``"order 12"``, ``"fiber 3"``); empty for single spectra.
    flux_unit : str
        Unit string of the flux as read (``""`` when unknown or normalized).
    meta : ObservationMeta
        Observation metadata.
    """

    wavelength: np.ndarray
    flux: np.ndarray
    uncertainty: np.ndarray | None = None
    mask: np.ndarray | None = None
    medium: Medium = "air"
    medium_assumed: bool = True
    path: str = ""
    label: str = ""
    flux_unit: str = ""
    meta: ObservationMeta = field(default_factory=ObservationMeta)

    def __post_init__(self) -> None:
        self.wavelength = np.asarray(self.wavelength, dtype=float)
        self.flux = np.asarray(self.flux, dtype=float)
        if self.uncertainty is not None:
            self.uncertainty = np.asarray(self.uncertainty, dtype=float)
        if self.medium not in ("air", "vacuum"):
            raise InputFormatError(
                f"medium must be 'air' or 'vacuum', got {self.medium!r}", path=self.path
            )
        if self.wavelength.ndim != 1 or self.wavelength.shape != self.flux.shape:
            raise InputFormatError(
                f"wavelength {self.wavelength.shape} and flux {self.flux.shape} must be 1D "
                "and of equal length",
                path=self.path,
            )
        if self.uncertainty is not None and self.uncertainty.shape != self.flux.shape:
            raise InputFormatError("uncertainty and flux differ in length", path=self.path)
        bad = ~np.isfinite(self.flux) | (self.flux <= 0)
        if self.uncertainty is not None:
            bad |= ~np.isfinite(self.uncertainty) | (self.uncertainty <= 0)
        self.mask = bad if self.mask is None else (np.asarray(self.mask, dtype=bool) | bad)

    @property
    def name(self) -> str:
        """Display name: object if known, else the file name, plus the label."""
        import os

        base = self.meta.object or os.path.basename(self.path) or "spectrum"
        return f"{base} [{self.label}]" if self.label else base

    @property
    def good(self) -> np.ndarray:
        """Boolean array of usable pixels."""
        return ~self.mask

    def validate(self) -> Spectrum:
        """Check the wavelength solution and data; raise :class:`InputFormatError` if unusable.

        Returns
        -------
        Spectrum
            ``self``, for chaining.
        """
        w = self.wavelength
        if w.size < 10:
            raise InputFormatError(f"only {w.size} pixels", path=self.path)
        if not np.all(np.isfinite(w)):
            raise InputFormatError("wavelength solution has non-finite values", path=self.path)
        if not np.all(np.diff(w) > 0):
            raise InputFormatError(
                "wavelength solution is not strictly increasing", path=self.path
            )
        if not (100.0 < w[0] < 1e6):
            raise InputFormatError(
                f"wavelengths {w[0]:.4g}..{w[-1]:.4g} do not look like Angstrom", path=self.path
            )
        if not np.any(self.good):
            raise InputFormatError(
                "no usable flux (all NaN, zero or non-positive)", path=self.path
            )
        return self

    def to_quantities(self):
        """Wavelength and flux as astropy Quantities (Angstrom; flux unit if known)."""
        import astropy.units as u

        unit = u.Unit(self.flux_unit) if self.flux_unit else u.dimensionless_unscaled
        return self.wavelength * u.AA, self.flux * unit
