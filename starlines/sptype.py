"""MK spectral types as strings and as numbers.

The pipeline works with a *subtype number*: O3 -> 3.0 ... O9.7 -> 9.7, B0 -> 10.0,
B0.5 -> 10.5, B1 -> 11.0 ... B3 -> 13.0 (A types continue at 20). :func:`parse_sptype`
reads the types found in catalogues and stellar libraries, including their oddities:

* a zero written for the letter O (``"07Ia"``, ``"08 Ib"``);
* two run-together digits for a range (``"B12III"`` = B1-2 III);
* ranges with a slash or hyphen (``"B1/B2Ib"``, ``"O9.5 III-IV"``);
* qualifiers glued to the class (``"B2IIIvar"``, ``"B0.5 Iae"``, ``"O7.5 III((f))"``).

:func:`format_sptype` writes a subtype number back as a type string on the usual grid of
subtypes (half types, plus O9.2, O9.7, B0.2, B0.7).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from starlines.errors import ClassificationError

__all__ = [
    "SpectralType",
    "parse_sptype",
    "format_sptype",
    "subtype_number",
    "subtype_label",
    "lumclass_number",
    "lumclass_group",
    "STANDARD_SUBTYPES",
]

#: Offset of each spectral class on the subtype-number scale.
CLASS_OFFSET = {"O": 0.0, "B": 10.0, "A": 20.0}

#: Subtypes written in modern O/early-B classification (common practice: half types plus
#: O9.2, O9.7, B0.2, B0.7), as subtype numbers; used to round a continuous estimate.
STANDARD_SUBTYPES: tuple[float, ...] = (
    2.0, 3.0, 3.5, 4.0, 4.5, 5.0, 5.5, 6.0, 6.5, 7.0, 7.5, 8.0, 8.5, 9.0, 9.2, 9.5, 9.7,
    10.0, 10.2, 10.5, 10.7, 11.0, 11.5, 12.0, 12.5, 13.0, 13.5, 14.0, 14.5, 15.0,
    16.0, 17.0, 18.0, 19.0, 19.5,
)

#: Luminosity class -> number (I = 1 ... V = 5); sub-classes of I in between.
_LUM_NUMBER = {
    "0": 0.5, "Ia+": 0.5, "Ia": 1.0, "Iab": 1.25, "I": 1.25, "Ib": 1.5,
    "II": 2.0, "III": 3.0, "IV": 4.0, "V": 5.0, "VI": 6.0,
}

_LUM = r"(?:Ia\+|Iab|Ia|Ib|III|II|IV|VI|V|I|0)"
_NUM = r"\d+(?:\.\d+)?"
_TYPE_RE = re.compile(
    rf"""^\s*
    (?P<letter>[OBA0])\s*(?P<sub>{_NUM})?
    (?:\s*[-/]\s*(?P<letter2>[OBA])?(?P<sub2>{_NUM}))?
    (?P<colon1>:)?
    \s*(?P<lum>{_LUM}(?:\s*[-/]\s*{_LUM})?)?
    (?P<qual>.*?)\s*$""",
    re.VERBOSE,
)


@dataclass(frozen=True)
class SpectralType:
    """A parsed MK type.

    Attributes
    ----------
    text : str
        The string as given.
    letter : str
        ``"O"``, ``"B"`` or ``"A"``.
    subtype : float
        Subtype number (mean of a range), NaN when only the letter is given.
    subtype_range : tuple of float
        Lowest and highest subtype number covered (equal for a single subtype).
    lumclass : str or None
        Luminosity class as written (``"Ia"``, ``"III"``, ``"II-III"``), None if absent.
    qualifiers : str
        Everything after the class: ``"((f))"``, ``"e"``, ``"var"``, ...
    uncertain : bool
        True when the type carries ``":"`` or ``"?"``.
    """

    text: str
    letter: str
    subtype: float
    subtype_range: tuple[float, float]
    lumclass: str | None
    qualifiers: str
    uncertain: bool

    @property
    def lumclass_number(self) -> float:
        """Luminosity class as a number (I = 1 ... V = 5), NaN if absent."""
        return lumclass_number(self.lumclass)

    @property
    def emission(self) -> bool:
        """True when the qualifiers mark emission lines (e, f, pe ...)."""
        q = self.qualifiers.replace("var", "").replace("v", "")
        return "e" in q or "f" in q


def subtype_number(letter: str, value: float) -> float:
    """Subtype number of ``letter`` + ``value`` (``"B", 0.5`` -> 10.5).

    Raises
    ------
    ClassificationError
        For a letter other than O, B, A or a value outside 0-9.9.
    """
    letter = "O" if letter == "0" else letter.upper()
    if letter not in CLASS_OFFSET:
        raise ClassificationError(f"spectral class {letter!r} is not one of O, B, A")
    if not 0.0 <= value < 10.0:
        raise ClassificationError(f"subtype {letter}{value:g} is outside 0-9.9")
    return CLASS_OFFSET[letter] + float(value)


def subtype_label(number: float) -> str:
    """Type string without luminosity class for a subtype number (10.5 -> ``"B0.5"``)."""
    if not math.isfinite(number):
        return ""
    for letter, off in sorted(CLASS_OFFSET.items(), key=lambda kv: -kv[1]):
        if number >= off - 1e-9 and (letter != "O" or number < 10.0):
            value = round(number - off, 2)
            return f"{letter}{value:g}"
    return f"O{number:g}"


def lumclass_number(lumclass: str | None) -> float:
    """Luminosity class as a number: Ia 1.0, Iab 1.25, Ib 1.5, II 2 ... V 5; ranges averaged."""
    if not lumclass:
        return math.nan
    parts = [p.strip() for p in re.split(r"[-/]", lumclass) if p.strip()]
    try:
        values = [_LUM_NUMBER[p] for p in parts]
    except KeyError:
        return math.nan
    return sum(values) / len(values)


def lumclass_group(lumclass: str | None) -> str:
    """Roman luminosity group (``"I"``, ``"II"``, ``"III"``, ``"IV"``, ``"V"``), or ``""``."""
    n = lumclass_number(lumclass)
    if not math.isfinite(n):
        return ""
    if n < 1.75:  # Ia+, Ia, Iab, Ib
        return "I"
    return ("I", "II", "III", "IV", "V", "VI")[min(int(math.floor(n + 0.5)), 6) - 1]


def _split_run_together(letter: str, sub: str) -> tuple[float, float]:
    """``B12`` -> (1, 2): two consecutive digits that cannot be one subtype are a range."""
    value = float(sub)
    if value < 10.0:
        return value, value
    if "." not in sub and len(sub) == 2 and int(sub[1]) == int(sub[0]) + 1:
        return float(sub[0]), float(sub[1])
    raise ClassificationError(f"subtype {letter}{sub} is outside 0-9.9")


def parse_sptype(text: str) -> SpectralType:
    """Parse an MK type string.

    Parameters
    ----------
    text : str
        For example ``"O7.5 III((f))"``, ``"B1 V"``, ``"07Ia"``, ``"B12III"``,
        ``"B1/B2Ib"``, ``"B2IIIvar"``, ``"B0.5 Iae"``.

    Returns
    -------
    SpectralType

    Raises
    ------
    ClassificationError
        If the string does not start with an O, B or A type.
    """
    m = _TYPE_RE.match(str(text))
    if m is None:
        raise ClassificationError(f"cannot read spectral type {text!r}")
    letter = "O" if m["letter"] == "0" else m["letter"]
    if m["sub"] is None:
        lo = hi = math.nan
    else:
        lo, hi = _split_run_together(letter, m["sub"])
        lo, hi = subtype_number(letter, lo), subtype_number(letter, hi)
    if m["sub2"] is not None:
        hi = subtype_number(m["letter2"] or letter, float(m["sub2"]))
    lum = m["lum"].replace(" ", "") if m["lum"] else None
    qual = m["qual"].strip()
    if qual[:1].isdigit() or qual[:1] == ".":
        raise ClassificationError(f"cannot read spectral type {text!r}")
    uncertain = bool(m["colon1"]) or ":" in qual or "?" in qual
    lo, hi = min(lo, hi), max(lo, hi)
    return SpectralType(
        text=str(text), letter=letter, subtype=0.5 * (lo + hi), subtype_range=(lo, hi),
        lumclass=lum, qualifiers=qual, uncertain=uncertain,
    )


def round_subtype(number: float) -> float:
    """Nearest entry of :data:`STANDARD_SUBTYPES` (NaN stays NaN)."""
    if not math.isfinite(number):
        return math.nan
    return min(STANDARD_SUBTYPES, key=lambda s: abs(s - number))


def format_sptype(
    subtype: float,
    lumclass: str | None = None,
    qualifiers: str = "",
    *,
    subtype_uncertain: bool = False,
    lumclass_uncertain: bool = False,
) -> str:
    """Write an MK type string.

    Parameters
    ----------
    subtype : float
        Subtype number; rounded to the nearest standard subtype. NaN gives ``""``.
    lumclass : str, optional
        Luminosity class (``"V"``, ``"III"``, ``"Ib"``...).
    qualifiers : str
        Appended after the class without a space (``"((f))"``, ``"e"``).
    subtype_uncertain, lumclass_uncertain : bool
        Append the MK uncertainty mark ``":"`` to the subtype or to the class.

    Examples
    --------
    >>> format_sptype(7.5, "III", "((f))")
    'O7.5 III((f))'
    >>> format_sptype(10.5, "Ia", "e")
    'B0.5 Iae'
    """
    if not math.isfinite(subtype):
        return ""
    out = subtype_label(round_subtype(subtype))
    if subtype_uncertain:
        out += ":"
    if lumclass:
        out += f" {lumclass}"
        if lumclass_uncertain:
            out += ":"
    return out + qualifiers
