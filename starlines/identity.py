"""Star identity across nights: name normalisation and a sky cross-match.

Two spectra belong to the same star when

1. their object names normalise to the same key (:func:`normalise_name`: ``"HD 12345"``,
   ``"HD12345"`` and ``"hd  012345"`` all give ``"HD 12345"``) and, when both carry
   coordinates, those lie within the match radius; or
2. they carry no common name but their coordinates lie within the match radius
   (a coordinate-only file meets its star this way).

A name match whose coordinates are farther apart than the radius is *not* trusted: the two
are treated as different stars and a warning is logged. The default radius, 3 arcsec, is
common practice for cross-matching bright stars with epoch-2000 positions of arcsecond
quality (a few times the positional error plus proper motion over decades).

Durchmusterung names (BD, CD, CPD) are a zone and a number: ``BD+40 4220`` is zone +40,
star 4220. Without a separator the zone is the two digits after the sign (``BD+404220`` ->
``BD+40 4220``), so ``BD+4 4220`` (zone +04) never meets ``BD+40 4220``. A zone without a
sign is not guessed: such a name falls back to the generic key.
"""

from __future__ import annotations

import logging
import re
import unicodedata
from collections.abc import Sequence
from dataclasses import dataclass, field

from starlines.numeric import is_finite as _finite

__all__ = [
    "DEFAULT_RADIUS_ARCSEC",
    "StarRecord",
    "Match",
    "normalise_name",
    "resolve",
]

log = logging.getLogger("starlines.identity")

#: Default sky match radius in arcsec (common practice for bright stars, see module docstring).
DEFAULT_RADIUS_ARCSEC = 3.0

#: Object names that mean "no name" (FITS OBJECT placeholders).
_NO_NAME = {"", "UNKNOWN", "NONE", "N/A", "NA", "-", "NULL", "OBJECT", "TARGET"}

#: Catalogues written as PREFIX + integer (+ optional component letters). HDE continues the
#: HD numbering, so it shares the HD key (from memory: the HD Extension catalogue).
_NUMBERED = {"HD": "HD", "HDE": "HD", "HR": "HR", "HIP": "HIP", "SAO": "SAO", "ALS": "ALS",
             "LSS": "LSS", "MWC": "MWC", "HIC": "HIC", "GCRV": "GCRV"}

#: Durchmusterung catalogues: zone and number; largest |zone| each (from memory).
_DM_ZONES = {"BD": 89, "CD": 89, "CPD": 89, "SBD": 23}

#: Greek letter names -> the three-letter IAU abbreviations used in Bayer names.
_GREEK = {
    "ALPHA": "ALF", "BETA": "BET", "GAMMA": "GAM", "DELTA": "DEL", "EPSILON": "EPS",
    "ZETA": "ZET", "ETA": "ETA", "THETA": "TET", "THE": "TET", "IOTA": "IOT", "KAPPA": "KAP",
    "LAMBDA": "LAM", "MU": "MU", "NU": "NU", "XI": "XI", "OMICRON": "OMI", "PI": "PI",
    "RHO": "RHO", "SIGMA": "SIG", "TAU": "TAU", "UPSILON": "UPS", "PHI": "PHI", "CHI": "CHI",
    "PSI": "PSI", "OMEGA": "OME",
}

_NUMBERED_RE = re.compile(r"^([A-Z]+)\s*0*(\d+)\s*([A-Z]{0,2})$")
_DM_RE = re.compile(r"^(BD|CD|CPD|SBD)\s*([+-])\s*(\d+)(?:\s*[ °.]\s*|\s+)(\d+)\s*([A-Z]{0,2})$")
_DM_PACKED_RE = re.compile(r"^(BD|CD|CPD|SBD)\s*([+-])(\d{2})(\d+)\s*([A-Z]{0,2})$")
_TYC_RE = re.compile(r"^(TYC|GSC)\s*(\d+)\s*-\s*(\d+)\s*-\s*(\d+)$")
_PREFIX_RE = re.compile(r"^(V\*|\*\*|\*|NAME|CL\*|CL)\s+")
_TOKEN_RE = re.compile(r"\d+\.\d+|\d+|[A-Z]+|[+-]")


@dataclass(frozen=True)
class StarRecord:
    """A star already known to the archive.

    Attributes
    ----------
    id : int
        Archive star id.
    name : str
        Canonical (first seen) name.
    ra, dec : float or None
        ICRS position in degrees, None when no spectrum of the star had coordinates.
    keys : frozenset of str
        Normalised names (aliases) the star is known by.
    """

    id: int
    name: str
    ra: float | None = None
    dec: float | None = None
    keys: frozenset = field(default_factory=frozenset)

    @property
    def has_position(self) -> bool:
        """True when both coordinates are finite numbers."""
        return _finite(self.ra) and _finite(self.dec)


@dataclass(frozen=True)
class Match:
    """Outcome of :func:`resolve`.

    Attributes
    ----------
    star_id : int or None
        The matched star, or None when the spectrum is a new star.
    how : str
        ``"name+sky"``, ``"name"``, ``"sky"``, ``"new"`` or ``"none"`` (neither name nor
        position: the spectrum cannot be attached to a star).
    key : str or None
        Normalised name of the spectrum.
    separation_arcsec : float or None
        Distance to the matched (or clashing) star.
    warning : str or None
        Set when a name match was rejected because the positions disagree.
    """

    star_id: int | None
    how: str
    key: str | None = None
    separation_arcsec: float | None = None
    warning: str | None = None



def _fold(name: str) -> str:
    """Upper-case ASCII form: Greek letters spelled out, accents and degree signs dropped."""
    out = []
    for ch in unicodedata.normalize("NFKC", name):
        if "GREEK" in unicodedata.name(ch, "") and "LETTER" in unicodedata.name(ch, ""):
            word = unicodedata.name(ch).split()[-1]
            out.append(f" {word} ")
        elif ch == "°":
            out.append(" ")
        else:
            out.append(ch)
    text = unicodedata.normalize("NFKD", "".join(out)).encode("ascii", "ignore").decode()
    return re.sub(r"[\s_]+", " ", text.upper()).strip()


def _generic_key(text: str) -> str:
    tokens = []
    for tok in _TOKEN_RE.findall(text):
        if tok.isdigit():
            tok = str(int(tok))
        tokens.append(_GREEK.get(tok, tok))
    return " ".join(tokens)


def normalise_name(name: str | None) -> str | None:
    """Normalise a star name to a matching key.

    Parameters
    ----------
    name : str or None
        Object name as written in a file.

    Returns
    -------
    str or None
        The key (for example ``"HD 12345"``, ``"BD+40 4220"``, ``"TYC 1234-567-1"``,
        ``"ZET OPH"``), or None when the name is empty or a placeholder such as ``UNKNOWN``.

    Notes
    -----
    Upper case; runs of blanks and underscores are one blank; leading zeros of catalogue
    numbers are dropped; ``HDE`` reads as ``HD``; the SIMBAD-style prefixes ``V*``, ``*``,
    ``**``, ``NAME``, ``Cl*`` and ``Cl`` are dropped; Greek letters (spelled out, abbreviated
    or as Unicode) become the three-letter abbreviation. Anything else is split into letter,
    digit and sign tokens joined by single blanks. Signs are kept, a hyphen included (it may
    be a declination sign, as in ``2MASS J05353213-0526312``), so ``H7-01`` and ``H7 01``
    stay apart by name; the sky match joins them when both carry coordinates.
    """
    if name is None:
        return None
    text = _fold(str(name))
    if text in _NO_NAME:
        return None
    text = _PREFIX_RE.sub("", text)
    m = _NUMBERED_RE.match(text)
    if m and m.group(1) in _NUMBERED:
        suffix = f" {m.group(3)}" if m.group(3) else ""
        return f"{_NUMBERED[m.group(1)]} {int(m.group(2))}{suffix}"
    m = _DM_RE.match(text) or _DM_PACKED_RE.match(text)
    if m:
        cat, sign, zone, number, suffix = m.groups()
        if int(zone) <= _DM_ZONES[cat] and len(zone) <= 2:
            suffix = f" {suffix}" if suffix else ""
            return f"{cat}{sign}{int(zone):02d} {int(number)}{suffix}"
    m = _TYC_RE.match(text)
    if m:
        return f"{m.group(1)} " + "-".join(str(int(g)) for g in m.groups()[1:])
    return _generic_key(text) or None


def _separations(ra: float, dec: float, stars: Sequence[StarRecord]):
    """Angular distances in arcsec from (ra, dec) to each star (astropy SkyCoord)."""
    import astropy.units as u
    from astropy.coordinates import SkyCoord

    here = SkyCoord(float(ra) * u.deg, float(dec) * u.deg, frame="icrs")
    there = SkyCoord([s.ra for s in stars] * u.deg, [s.dec for s in stars] * u.deg,
                     frame="icrs")
    return here.separation(there).to_value(u.arcsec)


def resolve(name: str | None, ra: float | None, dec: float | None,
            stars: Sequence[StarRecord], *,
            radius_arcsec: float = DEFAULT_RADIUS_ARCSEC) -> Match:
    """Find which known star a spectrum belongs to.

    Parameters
    ----------
    name : str or None
        Object name of the spectrum.
    ra, dec : float or None
        ICRS position of the spectrum in degrees.
    stars : sequence of StarRecord
        Stars already known.
    radius_arcsec : float
        Sky match radius in arcsec.

    Returns
    -------
    Match
        The star found (by name confirmed by position, by name alone when a position is
        missing, or by position alone), or ``star_id=None`` for a new star.
    """
    key = normalise_name(name)
    has_pos = _finite(ra) and _finite(dec)
    if key is None and not has_pos:
        return Match(None, "none")
    warning = None
    named = [s for s in stars if key is not None and key in s.keys]
    if named:
        placed = [s for s in named if s.has_position]
        if placed and has_pos:
            seps = _separations(ra, dec, placed)
            best = int(seps.argmin())
            if seps[best] <= radius_arcsec:
                return Match(placed[best].id, "name+sky", key, float(seps[best]))
            unplaced = [s for s in named if not s.has_position]
            if unplaced:
                return Match(unplaced[0].id, "name", key)
            warning = (f"{name!r} matches star #{placed[best].id} ({placed[best].name}) by "
                       f"name but lies {seps[best]:.1f} arcsec away (> {radius_arcsec:g}); "
                       "treated as a different star")
            log.warning(warning)
        else:
            return Match(named[0].id, "name", key)
    if has_pos:
        others = [s for s in stars if s.has_position and s not in named]
        if others:
            seps = _separations(ra, dec, others)
            best = int(seps.argmin())
            if seps[best] <= radius_arcsec:
                return Match(others[best].id, "sky", key, float(seps[best]), warning)
    return Match(None, "new", key, None, warning)
