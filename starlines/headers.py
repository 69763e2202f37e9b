"""Header keywords -> units, medium and :class:`~starlines.spectrum.ObservationMeta`.

Reads what a FITS header (or the ``KEY = value`` comment lines of a text spectrum) says
about the observation. Conventions, all documented here once:

* Wavelength units: ``CUNIT1``/``TUNITn``/IRAF ``units=`` strings; common spellings
  (``angstroms``, ``AA``, ``nm``, ``um``, ``m``) are known, anything else goes through
  :mod:`astropy.units`.
* Medium: explicit keywords (``AIRORVAC``, ``VACUUM``, ``AIR``) win over ``CTYPE1``; per the
  FITS WCS paper III (Greisen et al. 2006, A&A 446, 747, table 1) ``AWAV`` is air and
  ``WAVE`` vacuum wavelength.
* Longitudes are east positive (IAU; ``OBSGEO-L`` in paper III). A longitude whose value
  ends in ``W`` or whose comment says it is a west (positive) longitude is negated.
* Mid-exposure: ``MJD-MID``/``MJD-AVG``/``DATE-AVG`` if given, else the mean of start and end,
  else start (``MJD-OBS`` or ``DATE-OBS`` with ``UT``/``TIME-OBS``) + ``EXPTIME``/2.
* Velocity frame: ``SPECSYS`` if given (TOPOCENT/BARYCENT/HELIOCEN). Without it, an IRAF
  ``DOPCOR`` card means the wavelengths were Doppler corrected (taken as heliocentric, the
  IRAF ``rvcorrect`` frame); ``VHELIO`` alone is a computed, not applied, correction.
  Barycentric-correction keywords without ``SPECSYS`` are ambiguous: a
  :class:`~starlines.errors.StarlinesWarning` says they were taken as not applied.
* Resolution: stored as FWHM in Angstrom; a resolving power R becomes lambda_mid / R.
"""

from __future__ import annotations

import logging
import re
import warnings
from collections.abc import Mapping

from starlines.errors import InputFormatError, StarlinesWarning
from starlines.headers_coords import iso_to_mjd, mjd_mid, parse_angle, radec, site
from starlines.numeric import as_float as _as_float
from starlines.spectrum import ObservationMeta

__all__ = [
    "Cards",
    "angstrom_per_unit",
    "medium_from_cards",
    "meta_from_cards",
    "parse_angle",
    "iso_to_mjd",
]

log = logging.getLogger("starlines.readers")

_C_KMS = 299792.458  # speed of light, km/s (SI definition)

_UNIT_ALIASES = {
    "angstrom": 1.0, "angstroms": 1.0, "angstroem": 1.0, "a": 1.0, "aa": 1.0, "å": 1.0,
    "ang": 1.0, "0.1nm": 1.0, "0.1 nm": 1.0,
    "nm": 10.0, "nanometer": 10.0, "nanometers": 10.0, "nanometre": 10.0, "nanometres": 10.0,
    "um": 1e4, "µm": 1e4, "micron": 1e4, "microns": 1e4, "micrometer": 1e4, "mum": 1e4,
    "m": 1e10, "meter": 1e10, "meters": 1e10, "metre": 1e10, "metres": 1e10,
    "cm": 1e8, "mm": 1e7, "pm": 0.01,
}


class Cards:
    """Read-only view over one or more headers; the first that has a keyword wins.

    Parameters
    ----------
    *headers : astropy.io.fits.Header or Mapping
        Most specific first (data extension before primary). Plain mappings (from text
        comment lines) have no card comments.
    """

    def __init__(self, *headers):
        self._headers = [h for h in headers if h is not None]
        self.used: dict = {}

    def _find(self, key: str):
        for h in self._headers:
            if key in h:
                return h
        return None

    def get(self, key: str, default=None):
        """Value of ``key`` (blank strings count as absent); remembered in :attr:`used`."""
        h = self._find(key)
        if h is None:
            return default
        value = h[key]
        if isinstance(value, str):
            value = value.strip()
            if not value:
                return default
        elif value is None or type(value).__name__ == "Undefined":
            return default
        self.used[key] = value
        return value

    def comment(self, key: str) -> str:
        """Comment of ``key`` ('' for plain mappings or absent keys)."""
        h = self._find(key)
        comments = getattr(h, "comments", None)
        if comments is None:
            return ""
        try:
            return str(comments[key])
        except (KeyError, IndexError):
            return ""

    def first(self, keys) -> tuple[str | None, object]:
        """The first of ``keys`` present, and its value."""
        for k in keys:
            v = self.get(k)
            if v is not None:
                return k, v
        return None, None


def angstrom_per_unit(unit) -> float | None:
    """Angstrom per one wavelength unit named by ``unit``; None if it is not a length."""
    if unit is None:
        return None
    text = str(unit).strip()
    key = text.lower().strip("[]() ")
    if key in _UNIT_ALIASES:
        return _UNIT_ALIASES[key]
    import astropy.units as u

    try:
        return float(u.Unit(text, parse_strict="raise").to(u.AA))
    except (ValueError, TypeError, u.UnitsError):
        return None



# ----------------------------------------------------------------------------- medium
_AIR_WORDS = ("air", "a", "awav")
_VAC_WORDS = ("vac", "vacuum", "v", "wave")


def medium_from_cards(cards: Cards, ctype: str | None = None) -> tuple[str | None, str]:
    """Medium stated by the header, and the keyword that stated it.

    Parameters
    ----------
    cards : Cards
        The header(s).
    ctype : str, optional
        ``CTYPE1`` or the wavelength column's ``TCTYPn``.

    Returns
    -------
    medium : {"air", "vacuum"} or None
    reason : str
        e.g. ``"AIRORVAC='vac'"`` or ``"CTYPE1='AWAV'"``; empty when not stated.
    """
    from_ctype: tuple[str | None, str] = (None, "")
    if ctype:
        head = str(ctype).upper()[:4]
        if head in ("AWAV", "WAVE"):
            from_ctype = ("air" if head == "AWAV" else "vacuum"), f"CTYPE={ctype!r}"
    stated = _medium_keyword(cards)
    if stated[0] is None:
        return from_ctype
    if from_ctype[0] not in (None, stated[0]):
        log.warning("%s contradicts %s; the explicit keyword wins", stated[1], from_ctype[1])
    return stated


def _medium_keyword(cards: Cards) -> tuple[str | None, str]:
    for key in ("AIRORVAC", "AIRVAC", "WAVEMED", "WAV_MED"):
        v = cards.get(key)
        if isinstance(v, str):
            low = v.lower()
            if low in _AIR_WORDS:
                return "air", f"{key}={v!r}"
            if low in _VAC_WORDS:
                return "vacuum", f"{key}={v!r}"
    for key, true_medium in (("VACUUM", "vacuum"), ("AIR", "air")):
        v = cards.get(key)
        if isinstance(v, bool):
            other = "air" if true_medium == "vacuum" else "vacuum"
            return (true_medium if v else other), f"{key}={'T' if v else 'F'}"
    return None, ""


# ----------------------------------------------------------------------------- velocity frame
_FRAMES = {"TOPOCENT": "topocentric", "BARYCENT": "barycentric", "HELIOCEN": "heliocentric"}
_BARY_KEYS = (
    "BARYCORR", "BERV", "BARY_CORR", "BCV", "VBARY", "BVCORR",
    "ESO DRS BERV", "ESO QC BERV", "ESO QC VRAD BARYCOR",
)
_HELIO_KEYS = ("VHELIO", "HELIOCOR", "HELIO_RV", "ESO QC VRAD HELICOR")


def _kms(cards: Cards, key: str | None, value) -> float | None:
    v = _as_float(value)
    if v is None or key is None:
        return None
    comment = cards.comment(key).lower()
    if re.search(r"(?<!k)m/s|m s-1|\[m/s\]", comment) and "km" not in comment:
        v /= 1000.0
    return v


def _frame(cards: Cards, meta: ObservationMeta, path: str) -> None:
    bkey, bary = cards.first(_BARY_KEYS)
    hkey, helio = cards.first(_HELIO_KEYS)
    bary, helio = _kms(cards, bkey, bary), _kms(cards, hkey, helio)
    specsys = cards.get("SPECSYS")
    if specsys is not None:
        frame = _FRAMES.get(str(specsys).upper())
        if frame is None:
            raise InputFormatError(
                f"SPECSYS {specsys!r} is not supported (expected one of {sorted(_FRAMES)})",
                path=path,
            )
        meta.frame = frame
        if frame == "barycentric":
            meta.frame_correction_kms = bary
        elif frame == "heliocentric":
            meta.frame_correction_kms = helio if helio is not None else bary
        return
    dopcor = cards.get("DOPCOR") or cards.get("DOPCOR01")
    if dopcor is not None:
        # IRAF dopcor divides wavelengths by (1 + v/c): a correction +v_corr is applied by
        # giving it -v_corr, so the correction is minus the first number of the card.
        meta.frame = "heliocentric"
        meta.frame_correction_kms = helio
        if helio is None:
            v = _as_float(str(dopcor).split()[0])
            if v is not None:
                meta.frame_correction_kms = -(v * _C_KMS if abs(v) < 0.01 else v)
        return
    if bary is not None:
        warnings.warn(
            f"{path}: {bkey} = {bary:.3f} km/s but no SPECSYS says whether it was applied; "
            "wavelengths taken as topocentric",
            StarlinesWarning,
            stacklevel=4,
        )


# ----------------------------------------------------------------------------- resolution
_R_KEYS = ("SPEC_RES", "RESPOWER")
_FWHM_KEYS = ("FWHM", "RESOLUTN", "RESOLUTION", "RESOL", "SPECRES", "INSTRES")


def _resolution(cards: Cards, wave_mid: float | None, step: float | None) -> float | None:
    for key in _R_KEYS + _FWHM_KEYS:
        x = _as_float(cards.get(key))
        if x is None or x <= 0:
            continue
        comment = cards.comment(key).lower()
        if re.search(r"arcsec|seeing|\"|psf", comment):
            continue
        if key in _R_KEYS or re.search(r"power|lambda ?/|\br\b|λ/", comment):
            kind = "R"
        elif re.search(r"pix", comment):
            kind = "pix"
        elif re.search(r"\bnm\b", comment):
            kind, x = "A", x * 10.0
        elif re.search(r"ang|\baa?\b|å", comment):
            kind = "A"
        else:
            kind = "R" if x >= 200 else ("A" if x <= 50 else None)
        if kind == "R" and wave_mid:
            return wave_mid / x
        if kind == "pix" and step:
            return x * step
        if kind == "A":
            return x
    return None


# ----------------------------------------------------------------------------- all together
_KEEP = (
    "OBJECT", "DATE-OBS", "MJD-OBS", "EXPTIME", "RA", "DEC", "RADESYS", "TELESCOP",
    "INSTRUME", "OBSERVAT", "SPECSYS", "CTYPE1", "CUNIT1", "BUNIT",
)


def meta_from_cards(
    cards: Cards,
    *,
    path: str = "",
    wave_mid: float | None = None,
    step: float | None = None,
) -> ObservationMeta:
    """Build :class:`ObservationMeta` from header cards.

    Parameters
    ----------
    cards : Cards
        The header(s).
    path : str
        File name, for messages.
    wave_mid, step : float, optional
        Mid wavelength and pixel step (Angstrom), to turn R or pixels into a FWHM.

    Returns
    -------
    ObservationMeta
        With ``header`` holding the raw cards that were consulted.
    """
    meta = ObservationMeta()
    _, obj = cards.first(("OBJECT", "OBJNAME", "TARGNAME", "OBJ_NAME"))
    meta.object = None if obj is None else str(obj)
    meta.ra_deg, meta.dec_deg = radec(cards)
    _, exptime = cards.first(("EXPTIME", "EXPOSURE", "ITIME", "EXP_TIME"))
    meta.exptime = _as_float(exptime)
    meta.mjd_mid = mjd_mid(cards, meta.exptime)
    site(cards, meta)
    _frame(cards, meta, path)
    meta.resolution_fwhm = _resolution(cards, wave_mid, step)
    for key in _KEEP:
        cards.get(key)
    meta.header = {k: v for k, v in cards.used.items() if isinstance(v, (str, int, float))}
    return meta


def header_from_comments(lines: list[str]) -> Mapping[str, str]:
    """``KEY = value`` or ``KEY: value`` pairs from text comment lines (keys upper-cased)."""
    out: dict[str, str] = {}
    for text in lines:
        m = re.match(r"^\s*#+\s*([A-Za-z][\w\-]{0,30})\s*[=:]\s*(.+?)\s*$", text)
        if m:
            value = m.group(2).split(" / ")[0].strip().strip("'\"")
            out[m.group(1).upper()] = value
    return out
