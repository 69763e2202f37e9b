"""Pieces shared by the FITS and text readers: options, wavelength units, building a Spectrum.

Every reader turns its file into raw arrays (wavelength in the file's unit, flux, uncertainty,
quality mask) plus header cards, and hands them to :func:`make_spectrum`, which converts the
unit, orders the pixels, settles the medium and builds the metadata. Raw flux values are
passed through untouched: :class:`~starlines.spectrum.Spectrum` masks NaN, zero and
negative pixels itself.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass

import numpy as np

from starlines.errors import InputFormatError, StarlinesWarning
from starlines.headers import Cards, angstrom_per_unit, meta_from_cards
from starlines.spectrum import Spectrum

__all__ = ["ReadOptions", "unit_factor", "make_spectrum", "MEDIA"]

log = logging.getLogger("starlines.readers")

MEDIA = ("air", "vacuum")

#: Ranges within which a unitless wavelength scale is unambiguous (optical spectra).
_ANGSTROM_RANGE = (3000.0, 11000.0)
_NM_RANGE = (300.0, 1100.0)


@dataclass(frozen=True)
class ReadOptions:
    """What the caller said about the file (see :func:`starlines.readers.read_spectra`)."""

    path: str
    wavelength_unit: str | None = None
    medium: str | None = None
    default_medium: str = "air"


def unit_factor(
    opts: ReadOptions,
    stated: str | None,
    wave: np.ndarray,
    *,
    where: str,
    convention_angstrom: bool = False,
) -> float:
    """Angstrom per unit of the raw wavelength values.

    Order: the ``wavelength_unit`` argument, the unit stated in the file, then (FITS images
    only, ``convention_angstrom``) the IRAF convention of Angstrom, then inference from the
    values: all within 3000-11000 -> Angstrom, all within 300-1100 -> nm, each announced with
    a :class:`StarlinesWarning`. Anything else raises :class:`InputFormatError`.

    Parameters
    ----------
    opts : ReadOptions
        Caller's options.
    stated : str or None
        Unit string found in the file.
    wave : numpy.ndarray
        Raw wavelength values, for inference.
    where : str
        Where the unit would have been stated (for messages), e.g. ``"CUNIT1"``.
    convention_angstrom : bool
        Accept Angstrom without a warning when the values look like Angstrom.
    """
    path = opts.path
    if opts.wavelength_unit is not None:
        factor = angstrom_per_unit(opts.wavelength_unit)
        if factor is None:
            raise InputFormatError(
                f"wavelength_unit {opts.wavelength_unit!r} is not a length unit", path=path
            )
        if stated is not None and angstrom_per_unit(stated) != factor:
            log.warning("%s: file says %s=%r; using wavelength_unit=%r as asked",
                        path, where, stated, opts.wavelength_unit)
        return factor
    if stated is not None:
        factor = angstrom_per_unit(stated)
        if factor is None:
            raise InputFormatError(f"{where} {stated!r} is not a wavelength unit", path=path)
        return factor
    finite = wave[np.isfinite(wave)]
    if finite.size == 0:
        raise InputFormatError("no finite wavelength values", path=path)
    lo, hi = float(finite.min()), float(finite.max())
    if _ANGSTROM_RANGE[0] <= lo and hi <= _ANGSTROM_RANGE[1]:
        if convention_angstrom:
            log.info("%s: no %s; Angstrom (IRAF convention), values %.6g-%.6g",
                     path, where, lo, hi)
        else:
            warnings.warn(f"{path}: wavelength unit not stated ({where}); values {lo:.6g}-"
                          f"{hi:.6g} taken as Angstrom", StarlinesWarning, stacklevel=4)
        return 1.0
    if _NM_RANGE[0] <= lo and hi <= _NM_RANGE[1]:
        warnings.warn(f"{path}: wavelength unit not stated ({where}); values {lo:.6g}-"
                      f"{hi:.6g} taken as nm", StarlinesWarning, stacklevel=4)
        return 10.0
    raise InputFormatError(
        f"wavelength unit not stated ({where}) and values {lo:.6g}-{hi:.6g} do not tell "
        "Angstrom from nm; pass wavelength_unit",
        path=path,
    )


def _order_pixels(wave, arrays, path):
    """Drop non-finite wavelengths; reverse a decreasing scale; reject a non-monotonic one."""
    finite = np.isfinite(wave)
    if not finite.any():
        raise InputFormatError("no wavelength solution (all wavelengths NaN)", path=path)
    if not finite.all():
        log.info("%s: %d pixels without a wavelength dropped", path, int((~finite).sum()))
        wave = wave[finite]
        arrays = [None if a is None else a[finite] for a in arrays]
    if wave.size < 2:
        raise InputFormatError(f"only {wave.size} pixel(s)", path=path)
    step = np.diff(wave)
    if np.all(step < 0):
        wave = wave[::-1]
        arrays = [None if a is None else a[::-1] for a in arrays]
    elif not np.all(step > 0):
        bad_steps = step <= 0 if wave[-1] > wave[0] else step >= 0
        i = int(np.argmax(bad_steps))
        raise InputFormatError(
            f"wavelength solution is not monotonic (pixel {i + 1}: {wave[i]:.6g} then "
            f"{wave[i + 1]:.6g})",
            path=path,
        )
    return wave, arrays


def settle_medium(opts: ReadOptions, stated: str | None, reason: str) -> tuple[str, bool]:
    """(medium, assumed) from the ``medium`` argument, the file, or ``default_medium``."""
    if opts.medium is not None:
        if stated is not None and stated != opts.medium:
            log.warning("%s: file says %s (%s); using medium=%r as asked",
                        opts.path, stated, reason, opts.medium)
        return opts.medium, False
    if stated is not None:
        return stated, False
    log.info("%s: medium not stated; assuming %s (default_medium)", opts.path, opts.default_medium)
    return opts.default_medium, True


def make_spectrum(
    opts: ReadOptions,
    wave_raw,
    flux,
    *,
    factor: float,
    cards: Cards,
    medium: tuple[str, bool],
    uncertainty=None,
    bad=None,
    label: str = "",
    flux_unit: str = "",
) -> Spectrum:
    """Build a :class:`Spectrum` from raw arrays (wavelength in the file's unit).

    Parameters
    ----------
    opts : ReadOptions
        Caller's options.
    wave_raw, flux : array_like
        Wavelength (times ``factor`` gives Angstrom) and flux, equal length.
    factor : float
        Angstrom per raw wavelength unit.
    cards : Cards
        Header(s) for the metadata.
    medium : tuple
        ``(medium, assumed)`` from :func:`settle_medium`.
    uncertainty, bad : array_like, optional
        1-sigma uncertainty; extra bad-pixel flags (True = bad).
    label, flux_unit : str
        Part of the file and flux unit string.
    """
    wave = np.asarray(wave_raw, dtype=float) * factor
    flux = np.asarray(flux, dtype=float)
    if wave.shape != flux.shape:
        raise InputFormatError(
            f"{label or 'spectrum'}: {wave.size} wavelengths but {flux.size} flux values",
            path=opts.path,
        )
    err = None if uncertainty is None else np.asarray(uncertainty, dtype=float)
    bad = None if bad is None else np.asarray(bad, dtype=bool)
    wave, (flux, err, bad) = _order_pixels(wave, [flux, err, bad], opts.path)
    mid = 0.5 * (wave[0] + wave[-1])
    step = (wave[-1] - wave[0]) / (wave.size - 1)
    meta = meta_from_cards(cards, path=opts.path, wave_mid=mid, step=step)
    return Spectrum(
        wavelength=wave,
        flux=flux,
        uncertainty=err,
        mask=bad,
        medium=medium[0],
        medium_assumed=medium[1],
        path=opts.path,
        label=label,
        flux_unit=flux_unit,
        meta=meta,
    )
