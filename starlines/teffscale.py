"""Effective temperature and gravity versus MK type, and the inverse mapping.

Three tracks (luminosity class V, III and I), each a table of subtype number -> (Teff,
log g) from published calibrations (see :data:`TRACKS`). :func:`type_parameters` reads a
track; :func:`subtype_for_parameters` inverts all three: for a Teff it finds the subtype on
every track, then interpolates between the tracks in log g. It is the mapping the
nearest-neighbour model uses to label grid models with subtypes.

Sources (quoted from /work/shared/reference/criteria.md, section 4):

* O stars: Martins, Schaerer & Hillier (2005), observational Teff scales, Tables 4 (V;
  from memory except O5.5 V), 5 (III) and 6 (I); log g from their theoretical Tables 1-3.
* B dwarfs: Pecaut & Mamajek (2013), Table 5, online version 2024.05.15.
* B giants: Zorec et al. (2009), Table 6, class III column (transcribed).
* B supergiants: Markova & Puls (2008), eq. 1 (transcribed).
* B-star log g: from memory (dwarfs 4.0, giants 3.5, supergiants 3.1 at B0 falling to
  2.5 at B3); no table in criteria.md.

O9.7 is not tabulated by any of these; it is interpolated between O9.5 and B0.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = ["TRACKS", "type_parameters", "subtype_for_parameters", "lumclass_from_number"]

_O = (3.0, 4.0, 5.0, 5.5, 6.0, 6.5, 7.0, 7.5, 8.0, 8.5, 9.0, 9.5)
_B = (10.0, 10.5, 11.0, 11.5, 12.0, 12.5, 13.0, 14.0, 15.0)

#: luminosity number (V = 5, III = 3, I = 1) -> (subtypes, Teff in K, log g in cgs).
TRACKS: dict[float, tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]]] = {
    5.0: (
        _O + _B,
        # Martins et al. 2005 Table 4 (obs V; [memory] except O5.5 39865 [transcribed])
        (44852, 42857, 40862, 39865, 38867, 37870, 36872, 35874, 34877, 33879, 32882, 31884,
         # Pecaut & Mamajek 2013 Table 5, version 2024.05.15, B0V ... B3V, B4V, B5V
         31400, 29000, 26000, 24500, 20600, 18500, 17000, 16400, 15700),
        # Martins et al. 2005 Table 1 (theo V log g 3.92); B dwarfs 4.0 [memory]
        (3.92,) * 12 + (4.0,) * 9,
    ),
    3.0: (
        _O + (10.0, 11.0, 12.0, 13.0, 14.0, 15.0),
        # Martins et al. 2005 Table 5 (obs III) [transcribed]
        (44537, 42422, 40307, 39249, 38192, 37134, 36077, 35019, 33961, 32904, 31846, 30789,
         # Zorec et al. 2009 Table 6, class III, B0-B5 [transcribed]
         29070, 24880, 21740, 18900, 17310, 15890),
        # Martins et al. 2005 Table 2 (theo III log g); B giants 3.5 [memory]
        (3.77, 3.73, 3.69, 3.67, 3.65, 3.63, 3.61, 3.59, 3.57, 3.55, 3.53, 3.51)
        + (3.5,) * 6,
    ),
    1.0: (
        _O + (10.0, 11.0, 12.0, 13.0, 14.0, 15.0),
        # Martins et al. 2005 Table 6 (obs I) [transcribed]
        (42233, 40422, 38612, 37706, 36801, 35895, 34990, 34084, 33179, 32274, 31368, 30463,
         # Markova & Puls 2008 eq. 1, B0-B5 [transcribed]
         27800, 22632, 18945, 16463, 14910, 14013),
        # Martins et al. 2005 Table 3 (theo I log g); B supergiants [memory]
        (3.73, 3.65, 3.57, 3.52, 3.48, 3.44, 3.40, 3.36, 3.32, 3.28, 3.23, 3.19)
        + (3.1, 2.9, 2.7, 2.5, 2.4, 2.3),
    ),
}

_LUM_ORDER = (1.0, 3.0, 5.0)


def type_parameters(subtype: float, lumnumber: float = 5.0) -> tuple[float, float]:
    """Teff (K) and log g of a type, interpolated along and between the tracks.

    Parameters
    ----------
    subtype : float
        Subtype number (O3 = 3.0 ... B0 = 10.0 ... B5 = 15.0).
    lumnumber : float
        Luminosity class as a number (I = 1, III = 3, V = 5; in between interpolated).

    Returns
    -------
    teff, logg : float
        NaN outside the tabulated subtypes.
    """
    teffs, loggs = [], []
    for lum in _LUM_ORDER:
        sub, teff, logg = TRACKS[lum]
        if not sub[0] <= subtype <= sub[-1]:
            return float("nan"), float("nan")
        teffs.append(np.interp(subtype, sub, teff))
        loggs.append(np.interp(subtype, sub, logg))
    lum = float(np.clip(lumnumber, 1.0, 5.0))
    return float(np.interp(lum, _LUM_ORDER, teffs)), float(np.interp(lum, _LUM_ORDER, loggs))


@lru_cache(maxsize=1)
def _inverse_tracks() -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    out = []
    for lum in _LUM_ORDER:
        sub, teff, logg = (np.asarray(a, float) for a in TRACKS[lum])
        order = np.argsort(teff)  # increasing Teff for np.interp
        out.append((teff[order], sub[order], logg[order]))
    return out


def subtype_for_parameters(teff, logg) -> tuple[np.ndarray, np.ndarray]:
    """Subtype number and luminosity number for Teff and log g (the inverse of the tracks).

    Parameters
    ----------
    teff : float or array_like
        Effective temperature in K.
    logg : float or array_like
        Surface gravity, log10 of cm s^-2.

    Returns
    -------
    subtype, lumnumber : numpy.ndarray
        Subtype number (clipped to the tabulated range O3-B5 at the ends) and luminosity
        number (1 = I, 3 = III, 5 = V; clipped to 1-5).
    """
    teff, logg = np.broadcast_arrays(np.asarray(teff, float), np.asarray(logg, float))
    (s1, s3, s5), (g1, g3, g5) = zip(
        *((np.interp(teff, t_tab, s_tab), np.interp(teff, t_tab, g_tab))
          for t_tab, s_tab, g_tab in _inverse_tracks())
    )
    # piecewise-linear in log g between the I, III and V tracks (log g rises I -> V)
    low = np.clip((logg - g1) / (g3 - g1), 0.0, 1.0)
    high = np.clip((logg - g3) / (g5 - g3), 0.0, 1.0)
    below = logg < g3
    lum = np.where(below, 1.0 + 2.0 * low, 3.0 + 2.0 * high)
    sub = np.where(below, s1 + (s3 - s1) * low, s3 + (s5 - s3) * high)
    return sub, lum


def lumclass_from_number(lumnumber: float) -> str:
    """Roman class for a luminosity number: < 2 -> I, < 4 -> III (II-IV grouped), else V.

    The grouping V / IV-III-II / I follows Martins (2018, abstract), who finds these three
    groups separable in O stars.
    """
    if not np.isfinite(lumnumber):
        return ""
    if lumnumber < 2.0:
        return "I"
    if lumnumber < 4.0:
        return "III"
    return "V"
