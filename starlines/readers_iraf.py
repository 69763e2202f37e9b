"""IRAF multispec/echelle wavelength solutions (``WAT1_001``/``WAT2_nnn`` keywords).

IRAF stores one dispersion per aperture in the ``WAT2_nnn`` cards, 68 characters each, which
concatenate into attributes ``specN = "ap beam dtype w1 dw nw z aplow aphigh [functions]"``.
The wavelength of pixel p (1-based) of aperture N is, with dtype 0 (linear)
``(w1 + dw (p - 1)) / (1 + z)``, with dtype 1 (log-linear) ``10**(w1 + dw (p - 1)) / (1 + z)``,
and with dtype 2 (non-linear) ``sum_i wt_i (w0_i + W_i(p)) / (1 + z)`` where ``W_i`` is a
Chebyshev or Legendre series in the normalised pixel ``(2p - (pmax + pmin)) / (pmax - pmin)``
or a pixel-coordinate array. This layout is the one of the IRAF ONEDSPEC help page
"specwcs" (common practice; from memory). Splines (ftype 3 and 4) are not supported.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

__all__ = ["Aperture", "is_multispec", "wat_attributes", "apertures"]


@dataclass(frozen=True)
class Aperture:
    """One aperture (echelle order) of a multispec file."""

    index: int  # 1-based image line
    ap: int
    beam: int
    wavelength: np.ndarray  # in the file's unit (WAT1 ``units``), length nw


def _join_wat(header, prefix: str) -> str:
    parts = []
    i = 1
    while f"{prefix}{i:03d}" in header:
        # IRAF writes 68 characters per card; FITS readers strip trailing blanks, which can
        # glue two numbers together, so pad back.
        parts.append(str(header[f"{prefix}{i:03d}"]).ljust(68))
        i += 1
    return "".join(parts)


def is_multispec(header) -> bool:
    """True when the header carries an IRAF multispec world coordinate system."""
    wat0 = str(header.get("WAT0_001", "")).lower()
    wat1 = str(header.get("WAT1_001", "")).lower()
    return "multispec" in wat0 or "multispec" in wat1


def wat_attributes(header) -> tuple[dict[str, str], dict[int, str]]:
    """WAT1 attributes (``units``, ``label``...) and the ``specN`` strings of WAT2."""
    wat1 = _join_wat(header, "WAT1_")
    attrs = dict(re.findall(r"(\w+)\s*=\s*(\S+)", wat1))
    wat2 = _join_wat(header, "WAT2_")
    specs = {int(n): s for n, s in re.findall(r"spec(\d+)\s*=\s*\"([^\"]*)\"", wat2)}
    return attrs, specs


def _nonlinear(fields: list[float], p: np.ndarray) -> np.ndarray:
    """Sum of weighted dispersion functions (dtype 2) at pixels ``p``."""
    out = np.zeros_like(p)
    k = 0
    while k < len(fields):
        wt, w0, ftype = fields[k], fields[k + 1], int(fields[k + 2])
        k += 3
        if ftype in (1, 2):
            order, pmin, pmax = int(fields[k]), fields[k + 1], fields[k + 2]
            coef = np.asarray(fields[k + 3 : k + 3 + order])
            k += 3 + order
            x = (2.0 * p - (pmax + pmin)) / (pmax - pmin)
            series = np.polynomial.chebyshev if ftype == 1 else np.polynomial.legendre
            w = series.chebval(x, coef) if ftype == 1 else series.legval(x, coef)
        elif ftype == 5:
            npts = int(fields[k])
            table = np.asarray(fields[k + 1 : k + 1 + npts])
            k += 1 + npts
            w = np.interp(p, np.arange(1, npts + 1, dtype=float), table)
        else:
            raise ValueError(f"dispersion function type {ftype} (spline) is not supported")
        out += wt * (w0 + w)
    return out


def aperture_wavelengths(spec: str) -> tuple[int, int, np.ndarray]:
    """(ap, beam, wavelength) of one ``specN`` string; raises ValueError when unusable."""
    try:
        fields = [float(x) for x in spec.split()]
    except ValueError as exc:
        raise ValueError(f"unreadable dispersion {spec[:40]!r}") from exc
    if len(fields) < 9:
        raise ValueError(f"dispersion {spec[:40]!r} has {len(fields)} of 9 fields")
    ap, beam, dtype = int(fields[0]), int(fields[1]), int(fields[2])
    w1, dw, nw, z = fields[3], fields[4], int(fields[5]), fields[6]
    if nw < 2:
        raise ValueError(f"aperture {ap} has {nw} valid pixels")
    p = np.arange(1, nw + 1, dtype=float)
    if dtype == 0:
        wave = w1 + dw * (p - 1.0)
    elif dtype == 1:
        wave = 10.0 ** (w1 + dw * (p - 1.0))
    elif dtype == 2:
        wave = _nonlinear(fields[9:], p)
    else:
        raise ValueError(f"aperture {ap} has no dispersion (dtype {dtype})")
    return ap, beam, wave / (1.0 + z)


def apertures(header) -> tuple[str | None, list[Aperture]]:
    """Wavelength unit (WAT1 ``units``, None if absent) and every aperture's wavelengths."""
    attrs, specs = wat_attributes(header)
    if not specs:
        raise ValueError("multispec header without specN dispersion attributes in WAT2")
    out = []
    for n in sorted(specs):
        ap, beam, wave = aperture_wavelengths(specs[n])
        out.append(Aperture(index=n, ap=ap, beam=beam, wavelength=wave))
    return attrs.get("units"), out
