"""The line catalogue: hydrogen-like lines computed from physics, He I and metals from NIST.

Every line has a short identifier (``HeII4686``, ``HI4340``, ``SiIII4553``...) made of the
ion and the wavelength by which the trade knows it. Wavelengths are held in both media;
:func:`catalogue` returns an :class:`astropy.table.QTable` and :func:`line` a single
:class:`Line` record with plain floats in Angstrom.

Hydrogenic lines (Balmer series of H I; He II n -> 3 and n -> 4) come from
:mod:`starlines.hydrogenic`; the rest from ``data/lines_nist.ecsv`` (air wavelengths with a
source column). Vacuum/air conversion uses Morton (2000) via :mod:`starlines.airvac`.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Literal

import numpy as np

from starlines.airvac import air_to_vacuum, vacuum_to_air
from starlines.hydrogenic import line_wavelength_vacuum

__all__ = ["Line", "catalogue", "line", "lines_in_range", "BLEND_DISTANCE", "HYDROGENIC"]

Medium = Literal["air", "vacuum"]

#: Two lines closer than this (Angstrom) are reported as blending with each other.
BLEND_DISTANCE = 3.0

_GREEK = {3: "alpha", 4: "beta", 5: "gamma", 6: "delta", 7: "epsilon"}

#: Hydrogenic lines in the catalogue: (ion, Z, n_lower, n_upper, id, common name).
HYDROGENIC: tuple[tuple[str, int, int, int, str, str], ...] = (
    *(
        ("H I", 1, 2, n, f"HI{round(_w)}", f"H{_GREEK.get(n, n)}" if n in _GREEK else f"H{n}")
        for n, _w in (
            (3, 6563), (4, 4861), (5, 4340), (6, 4102), (7, 3970),
            (8, 3889), (9, 3835), (10, 3798), (11, 3771), (12, 3750),
        )
    ),
    ("He II", 2, 3, 4, "HeII4686", "He II 4686"),
    *(
        ("He II", 2, 4, n, f"HeII{name}", f"He II 4-{n}")
        for n, name in (
            (5, "10124"), (6, "6560"), (7, "5411"), (8, "4859"), (9, "4541"),
            (10, "4339"), (11, "4200"), (12, "4100"), (13, "4026"), (14, "3968"),
            (15, "3923"), (16, "3887"),
        )
    ),
)


@dataclass(frozen=True)
class Line:
    """One catalogue line. Wavelengths in Angstrom.

    Attributes
    ----------
    id : str
        Identifier, e.g. ``"HeII4541"``.
    ion : str
        Spectroscopic notation, e.g. ``"He II"``.
    name : str
        Common name, e.g. ``"Hgamma"`` or ``"He II 4-9"``.
    wavelength_vacuum, wavelength_air : float
        Rest wavelength in vacuum and in standard air.
    lower, upper : int
        Principal quantum numbers for hydrogenic lines, -1 otherwise.
    origin : str
        ``"computed"`` (Rydberg formula) or ``"NIST"`` (laboratory value).
    source : str
        Where the number comes from.
    kind : str
        ``"balmer"``, ``"heii"``, ``"hei"`` or ``"metal"``.
    blends : tuple of str
        Ids of catalogue lines within :data:`BLEND_DISTANCE`.
    """

    id: str
    ion: str
    name: str
    wavelength_vacuum: float
    wavelength_air: float
    lower: int
    upper: int
    origin: str
    source: str
    kind: str
    blends: tuple[str, ...] = ()

    def wavelength(self, medium: Medium = "air") -> float:
        """Rest wavelength in ``medium`` (``"air"`` or ``"vacuum"``)."""
        _check_medium(medium)
        return self.wavelength_air if medium == "air" else self.wavelength_vacuum


def _check_medium(medium: str) -> None:
    if medium not in ("air", "vacuum"):
        raise ValueError(f"medium must be 'air' or 'vacuum', got {medium!r}")


def _hydrogenic_lines() -> list[dict]:
    rows = []
    for ion, z, lo, up, ident, name in HYDROGENIC:
        vac = line_wavelength_vacuum(z, lo, up)
        rows.append(
            dict(
                id=ident, ion=ion, name=name, wavelength_vacuum=vac,
                wavelength_air=float(vacuum_to_air(vac)), lower=lo, upper=up,
                origin="computed",
                source="Rydberg formula, reduced mass, Dirac fine structure; CODATA (astropy)",
                kind="balmer" if z == 1 else "heii",
            )
        )
    return rows


def _tabulated_lines() -> list[dict]:
    from astropy.table import Table

    path = resources.files("starlines") / "data" / "lines_nist.ecsv"
    with resources.as_file(path) as p:
        tab = Table.read(p, format="ascii.ecsv")
    rows = []
    for r in tab:
        air = float(r["wavelength_air"])
        rows.append(
            dict(
                id=str(r["id"]), ion=str(r["ion"]), name=f"{r['ion']} {r['id'][-4:]}",
                wavelength_vacuum=float(air_to_vacuum(air)), wavelength_air=air,
                lower=-1, upper=-1, origin=str(r["origin"]), source=str(r["source"]),
                kind="hei" if r["ion"] == "He I" else "metal",
            )
        )
    return rows


@lru_cache(maxsize=1)
def _all_lines() -> tuple[Line, ...]:
    rows = sorted(_hydrogenic_lines() + _tabulated_lines(), key=lambda d: d["wavelength_air"])
    air = np.array([d["wavelength_air"] for d in rows])
    lines = []
    for i, d in enumerate(rows):
        near = np.flatnonzero(np.abs(air - air[i]) < BLEND_DISTANCE)
        blends = tuple(rows[k]["id"] for k in near if k != i)
        lines.append(Line(**d, blends=blends))
    return tuple(lines)


def line(ident: str) -> Line:
    """Look up one line by id.

    Parameters
    ----------
    ident : str
        Line id such as ``"HeI4471"``.

    Raises
    ------
    KeyError
        If the id is unknown; the message lists the valid ids.
    """
    for ln in _all_lines():
        if ln.id == ident:
            return ln
    valid = ", ".join(ln.id for ln in _all_lines())
    raise KeyError(f"unknown line id {ident!r}; valid ids: {valid}")


def all_lines() -> tuple[Line, ...]:
    """Every catalogue line, sorted by wavelength."""
    return _all_lines()


def lines_in_range(
    wmin: float, wmax: float, *, medium: Medium = "air", margin: float = 0.0
) -> list[Line]:
    """Lines whose rest wavelength in ``medium`` lies within [wmin + margin, wmax - margin]."""
    _check_medium(medium)
    return [
        ln for ln in _all_lines()
        if wmin + margin <= ln.wavelength(medium) <= wmax - margin
    ]


def catalogue(medium: Medium = "air"):
    """The line catalogue as a table.

    Parameters
    ----------
    medium : {"air", "vacuum"}
        Medium of the ``wavelength`` column (both media are always given too).

    Returns
    -------
    astropy.table.QTable
        Columns ``id, ion, name, lower, upper, wavelength_vacuum, wavelength_air, wavelength,
        medium, origin, source, kind, blends`` (wavelengths in Angstrom, blends as a
        comma-separated string of ids within 3 Angstrom).
    """
    import astropy.units as u
    from astropy.table import QTable

    _check_medium(medium)
    lines = _all_lines()
    tab = QTable()
    tab["id"] = [ln.id for ln in lines]
    tab["ion"] = [ln.ion for ln in lines]
    tab["name"] = [ln.name for ln in lines]
    tab["lower"] = [ln.lower for ln in lines]
    tab["upper"] = [ln.upper for ln in lines]
    tab["wavelength_vacuum"] = np.array([ln.wavelength_vacuum for ln in lines]) * u.AA
    tab["wavelength_air"] = np.array([ln.wavelength_air for ln in lines]) * u.AA
    tab["wavelength"] = np.array([ln.wavelength(medium) for ln in lines]) * u.AA
    tab["origin"] = [ln.origin for ln in lines]
    tab["source"] = [ln.source for ln in lines]
    tab["kind"] = [ln.kind for ln in lines]
    tab["blends"] = [",".join(ln.blends) for ln in lines]
    for col in ("wavelength_vacuum", "wavelength_air", "wavelength"):
        tab[col].info.format = ".4f"
    tab.meta["medium"] = medium
    tab.meta["air_vacuum_formula"] = "Morton (2000), ApJS 130, 403"
    tab.meta["blend_distance_angstrom"] = BLEND_DISTANCE
    return tab
