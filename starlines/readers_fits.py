"""FITS spectra: 1D images with a linear or log-linear WCS, IRAF multispec/echelle images,
flux/wavelength image extensions, and binary tables (one column per quantity, or one row of
array columns as archive 1D-spectrum standards write them).

Files are opened with :func:`astropy.io.fits.open` directly (``memmap=False``): reading one
spectrum costs about a millisecond. specutils is not used here; its readers label log-linear
IRAF solutions and unitless files wrongly (see the tests).
"""

from __future__ import annotations

import logging
import warnings

import numpy as np
from astropy.io import fits

from starlines import readers_iraf
from starlines.errors import InputFormatError
from starlines.headers import Cards, medium_from_cards
from starlines.readers_common import ReadOptions, make_spectrum, settle_medium, unit_factor
from starlines.spectrum import Spectrum

__all__ = ["read_fits", "WAVE_COLUMNS", "FLUX_COLUMNS"]

log = logging.getLogger("starlines.readers")

#: Recognised column / extension names (upper case), in order of preference.
WAVE_COLUMNS = ("WAVE", "WAVELENGTH", "LAMBDA", "AWAV", "WAVE_AIR", "WAVE_VAC", "WAVEL",
                "LAM", "WL", "LOGLAM", "LOGLAMBDA", "LOG_WAVE")
FLUX_COLUMNS = ("FLUX", "FLUX_REDUCED", "FLUX_NORM", "NORMFLUX", "FLAM", "F", "SPEC",
                "SPECTRUM", "INTENSITY", "COUNTS", "DATA", "SCI")
SIGMA_COLUMNS = ("ERR", "ERROR", "FLUX_ERR", "ERR_FLUX", "FLUX_ERROR", "SIGMA", "UNCERTAINTY",
                 "NOISE", "ERR_REDUCED", "STDDEV", "E_FLUX")
IVAR_COLUMNS = ("IVAR", "INVVAR", "INV_VAR")
VAR_COLUMNS = ("VAR", "VARIANCE", "FLUX_VAR")
QUALITY_COLUMNS = ("QUAL", "QUALITY", "DQ", "BADPIX", "MASK")
_COLUMN_MEDIUM = {"AWAV": "air", "WAVE_AIR": "air", "WAVE_VAC": "vacuum"}


def _cause(exc: Exception) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text.split(" (note:")[0]


def _truncation(caught) -> str | None:
    return next((str(w.message) for w in caught if "truncated" in str(w.message)), None)


def _open(path: str):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            hdul = fits.open(path, memmap=False, lazy_load_hdus=False)
        except (OSError, ValueError, IndexError, TypeError) as exc:
            raise InputFormatError(f"not a readable FITS file ({_cause(exc)})",
                                   path=path) from None
    cause = _truncation(caught)
    if cause is not None:
        hdul.close()
        raise InputFormatError(f"FITS file truncated ({cause})", path=path)
    return hdul


def _data(hdu, path: str):
    """HDU data, turning truncation and corruption into InputFormatError."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            data = hdu.data
        except (OSError, ValueError, TypeError) as exc:
            raise InputFormatError(f"HDU {hdu.name!r} unreadable, file truncated or corrupt "
                                   f"({_cause(exc)})", path=path) from None
    cause = _truncation(caught)
    if cause is not None:
        raise InputFormatError(f"FITS file truncated ({cause})", path=path)
    return data


def read_fits(opts: ReadOptions) -> list[Spectrum]:
    """Every spectrum in a FITS file (see the module docstring for the layouts)."""
    hdul = _open(opts.path)
    try:
        return _read_hdul(hdul, opts)
    finally:
        hdul.close()


def _read_hdul(hdul, opts: ReadOptions) -> list[Spectrum]:
    primary = hdul[0].header
    images = {h.name.upper(): h for h in hdul
              if h.is_image and h.header.get("NAXIS", 0) > 0}
    for i, hdu in enumerate(hdul):
        ext = None if i == 0 else primary
        if hdu.is_image and hdu.header.get("NAXIS", 0) > 0:
            if hdu.name.upper() in WAVE_COLUMNS + SIGMA_COLUMNS + IVAR_COLUMNS + VAR_COLUMNS:
                continue
            return _read_image(hdu, Cards(hdu.header, ext), images, opts)
        if isinstance(hdu, (fits.BinTableHDU, fits.TableHDU)):
            names = {n.upper(): n for n in hdu.columns.names}
            if any(n in names for n in WAVE_COLUMNS) and hdu.header.get("NAXIS2", 0) > 0:
                return _read_table(hdu, names, Cards(hdu.header, ext), opts)
    kinds = ", ".join(f"{h.name or 'PRIMARY'} ({type(h).__name__})" for h in hdul)
    raise InputFormatError(f"no spectrum in any HDU: empty image and no table with a "
                           f"wavelength column ({kinds})", path=opts.path)


# ----------------------------------------------------------------------------- images
def _wcs_wavelengths(cards: Cards, n: int, path: str) -> tuple[np.ndarray, str | None, str]:
    """Raw wavelengths of a 1D WCS, the unit they are in, and what defined them."""
    if cards.get("COEFF0") is not None and cards.get("COEFF1") is not None:  # SDSS log10
        c0, c1 = float(cards.get("COEFF0")), float(cards.get("COEFF1"))
        return 10.0 ** (c0 + c1 * np.arange(n)), "Angstrom", "COEFF0/COEFF1 (log10 Angstrom)"
    crval = cards.get("CRVAL1")
    if crval is None:
        crval = cards.get("W0")
    cd = cards.get("CD1_1")
    if cd is None:
        cdelt = cards.get("CDELT1", cards.get("WPC"))
        cd = None if cdelt is None else float(cdelt) * float(cards.get("PC1_1", 1.0))
    if crval is None or cd is None or float(cd) == 0.0:
        raise InputFormatError("no wavelength solution (CRVAL1 and CDELT1/CD1_1 missing, zero "
                               "or not multispec)", path=path)
    crpix = cards.get("CRPIX1")
    if crpix is None:
        log.info("%s: no CRPIX1; reference pixel 1 (IRAF convention)", path)
        crpix = 1.0
    crval, cd, crpix = float(crval), float(cd), float(crpix)
    x = crval + cd * (np.arange(1, n + 1, dtype=float) - crpix)
    ctype = str(cards.get("CTYPE1", "")).upper()
    unit = cards.get("CUNIT1")
    dcflag = cards.get("DC-FLAG", 0)
    if dcflag == 1 or ctype in ("LOG-LINEAR", "LOGLAM", "LOG10"):
        return 10.0 ** x, unit or "Angstrom", "log10 dispersion (DC-FLAG = 1)"
    if ctype.endswith("-LOG"):  # WCS paper III logarithmic axis
        return crval * np.exp(cd * (np.arange(1, n + 1) - crpix) / crval), unit, ctype
    if unit is None:
        attrs, _ = readers_iraf.wat_attributes(cards._find("WAT1_001") or {})
        unit = attrs.get("units")
    return x, unit, "linear WCS"


def _bands(hdu, data: np.ndarray, path: str):
    """Flux and uncertainty rows of an IRAF ``apall`` cube (BANDIDn cards)."""
    ids = [str(hdu.header.get(f"BANDID{k}", "")).lower() for k in range(1, data.shape[0] + 1)]
    sigma = next((k for k, s in enumerate(ids) if "sigma" in s or "error" in s), None)
    return data[0], (None if sigma is None else data[sigma])


def _read_image(hdu, cards: Cards, images: dict, opts: ReadOptions) -> list[Spectrum]:
    path = opts.path
    header = hdu.header
    data = np.asarray(_data(hdu, path), dtype=float)
    if data.size == 0:
        raise InputFormatError("empty image HDU", path=path)
    if readers_iraf.is_multispec(header):
        return _read_multispec(hdu, data, cards, opts)
    err = None
    if data.ndim == 3 and data.shape[1] == 1:  # (band, aperture, pixel) from apall
        data, err = _bands(hdu, data[:, 0, :], path)
    data = data.reshape(-1) if sum(s > 1 for s in data.shape) == 1 else data
    if data.ndim != 1:
        raise InputFormatError(f"{data.ndim}D image {data.shape[::-1]} is not a 1D spectrum "
                               "and has no multispec keywords", path=path)
    flux_unit = str(cards.get("BUNIT", ""))
    wave_hdu = next((images[k] for k in WAVE_COLUMNS if k in images), None)
    if wave_hdu is not None:
        wave = np.asarray(_data(wave_hdu, path), dtype=float).reshape(-1)
        unit = wave_hdu.header.get("BUNIT") or wave_hdu.header.get("CUNIT1")
        where, ctype = f"BUNIT of {wave_hdu.name}", wave_hdu.header.get("CTYPE1")
    else:
        wave, unit, where = _wcs_wavelengths(cards, data.size, path)
        ctype = cards.get("CTYPE1")
        if where == "linear WCS" and unit is None and 2.5 < wave[0] < 5.5 and wave[-1] < 5.5:
            raise InputFormatError(f"wavelengths {wave[0]:.4g}-{wave[-1]:.4g} look like log10 "
                                   "Angstrom but DC-FLAG is not 1", path=path)
        where = "CUNIT1"
    err, quality = _error_images(images, err, path)
    factor = unit_factor(opts, unit, wave, where=where, convention_angstrom=True)
    medium = settle_medium(opts, *medium_from_cards(cards, ctype))
    return [make_spectrum(opts, wave, data, factor=factor, cards=cards, medium=medium,
                          uncertainty=err, bad=quality, flux_unit=flux_unit)]


def _error_images(images: dict, err, path: str):
    """Uncertainty from an ERR/IVAR/VAR image extension, if any; quality flags if any."""
    for names, convert in ((SIGMA_COLUMNS, None), (IVAR_COLUMNS, "ivar"), (VAR_COLUMNS, "var")):
        hdu = next((images[k] for k in names if k in images), None)
        if hdu is not None:
            err = _to_sigma(np.asarray(_data(hdu, path), dtype=float).reshape(-1), convert)
            break
    hdu = next((images[k] for k in QUALITY_COLUMNS if k in images), None)
    quality = None if hdu is None else np.asarray(_data(hdu, path)).reshape(-1) != 0
    return err, quality


def _to_sigma(values: np.ndarray, kind: str | None) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        if kind == "ivar":
            return 1.0 / np.sqrt(values)
        if kind == "var":
            return np.sqrt(values)
    return values


def _read_multispec(hdu, data: np.ndarray, cards: Cards, opts: ReadOptions) -> list[Spectrum]:
    path = opts.path
    try:
        unit, aps = readers_iraf.apertures(hdu.header)
    except ValueError as exc:
        raise InputFormatError(f"multispec wavelength solution unusable: {exc}",
                               path=path) from None
    err = None
    if data.ndim == 3:
        data, err = _bands(hdu, data, path)
    data = np.atleast_2d(data)
    if err is not None:
        err = np.atleast_2d(err)
    if len(aps) > data.shape[0] or any(a.wavelength.size > data.shape[1] for a in aps):
        raise InputFormatError(f"multispec keywords describe {len(aps)} apertures but the "
                               f"image is {data.shape[::-1]}", path=path)
    medium = settle_medium(opts, *medium_from_cards(cards, cards.get("CTYPE1")))
    flux_unit = str(cards.get("BUNIT", ""))
    out = []
    for ap in aps:
        nw = ap.wavelength.size
        factor = unit_factor(opts, unit, ap.wavelength, where="WAT1 units",
                             convention_angstrom=True)
        row = ap.index - 1
        out.append(make_spectrum(
            opts, ap.wavelength, data[row, :nw], factor=factor, cards=cards, medium=medium,
            uncertainty=None if err is None else err[row, :nw],
            label=f"order {ap.beam}", flux_unit=flux_unit))
    return out


# ----------------------------------------------------------------------------- tables
def _pick(names: dict, candidates) -> str | None:
    return next((names[c] for c in candidates if c in names), None)


def _read_table(hdu, names: dict, cards: Cards, opts: ReadOptions) -> list[Spectrum]:
    path = opts.path
    table = _data(hdu, path)
    wcol = _pick(names, WAVE_COLUMNS)
    fcol = _pick(names, FLUX_COLUMNS)
    if fcol is None:
        raise InputFormatError(f"table has wavelength column {wcol!r} but no flux column "
                               f"(columns: {', '.join(hdu.columns.names)})", path=path)
    columns = hdu.columns
    wave = np.asarray(table[wcol], dtype=float)
    flux = np.asarray(table[fcol], dtype=float)
    err, kind = None, None
    for cands, k in ((SIGMA_COLUMNS, None), (IVAR_COLUMNS, "ivar"), (VAR_COLUMNS, "var")):
        ecol = _pick(names, cands)
        if ecol is not None:
            err, kind = np.asarray(table[ecol], dtype=float), k
            break
    qcol = _pick(names, QUALITY_COLUMNS)
    quality = None if qcol is None else np.asarray(table[qcol]) != 0
    if err is not None:
        err = _to_sigma(err, kind)

    unit = columns[wcol].unit or None
    where = f"TUNIT of column {wcol!r}"
    if wcol.upper().startswith("LOG"):
        wave, unit = 10.0 ** wave, unit if unit and "log" not in unit.lower() else "Angstrom"
        where = f"{wcol!r} (log10 Angstrom)"
    tctype = getattr(columns[wcol], "coord_type", None)
    stated, reason = medium_from_cards(cards, tctype)
    if stated is None and wcol.upper() in _COLUMN_MEDIUM:
        stated, reason = _COLUMN_MEDIUM[wcol.upper()], f"column {wcol!r}"
    medium = settle_medium(opts, stated, reason)
    factor = unit_factor(opts, unit, wave, where=where)
    flux_unit = columns[fcol].unit or ""

    if wave.ndim == 1:  # one column per quantity, one row per pixel
        return [make_spectrum(opts, wave, flux, factor=factor, cards=cards, medium=medium,
                              uncertainty=err, bad=quality, flux_unit=flux_unit)]
    # array columns: each row is a spectrum (archive standards write exactly one row)
    ocol = _pick(names, ("ORDER", "ORDERS", "APERTURE", "FIBER"))
    out = []
    for r in range(wave.shape[0]):
        label = ""
        if wave.shape[0] > 1:
            label = f"order {int(table[ocol][r])}" if ocol else f"row {r + 1}"
        out.append(make_spectrum(
            opts, wave[r], flux[r], factor=factor, cards=cards, medium=medium,
            uncertainty=None if err is None else err[r],
            bad=None if quality is None else quality[r], label=label, flux_unit=flux_unit))
    return out
