"""Read spectrum files into :class:`~starlines.spectrum.Spectrum` objects.

:func:`read_spectra` accepts FITS (1D images with a linear or log-linear WCS, IRAF
multispec/echelle, wavelength/flux image extensions, binary tables) and text files (2-3
columns). The format is recognised from the content, not the extension. The result is in
Angstrom, increasing, with the medium either stated by the file or assumed from
``default_medium`` (``medium_assumed=True``, logged at INFO).

Every failure is an :class:`~starlines.errors.InputFormatError` whose one-line message names
the file and the cause: missing file, directory, empty or garbage file, truncated FITS,
empty HDU, no or non-monotonic wavelength solution, no usable flux, or a wavelength range
that holds none of the classification lines (:data:`CLASSIFICATION_LINES`).

Module layout: this module dispatches and checks; :mod:`starlines.readers_fits`,
:mod:`starlines.readers_iraf` and :mod:`starlines.readers_ascii` parse;
:mod:`starlines.headers` turns header cards into metadata;
:mod:`starlines.readers_common` builds the :class:`Spectrum`.
"""

from __future__ import annotations

import gzip
import logging
import os
import zlib
from typing import Literal

import numpy as np

from starlines.errors import ConfigError, InputFormatError
from starlines.lines import line, lines_in_range
from starlines.readers_common import MEDIA, ReadOptions
from starlines.spectrum import Spectrum

__all__ = ["read_spectra", "read_spectrum", "describe", "merge_orders", "covered_lines",
           "CLASSIFICATION_LINES"]

log = logging.getLogger("starlines.readers")

#: Lines of the O/early-B classification region (about 3900-5000 A); a spectrum must cover
#: at least one of them (common practice: the MK criteria of O and B stars use these).
CLASSIFICATION_LINES = (
    "HeI4026", "HeII4026", "SiIV4089", "HI4102", "SiIV4116", "HeI4144", "HeII4200",
    "HI4340", "HeI4388", "HeI4471", "MgII4481", "HeII4541", "SiIII4553", "HeII4686",
    "HI4861", "HeI4922",
)

#: Edge margin (Angstrom) a line needs inside the good-pixel range to count as covered.
COVERAGE_MARGIN = 5.0

_FITS_SUFFIXES = (".fits", ".fit", ".fts", ".fz", ".fits.gz", ".fit.gz", ".fts.gz")


def _sniff(path: str) -> Literal["fits", "text"]:
    """Tell FITS from text by content; raise InputFormatError for anything else."""
    if not os.path.exists(path):
        raise InputFormatError("no such file", path=path)
    if os.path.isdir(path):
        raise InputFormatError("is a directory, not a spectrum file", path=path)
    try:
        with open(path, "rb") as fh:
            head = fh.read(2880)
        if head[:2] == b"\x1f\x8b":
            with gzip.open(path, "rb") as fh:
                head = fh.read(2880)
    except (OSError, EOFError, zlib.error) as exc:
        raise InputFormatError(f"cannot read ({exc})", path=path) from None
    if not head:
        raise InputFormatError("empty file (0 bytes)", path=path)
    if head.startswith(b"SIMPLE  ="):
        return "fits"
    if path.lower().endswith(_FITS_SUFFIXES):
        raise InputFormatError("not a FITS file (no SIMPLE card at the start)", path=path)
    text = head.decode("utf-8", errors="replace")
    control = sum(1 for c in text if (ord(c) < 32 and c not in "\r\n\t") or c == "\ufffd")
    if b"\x00" in head or control > 0.01 * len(text) + 1:
        raise InputFormatError("neither FITS nor text (binary content)", path=path)
    return "text"


def _check_options(medium, default_medium, path) -> None:
    if medium is not None and medium not in MEDIA:
        raise ConfigError(f"medium must be one of {MEDIA} or None, got {medium!r}", path=path)
    if default_medium not in MEDIA:
        raise ConfigError(f"default_medium must be one of {MEDIA}, got {default_medium!r}",
                          path=path)


def covered_lines(spec: Spectrum) -> list[str]:
    """Ids of :data:`CLASSIFICATION_LINES` inside the good-pixel range (by 5 A or more)."""
    good = spec.wavelength[spec.good]
    if good.size == 0:
        return []
    near = lines_in_range(good[0], good[-1], medium=spec.medium, margin=COVERAGE_MARGIN)
    return [ln.id for ln in near if ln.id in CLASSIFICATION_LINES]


def _check_coverage(spectra: list[Spectrum], path: str) -> None:
    if any(covered_lines(s) for s in spectra):
        return
    lo = min(s.wavelength[0] for s in spectra)
    hi = max(s.wavelength[-1] for s in spectra)
    names = ", ".join(line(i).name for i in ("HeI4471", "HeII4541", "HI4340", "HI4861"))
    raise InputFormatError(
        f"covers {lo:.0f}-{hi:.0f} A, none of the classification lines ({names}, ...)",
        path=path,
    )


def read_spectra(
    path: str | os.PathLike,
    *,
    wavelength_unit: str | None = None,
    medium: Literal["air", "vacuum"] | None = None,
    default_medium: Literal["air", "vacuum"] = "air",
    check_coverage: bool = True,
) -> list[Spectrum]:
    """Read every spectrum (order, fiber, row) in a file.

    Parameters
    ----------
    path : str or os.PathLike
        FITS or text file; the format is recognised from the content.
    wavelength_unit : str, optional
        Unit of the wavelengths in the file (``"Angstrom"``, ``"nm"``...); overrides what
        the file says. Needed for text files whose unit is not stated nor unambiguous.
    medium : {"air", "vacuum"}, optional
        Medium of the wavelengths; overrides what the file says.
    default_medium : {"air", "vacuum"}
        Used when neither the file nor ``medium`` states it (``medium_assumed=True``).
    check_coverage : bool
        Raise when no spectrum covers any of :data:`CLASSIFICATION_LINES`.

    Returns
    -------
    list of Spectrum
        One per order/fiber/row; unusable orders of a multi-order file are dropped (logged).

    Raises
    ------
    InputFormatError
        The file cannot be read or holds no usable spectrum; the message names the cause.
    ConfigError
        ``medium`` or ``default_medium`` is not ``"air"``/``"vacuum"``.
    """
    path = os.fspath(path)
    _check_options(medium, default_medium, path)
    opts = ReadOptions(path=path, wavelength_unit=wavelength_unit, medium=medium,
                       default_medium=default_medium)
    if _sniff(path) == "fits":
        from starlines.readers_fits import read_fits

        spectra = read_fits(opts)
    else:
        from starlines.readers_ascii import read_text

        spectra = read_text(opts)
    if not spectra:
        raise InputFormatError("the file holds no spectrum", path=path)
    usable = []
    for spec in spectra:
        try:
            usable.append(spec.validate())
        except InputFormatError as exc:
            if len(spectra) == 1:
                raise
            log.info("%s: %s dropped: %s", path, spec.label or "spectrum", exc.reason)
            first_error = exc
    if not usable:
        raise InputFormatError(f"none of the {len(spectra)} spectra is usable (first: "
                               f"{first_error.reason})", path=path)
    if check_coverage:
        _check_coverage(usable, path)
    return usable


def merge_orders(spectra: list[Spectrum]) -> Spectrum:
    """Join orders into one spectrum without resampling.

    Orders are sorted by wavelength; where two overlap, each keeps the half of the overlap
    nearer its own centre. Fluxes are joined as they are (no blaze or scale matching).
    Spectra overlapping by more than half their range are not orders of one echelle
    (fibers, repeated exposures): then the one covering most classification lines is
    returned.
    """
    if len(spectra) == 1:
        return spectra[0]
    ordered = sorted(spectra, key=lambda s: s.wavelength[0])
    for a, b in zip(ordered, ordered[1:]):
        overlap = a.wavelength[-1] - b.wavelength[0]
        span = min(np.ptp(a.wavelength), np.ptp(b.wavelength))
        if overlap > 0.5 * span:
            best = max(spectra, key=lambda s: (len(covered_lines(s)), s.good.sum()))
            log.info("%s: spectra overlap, not echelle orders; using %s", best.path, best.label)
            return best
    parts = []
    lo = -np.inf
    for k, s in enumerate(ordered):
        hi = np.inf
        if k + 1 < len(ordered):
            nxt = ordered[k + 1]
            if nxt.wavelength[0] < s.wavelength[-1]:
                hi = 0.5 * (s.wavelength[-1] + nxt.wavelength[0])
        keep = (s.wavelength >= lo) & (s.wavelength < hi)
        parts.append((s, keep))
        lo = hi if np.isfinite(hi) else s.wavelength[-1] + 1e-9
    with_err = all(s.uncertainty is not None for s in ordered)
    first = ordered[0]
    return Spectrum(
        wavelength=np.concatenate([s.wavelength[k] for s, k in parts]),
        flux=np.concatenate([s.flux[k] for s, k in parts]),
        uncertainty=np.concatenate([s.uncertainty[k] for s, k in parts]) if with_err else None,
        mask=np.concatenate([s.mask[k] for s, k in parts]),
        medium=first.medium,
        medium_assumed=first.medium_assumed,
        path=first.path,
        label=f"merged {len(ordered)} orders",
        flux_unit=first.flux_unit,
        meta=first.meta,
    )


def read_spectrum(path: str | os.PathLike, **kw) -> Spectrum:
    """The spectrum of a file: the single one, or the orders merged by :func:`merge_orders`.

    Keywords are those of :func:`read_spectra`.
    """
    spectra = read_spectra(path, **kw)
    return spectra[0] if len(spectra) == 1 else merge_orders(spectra).validate()


def describe(spec: Spectrum) -> str:
    """One line: range, pixels, medium (assumed?), object, frame."""
    w = spec.wavelength
    medium = f"{spec.medium} (assumed)" if spec.medium_assumed else spec.medium
    frame = spec.meta.frame
    if spec.meta.frame_correction_kms is not None:
        frame += f" ({spec.meta.frame_correction_kms:+.2f} km/s applied)"
    parts = [
        f"{os.path.basename(spec.path) or 'spectrum'}" + (f" [{spec.label}]" if spec.label else ""),
        f"{w[0]:.1f}-{w[-1]:.1f} A",
        f"{w.size} px ({int(spec.good.sum())} good)",
        medium,
        f"object {spec.meta.object or '?'}",
        frame,
    ]
    return ", ".join(parts)
