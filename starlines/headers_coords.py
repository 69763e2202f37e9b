"""Observation time, sky position and site from header cards (see :mod:`starlines.headers`).

Conventions: a numeric RA is in degrees, a sexagesimal RA string in hours; FK5 and ICRS are
taken as equal (they differ by less than 0.1 arcsec), FK4 (or an equinox before 1984) is
converted to ICRS. Longitudes are east positive; a value ending in ``W`` or a comment that
says west longitude / west positive is negated. ``OBSGEO-X/Y/Z`` are geocentric metres,
converted to WGS84 geodetic coordinates with ERFA ``gc2gd``.
"""

from __future__ import annotations

import logging
import math
import re
from typing import TYPE_CHECKING

from starlines.numeric import as_float as _as_float

if TYPE_CHECKING:
    from starlines.headers import Cards
    from starlines.spectrum import ObservationMeta

__all__ = ["parse_angle", "iso_to_mjd", "mjd_mid", "radec", "site"]

log = logging.getLogger("starlines.readers")



# ----------------------------------------------------------------------------- angles, time
_SEXA = re.compile(
    r"^\s*([+-]?)\s*(\d+(?:\.\d*)?)[\s:hd°]+(\d+(?:\.\d*)?)(?:[\s:m']+(\d+(?:\.\d*)?))?"
)


def parse_angle(value, *, hours: bool = False) -> float | None:
    """Degrees from a number or a sexagesimal string (``"05:35:17.3"``, ``"-5 23 28"``).

    Strings with two or three fields are sexagesimal, in hours when ``hours`` is True.
    A plain number (or numeric string) is taken in degrees. A trailing ``W``/``S`` negates.
    """
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return _as_float(value)
    if not isinstance(value, str):
        return None
    text = value.strip().upper()
    sign = 1.0
    if text[-1:] in ("W", "S"):
        sign, text = -1.0, text[:-1].strip()
    elif text[-1:] in ("E", "N"):
        text = text[:-1].strip()
    plain = _as_float(text)
    if plain is not None:
        return sign * plain
    m = _SEXA.match(text)
    if m is None:
        return None
    a, b, c = float(m.group(2)), float(m.group(3)), float(m.group(4) or 0.0)
    out = a + b / 60.0 + c / 3600.0
    if m.group(1) == "-":
        out = -out
    return sign * out * (15.0 if hours else 1.0)


_ISO = re.compile(
    r"^\s*(\d{4})-(\d{1,2})-(\d{1,2})(?:[T ](\d{1,2}):(\d{1,2})(?::(\d{1,2}(?:\.\d*)?))?)?\s*Z?\s*$"
)
_OLD_DATE = re.compile(r"^\s*(\d{1,2})/(\d{1,2})/(\d{2})\s*$")  # dd/mm/yy, pre-2000 FITS


def _days_from_civil(y: int, m: int, d: int) -> int:
    """Days since 1970-01-01 of a Gregorian date (H. Hinnant's algorithm)."""
    y -= m <= 2
    era = (y if y >= 0 else y - 399) // 400
    yoe = y - era * 400
    doy = (153 * (m + (-3 if m > 2 else 9)) + 2) // 5 + d - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    return era * 146097 + doe - 719468


def iso_to_mjd(text: str) -> tuple[float, bool] | None:
    """MJD of an ISO-8601 (or old ``dd/mm/yy``) date; and whether it contained a time.

    MJD 40587 is 1970-01-01 (the Unix epoch), so MJD = 40587 + days since then.
    """
    m = _ISO.match(text)
    if m:
        y, mo, d = int(m.group(1)), int(m.group(2)), int(m.group(3))
        has_time = m.group(4) is not None
        frac = 0.0
        if has_time:
            sec = float(m.group(6) or 0.0)
            frac = (int(m.group(4)) * 3600 + int(m.group(5)) * 60 + sec) / 86400.0
        return 40587 + _days_from_civil(y, mo, d) + frac, has_time
    m = _OLD_DATE.match(text)
    if m:
        d, mo, yy = int(m.group(1)), int(m.group(2)), int(m.group(3))
        return 40587 + _days_from_civil(1900 + yy, mo, d), False
    return None


def _time_of_day(cards: Cards) -> float | None:
    """UT of the start from ``UT``/``UTC``/``TIME-OBS``/``UTSTART``, in days."""
    key, v = cards.first(("TIME-OBS", "UTSTART", "UT-START", "UT", "UTC"))
    if key is None:
        return None
    if isinstance(v, str) and ":" in v:
        hours = parse_angle(v)
        return None if hours is None else hours / 24.0
    x = _as_float(v)
    if x is None:
        return None
    if "sec" in cards.comment(key).lower() or x > 24.0:
        return x / 86400.0
    return x / 24.0


def _to_utc(mjd: float, scale: str) -> float:
    if scale in ("UTC", "UT", ""):
        return mjd
    from astropy.time import Time

    try:
        return float(Time(mjd, format="mjd", scale=scale.lower()).utc.mjd)
    except ValueError:
        log.info("time scale %r not understood; MJD taken as UTC", scale)
        return mjd


def mjd_mid(cards: Cards, exptime: float | None) -> float | None:
    scale = str(cards.get("TIMESYS", "UTC")).upper()
    key, v = cards.first(("MJD-MID", "MJD-AVG"))
    if key is not None and _as_float(v) is not None:
        return _to_utc(float(v), scale)
    v = cards.get("DATE-AVG")
    parsed = iso_to_mjd(v) if isinstance(v, str) else None
    if parsed is not None and parsed[1]:
        return _to_utc(parsed[0], scale)
    start = _as_float(cards.get("MJD-OBS"))
    if start is None:
        v = cards.get("DATE-OBS") or cards.get("DATE_OBS")
        parsed = iso_to_mjd(v) if isinstance(v, str) else None
        if parsed is None:
            return None
        start, has_time = parsed
        if not has_time:
            tod = _time_of_day(cards)
            if tod is None:
                log.info("DATE-OBS %r has no time of day and no UT card; no MJD", v)
                return None
            start += tod
    end = _as_float(cards.get("MJD-END"))
    if end is not None and end >= start:
        return _to_utc(0.5 * (start + end), scale)
    return _to_utc(start + (exptime or 0.0) / 2.0 / 86400.0, scale)


# ----------------------------------------------------------------------------- position, site
_RADEC_KEYS = (
    ("RA", "DEC"), ("OBJRA", "OBJDEC"), ("RA_OBJ", "DEC_OBJ"), ("RA_TARG", "DEC_TARG"),
    ("TARGRA", "TARGDEC"), ("CAT-RA", "CAT-DEC"), ("OBSRA", "OBSDEC"),
)


def radec(cards: Cards) -> tuple[float | None, float | None]:
    for kra, kdec in _RADEC_KEYS:
        ra, dec = cards.get(kra), cards.get(kdec)
        if ra is None or dec is None:
            continue
        ra_hours = isinstance(ra, str) and _as_float(ra) is None
        if not ra_hours and re.search(r"\bhours?\b|\[h\]", cards.comment(kra).lower()):
            ra_hours = True
        ra_deg, dec_deg = parse_angle(ra, hours=ra_hours), parse_angle(dec)
        if ra_deg is None or dec_deg is None or not -90 <= dec_deg <= 90:
            continue
        return _to_icrs(cards, ra_deg % 360.0, dec_deg)
    return None, None


def _to_icrs(cards: Cards, ra: float, dec: float) -> tuple[float, float]:
    """FK5/ICRS are taken as equal (they differ by < 0.1 arcsec); FK4 is converted."""
    system = str(cards.get("RADESYS") or cards.get("RADECSYS") or "").upper()
    equinox = _as_float(cards.get("EQUINOX") or cards.get("EPOCH"))
    if not system:
        system = "FK4" if equinox is not None and equinox < 1984.0 else "ICRS"
    if system == "FK4":
        from astropy.coordinates import FK4, SkyCoord

        eq = f"B{equinox or 1950.0}"
        c = SkyCoord(ra, dec, unit="deg", frame=FK4(equinox=eq)).icrs
        return float(c.ra.deg), float(c.dec.deg)
    if system not in ("ICRS", "FK5"):
        log.info("RADESYS %r taken as ICRS", system)
    return ra, dec


_SITE_KEYS = (
    ("SITELAT", "SITELONG", "SITEELEV"),
    ("OBSGEO-B", "OBSGEO-L", "OBSGEO-H"),
    ("LATITUDE", "LONGITUD", "ALTITUDE"),
    ("LATITUDE", "LONGITUD", "ELEVATIO"),
    ("OBS-LAT", "OBS-LONG", "OBS-ELEV"),
    ("LAT-OBS", "LONG-OBS", "ALT-OBS"),
    ("GEOLAT", "GEOLON", "GEOELEV"),
    ("ESO TEL GEOLAT", "ESO TEL GEOLON", "ESO TEL GEOELEV"),
)
_WEST = re.compile(
    r"west[ -]*(is )?(positive|\+)|positive[ -]*(to (the )?)?west|\+ ?w\b|west(ern)? long"
    r"|long\w*\W+\(?west\)?|\(w\)|\[deg ?w\]|deg(rees)? w(est)?\b"
)
_EAST = re.compile(r"east[ -]*(is )?(positive|\+)|positive[ -]*(to (the )?)?east|east(ern)? long")


def _longitude(cards: Cards, key: str) -> float | None:
    raw = cards.get(key)
    lon = parse_angle(raw)
    if lon is None:
        return None
    if isinstance(raw, str) and raw.strip().upper().endswith(("W", "E")):
        return lon  # the letter already fixed the sign
    comment = cards.comment(key).lower()
    west = bool(_WEST.search(comment)) and not _EAST.search(comment)
    if west:
        log.info("%s = %r is a west longitude (comment %r); negated", key, raw, comment)
        lon = -lon
    return (lon + 180.0) % 360.0 - 180.0


def site(cards: Cards, meta: ObservationMeta) -> None:
    xyz = [_as_float(cards.get(f"OBSGEO-{a}")) for a in "XYZ"]
    if all(v is not None for v in xyz) and math.hypot(*xyz) > 6.0e6:
        import erfa

        lon, lat, h = erfa.gc2gd(1, xyz)  # 1 = WGS84
        meta.site_lon_deg = math.degrees(float(lon))
        meta.site_lat_deg = math.degrees(float(lat))
        meta.site_height_m = float(h)
    else:
        for klat, klon, kh in _SITE_KEYS:
            lat = parse_angle(cards.get(klat))
            lon = _longitude(cards, klon) if lat is not None else None
            if lat is None or lon is None or not -90 <= lat <= 90:
                continue
            meta.site_lat_deg, meta.site_lon_deg = lat, lon
            meta.site_height_m = _as_float(cards.get(kh))
            break
    _, name = cards.first(("OBSERVAT", "SITENAME", "TELESCOP"))
    meta.site_name = None if name is None else str(name)
