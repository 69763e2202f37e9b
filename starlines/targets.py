"""Target lists: what the catalogue says about the stars of a night.

A target list is a CSV or ECSV table with one row per star and these columns (any order,
case-insensitive; only one of ``name`` or ``ra``/``dec`` is required):

============  ======================================================================
``name``      star name as in the FITS OBJECT card (matched after normalisation)
``ra, dec``   ICRS position in degrees (or sexagesimal strings, RA in hours)
``sptype``    catalogue spectral type, e.g. ``O9.5 V`` (also ``type``)
``rv``        expected systemic velocity in km/s (also ``vsys``, ``systemic_rv``)
============  ======================================================================

A spectrum is matched to a target by normalised name (:func:`starlines.identity.
normalise_name`) or, failing that, by position within
:data:`starlines.identity.DEFAULT_RADIUS_ARCSEC`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from starlines.errors import ConfigError, StarlinesError
from starlines.identity import DEFAULT_RADIUS_ARCSEC, normalise_name
from starlines.numeric import is_finite as _finite

__all__ = ["Target", "read_targets", "match_targets"]

_ALIASES = {
    "name": ("name", "object", "star", "id"),
    "ra": ("ra", "ra_deg", "raj2000"),
    "dec": ("dec", "dec_deg", "dej2000", "decj2000"),
    "sptype": ("sptype", "type", "catalogue_type", "spectral_type", "sp_type"),
    "rv": ("rv", "vsys", "systemic_rv", "expected_rv", "rv_sys", "v_sys"),
}


@dataclass(frozen=True)
class Target:
    """One entry of a target list (positions in degrees, velocity in km/s)."""

    name: str = ""
    ra: float = math.nan
    dec: float = math.nan
    sptype: str = ""
    subtype: float = math.nan
    rv: float = math.nan

    @property
    def key(self) -> str | None:
        """Normalised name."""
        return normalise_name(self.name)

    def as_expected(self) -> dict:
        """The values night flags compare against."""
        return {"name": self.name, "sptype": self.sptype, "subtype": self.subtype,
                "rv": self.rv}


def _column(table, field: str):
    lower = {c.lower(): c for c in table.colnames}
    for alias in _ALIASES[field]:
        if alias in lower:
            return table[lower[alias]]
    return None


def _angle(value, *, hours: bool, path: str, what: str) -> float:
    if value is None or (isinstance(value, str) and not value.strip()):
        return math.nan
    try:
        return float(value)
    except (TypeError, ValueError):
        pass
    from astropy.coordinates import Angle

    try:
        unit = "hourangle" if hours else "deg"
        return float(Angle(str(value), unit=unit).deg)
    except Exception as exc:  # noqa: BLE001 - astropy raises several types for bad angles
        raise ConfigError(f"cannot read {what} {value!r} ({exc})", path=path) from None


def _subtype(text: str, path: str) -> float:
    from starlines.sptype import parse_sptype

    if not text:
        return math.nan
    try:
        return parse_sptype(text).subtype
    except StarlinesError as exc:
        raise ConfigError(f"catalogue type: {exc}", path=path) from None


def _cell(col, i):
    if col is None:
        return None
    value = col[i]
    if value is None or value is np.ma.masked:
        return None
    value = getattr(value, "value", value)
    return value.item() if hasattr(value, "item") else value


def read_targets(path: str | os.PathLike) -> list[Target]:
    """Read a target list (CSV or ECSV, by extension; anything else is tried as CSV).

    Raises
    ------
    ConfigError
        When the file cannot be read, has neither a name nor ra/dec columns, or holds an
        unreadable type or angle.
    """
    from astropy.table import Table

    path = os.fspath(path)
    fmt = "ascii.ecsv" if path.lower().endswith(".ecsv") else "ascii.csv"
    try:
        table = Table.read(path, format=fmt)
    except Exception as exc:  # noqa: BLE001
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ConfigError(f"cannot read the target list ({first})", path=path) from None
    cols = {f: _column(table, f) for f in _ALIASES}
    if cols["name"] is None and (cols["ra"] is None or cols["dec"] is None):
        raise ConfigError("target list needs a 'name' column or 'ra' and 'dec' columns",
                          path=path)
    targets = []
    for i in range(len(table)):
        sptype = str(_cell(cols["sptype"], i) or "").strip()
        rv = _cell(cols["rv"], i)
        try:
            rv = float(rv) if rv is not None and str(rv).strip() else math.nan
        except ValueError:
            raise ConfigError(f"row {i + 1}: expected velocity {rv!r} is not a number",
                              path=path) from None
        targets.append(Target(
            name=str(_cell(cols["name"], i) or "").strip(),
            ra=_angle(_cell(cols["ra"], i), hours=True, path=path, what="ra"),
            dec=_angle(_cell(cols["dec"], i), hours=False, path=path, what="dec"),
            sptype=sptype, subtype=_subtype(sptype, path), rv=rv,
        ))
    return targets


def _separation_arcsec(ra1, dec1, ra2, dec2) -> float:
    """Great-circle distance (haversine; exact enough below a degree)."""
    r1, d1, r2, d2 = map(math.radians, (ra1, dec1, ra2, dec2))
    h = math.sin((d2 - d1) / 2) ** 2 + math.cos(d1) * math.cos(d2) * math.sin((r2 - r1) / 2) ** 2
    return math.degrees(2 * math.asin(min(1.0, math.sqrt(h)))) * 3600.0


def match_targets(
    rows: Sequence[Mapping], targets: Sequence[Target], *,
    radius_arcsec: float = DEFAULT_RADIUS_ARCSEC,
) -> list[Target | None]:
    """The target of each result row (by name, else by position), or None."""
    by_key = {t.key: t for t in targets if t.key}
    placed = [t for t in targets if math.isfinite(t.ra) and math.isfinite(t.dec)]
    out: list[Target | None] = []
    for row in rows:
        hit = by_key.get(normalise_name(row.get("object") or None))
        ra, dec = row.get("ra"), row.get("dec")
        if hit is None and _finite(ra) and _finite(dec) and placed:
            best = min(placed, key=lambda t: _separation_arcsec(ra, dec, t.ra, t.dec))
            if _separation_arcsec(ra, dec, best.ra, best.dec) <= radius_arcsec:
                hit = best
        out.append(hit)
    return out

