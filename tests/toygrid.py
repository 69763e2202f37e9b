"""A small analytic stand-in for the synthetic grid, for testing the classifier mechanics.

The EWs are smooth invented functions of Teff, log g and He/H with the qualitative
behaviour of hot-star lines (He II strengthening with Teff, He I peaking near 20 kK, Si IV
-> Si III -> Si II with falling Teff, Balmer lines stronger at high gravity). They are not
physical; tests that use them check the estimator and the rule calibration by injecting
a toy model and recovering its known parameters.
"""

from __future__ import annotations

import numpy as np
from astropy.table import QTable, Table


def _peak(t, centre, width):
    return np.exp(-0.5 * ((t - centre) / width) ** 2)


def toy_ews(teff, logg, he) -> dict[str, np.ndarray]:
    """Invented EWs (Angstrom) for arrays of Teff (K), log g, He/H."""
    t = np.asarray(teff, float)
    g = np.asarray(logg, float)
    y = np.asarray(he, float) / 0.1
    hot = 1.0 / (1.0 + np.exp(-(t - 33000.0) / 2500.0))
    return {
        "HeII4541": 0.8 * hot * y,
        "HeII4200": 0.6 * hot * y,
        "HeII4686": (0.9 * hot * y) * (g - 2.9) / 1.0,
        "HeI4471": (1.3 * _peak(t, 21000, 8000) + 0.05) * y**0.5,
        "HeI4144": (0.7 * _peak(t, 19000, 6000) + 0.02) * y**0.5,
        "HeI4388": (0.8 * _peak(t, 19000, 6500) + 0.02) * y**0.5,
        "HeI4713": (0.5 * _peak(t, 22000, 8000) + 0.02) * y**0.5,
        "SiIV4089": 0.45 * _peak(t, 30000, 4000) * (1.0 + 0.4 * (4.0 - g)),
        "SiIII4553": 0.35 * _peak(t, 24000, 4000),
        "SiII4128": 0.12 * _peak(t, 14000, 3500),
        "SiII4131": 0.15 * _peak(t, 14000, 3500),
        "MgII4481": 0.35 * _peak(t, 10000, 7000),
        "CII4267": 0.25 * _peak(t, 19000, 4000),
        "HI4340": 1.5 + 2.5 * (g - 2.5) + 2.0 * _peak(t, 12000, 8000),
        "HI4102": 1.6 + 2.6 * (g - 2.5) + 2.0 * _peak(t, 12000, 8000),
    }


def toy_grid() -> Table:
    """Grid over Teff 15-46 kK, log g 2.5-4.3, He/H 0.07, 0.10, 0.15."""
    t, g, y = np.meshgrid(np.arange(15000.0, 46001.0, 500.0), np.arange(2.5, 4.31, 0.2),
                          np.array([0.07, 0.10, 0.15]), indexing="ij")
    t, g, y = t.ravel(), g.ravel(), y.ravel()
    tab = Table({"teff": t, "logg": g, "he": y})
    for k, v in toy_ews(t, g, y).items():
        tab[f"ew_{k}"] = v
    return tab


def line_table(ews: dict[str, float], errs: dict[str, float] | float = 0.01,
               emission=(), status=None, snr=200.0) -> QTable:
    """Hand-built line table in the measure-stage layout (EW in Angstrom)."""
    import astropy.units as u

    ids = list(ews)
    err = [errs if np.isscalar(errs) else errs[i] for i in ids]
    tab = QTable()
    tab["line"] = ids
    tab["ew"] = np.array([ews[i] for i in ids], float) * u.AA
    tab["ew_err"] = np.array(err, float) * u.AA
    tab["status"] = [(status or {}).get(i, "measured") for i in ids]
    tab["emission"] = [i in emission for i in ids]
    tab.meta["snr"] = snr
    return tab
