"""Text spectra: 2 or 3 columns (wavelength, flux, [uncertainty]), whitespace, comma,
semicolon or tab separated, with ``#`` comment lines and an optional header line.

The wavelength unit comes from the ``wavelength_unit`` argument, else from the wavelength
column's name (``wavelength_angstrom``, ``lambda[nm]``, ``wave (A)``), else from a comment
or header line that names the wavelength and a unit (``# Wavelength [nm]  Flux``); when
nothing states it, it is inferred only when unambiguous (see
:func:`starlines.readers_common.unit_factor`). ``# KEY = value`` comment lines are read as
header cards (``# OBJECT = HD 108``, ``# AIRORVAC = vac``); a comment saying "vacuum" or
"air" (not both) states the medium.
"""

from __future__ import annotations

import gzip
import re

import numpy as np

from starlines.errors import InputFormatError
from starlines.headers import Cards, angstrom_per_unit, header_from_comments, medium_from_cards
from starlines.readers_common import ReadOptions, make_spectrum, settle_medium, unit_factor
from starlines.spectrum import Spectrum

__all__ = ["read_text", "unit_from_text"]

_COMMENT = ("#", "%", ";", "!", "//")
_UNIT_WORD = re.compile(
    r"(?<![a-z])(angstroms?|angstroem|å|nm|nanomet(?:er|re)s?|microns?|µm|um)(?![a-z])"
)
_BRACKET = re.compile(r"[\[(]\s*([^\])\s]{1,12})\s*[\])]")
_UNIT_NAMES = {1.0: "Angstrom", 10.0: "nm", 1e4: "um", 1e10: "m", 1e8: "cm", 1e7: "mm"}
_WAVE_WORD = re.compile(r"wave|lambda|wl\b|wvl|λ", re.IGNORECASE)


def _units_in(text: str) -> set[float]:
    """Angstrom-per-unit factors of every wavelength unit named in ``text``."""
    low = text.lower()
    found = {angstrom_per_unit(m.group(1)) for m in _UNIT_WORD.finditer(low)}
    for m in _BRACKET.finditer(text):
        f = angstrom_per_unit(m.group(1))
        if f is not None:
            found.add(f)
    found.discard(None)
    return found


def unit_from_text(column_name: str | None, lines: list[str]) -> str | None:
    """Wavelength unit named by the column name or by lines that mention the wavelength.

    Returns the unit as a string for :func:`~starlines.headers.angstrom_per_unit`
    (``"Angstrom"``, ``"nm"``...), or None when absent or contradictory.
    """
    sources = [column_name] if column_name else []
    for candidates in (sources, [ln for ln in lines if _WAVE_WORD.search(ln)]):
        found: set[float] = set()
        for text in candidates:
            found |= _units_in(text)
        if len(found) == 1:
            factor = found.pop()
            return _UNIT_NAMES.get(factor, f"{factor:g} Angstrom")
    return None


def _medium_words(comments: list[str]) -> tuple[str | None, str]:
    text = " ".join(comments).lower()
    vac = re.search(r"\bvac(uum)?\b", text) is not None
    air = re.search(r"\bair\b", text) is not None
    if vac != air:
        return ("vacuum" if vac else "air"), "comment"
    return None, ""


def _read_lines(path: str) -> list[str]:
    try:
        if path.endswith(".gz"):
            with gzip.open(path, "rt", encoding="utf-8", errors="replace") as fh:
                return fh.read().splitlines()
        with open(path, encoding="utf-8", errors="replace") as fh:
            return fh.read().splitlines()
    except (OSError, EOFError) as exc:
        raise InputFormatError(f"cannot read text ({exc})", path=path) from None


def _split(line: str, delimiter: str | None) -> list[str]:
    parts = line.split(delimiter) if delimiter else line.split()
    return [p.strip() for p in parts]


def _is_number(token: str) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True


def _parse(lines: list[str], path: str):
    """Comments, column names (or None) and the numeric table of a text file."""
    comments, body = [], []
    for n, raw in enumerate(lines, start=1):
        s = raw.strip()
        if not s:
            continue
        if s.startswith(_COMMENT):
            comments.append(s)
        else:
            body.append((n, s))
    if not body:
        raise InputFormatError("no data rows in the text file", path=path)
    first_data = next((s for _, s in body if _is_number(s.replace(",", " ").split()[0])),
                      body[0][1])
    delimiter = next((d for d in (",", ";", "\t") if d in first_data), None)
    names = None
    if not all(_is_number(t) for t in _split(body[0][1], delimiter) if t):
        names = _split(body[0][1], delimiter)
        body = body[1:]
    rows = []
    for n, s in body:
        tokens = [t for t in _split(s, delimiter) if t]
        try:
            rows.append([float(t) for t in tokens])
        except ValueError:
            raise InputFormatError(f"line {n} is not numeric: {s[:40]!r}", path=path) from None
    if not rows:
        raise InputFormatError("header line but no data rows", path=path)
    ncol = len(rows[0])
    if any(len(r) != ncol for r in rows):
        bad = next(n for (n, _), r in zip(body, rows) if len(r) != ncol)
        raise InputFormatError(f"line {bad} has a different number of columns than the "
                               f"first data line ({ncol})", path=path)
    if names is None and comments:  # '# wave flux err' just above the data
        last = comments[-1].lstrip("#%;!/ ").strip()
        tokens = _split(last, delimiter if delimiter and delimiter in last else None)
        if len(tokens) == ncol and not any(_is_number(t) for t in tokens):
            names = tokens
    return comments, names, np.array(rows, dtype=float)


def _columns(names: list[str] | None, ncol: int, path: str) -> tuple[int, int, int | None]:
    """Indices of wavelength, flux and uncertainty columns."""
    if ncol in (2, 3) and names is None:
        return 0, 1, (2 if ncol == 3 else None)
    if names is None:
        raise InputFormatError(f"{ncol} columns without a header line naming them "
                               "(expected wavelength, flux[, error])", path=path)
    low = [n.lower() for n in names]

    def find(pattern):
        return next((i for i, n in enumerate(low) if re.search(pattern, n)), None)

    iw = find(r"wave|lambda|wl|wvl|^lam")
    ie = find(r"err|sig|unc|noise|ivar|var")
    fi = find(r"flux|f_?lam|intens|count|norm|amplitude|spec")
    if iw is None and ncol in (2, 3):
        iw = 0
    if fi is None and ncol in (2, 3):
        fi = next(i for i in range(ncol) if i not in (iw, ie))
    if iw is None or fi is None:
        raise InputFormatError(f"cannot tell wavelength and flux among columns {names}",
                               path=path)
    return iw, fi, ie


def read_text(opts: ReadOptions) -> list[Spectrum]:
    """The spectrum in a text file (see the module docstring)."""
    path = opts.path
    comments, names, table = _parse(_read_lines(path), path)
    ncol = table.shape[1]
    if ncol < 2:
        raise InputFormatError("only one column; need wavelength and flux", path=path)
    iw, fi, ie = _columns(names, ncol, path)
    wave, flux = table[:, iw], table[:, fi]
    err = None
    if ie is not None:
        err = table[:, ie]
        kind = names[ie].lower() if names else ""
        with np.errstate(divide="ignore", invalid="ignore"):
            if "ivar" in kind:
                err = 1.0 / np.sqrt(err)
            elif re.search(r"var", kind):
                err = np.sqrt(err)
    header_lines = comments + ([" ".join(names)] if names else [])
    stated_unit = unit_from_text(names[iw] if names else None, header_lines)
    factor = unit_factor(opts, stated_unit, wave, where="column name or comment")
    cards = Cards(header_from_comments(comments))
    stated, reason = medium_from_cards(cards)
    if stated is None:
        stated, reason = _medium_words(comments)
    medium = settle_medium(opts, stated, reason)
    return [make_spectrum(opts, wave, flux, factor=factor, cards=cards, medium=medium,
                          uncertainty=err)]
