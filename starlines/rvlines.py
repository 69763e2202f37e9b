"""Per-line radial velocities: which lines to use, and their robust mean.

Per-line velocities come from the measured centroids against rest wavelengths *in the
spectrum's own medium* (air and vacuum differ by ~84 km/s at 4500 A); the line table's rest
wavelengths are checked against the catalogue in that medium and a mismatch is an error,
never a guess. Velocities use the optical convention ``v = c (lambda / lambda_rest - 1)``.

The mean is an inverse-variance mean with iterative robust rejection: a line is dropped
when it lies more than :data:`CLIP_NSIGMA` times ``sqrt(err^2 + s^2)`` from the mean,
``s = 1.4826 MAD`` (common practice); ``mean_err = max(error of the weighted mean,
scatter / sqrt(n))``. :func:`line_velocities` documents the choice of lines.
"""

from __future__ import annotations

import math

import numpy as np

from starlines.barycentric import C_KMS
from starlines.errors import VelocityError

__all__ = ["line_velocities", "combine_velocities", "WIND_LINES", "OF_COMPLEX",
           "BLEND_ERROR_FACTOR", "CLIP_NSIGMA", "MIN_CLEAN_LINES", "MIN_SIGNIFICANCE"]

#: Lines not used for the centroid velocity: formed partly in the stellar wind, or
#: often filled in by emission in O and Be stars (common practice).
WIND_LINES = {"HeII4686": "wind line", "HI6563": "wind line", "HI4861": "wind line"}
#: Of emission complex (N III 4634-42, C III 4647-51, He II 4686): when any of them is in
#: emission the others are filled in too and are not used (common practice).
OF_COMPLEX = frozenset({"NIII4634", "NIII4641", "NIII4642", "CIII4647", "CIII4650",
                        "CIII4651", "HeII4686"})
#: Fewest usable lines for which unseparated blends are dropped rather than down-weighted.
MIN_CLEAN_LINES = 5
#: A line counts as present (for blends) at this significance (sigma).
MIN_SIGNIFICANCE = 3.0
#: Error inflation of a line whose catalogue neighbour is also measured, and of Balmer
#: lines in a star with Balmer emission.
BLEND_ERROR_FACTOR = 3.0
#: Rejection threshold of the robust mean, in combined sigma.
CLIP_NSIGMA = 3.5
#: Largest tolerated difference (Angstrom) between the table's rest wavelength and the
#: catalogue's in the spectrum's medium (air - vacuum is 1.1-1.8 A in the optical).
REST_TOLERANCE = 0.05


def _rest_wavelengths(table, medium: str, path: str) -> np.ndarray:
    """Rest wavelengths in ``medium``, checked against the catalogue."""
    from starlines.lines import line

    ids = [str(x) for x in table["line"]]
    cat = np.array([line(i).wavelength(medium) for i in ids], dtype=float)
    if "wavelength_rest" in table.colnames:
        given = np.asarray(getattr(table["wavelength_rest"], "value", table["wavelength_rest"]),
                           dtype=float)
        bad = np.abs(given - cat) > REST_TOLERANCE
        if np.any(bad):
            raise VelocityError(
                f"line table rest wavelengths are not {medium} values "
                f"(e.g. {ids[int(np.argmax(bad))]}): refusing to guess the medium", path=path)
    return cat


def _col(table, name: str, default=np.nan) -> np.ndarray:
    if name not in table.colnames:
        return np.full(len(table), default)
    c = table[name]
    return np.asarray(getattr(c, "value", c))


def _detected_kinds(ids, status, emission, signif) -> set[str]:
    """Kinds of line (``balmer``, ``hei``, ``heii``, ``metal``) seen in absorption."""
    from starlines.lines import line

    return {line(i).kind for i, s, e, g in zip(ids, status, emission, signif)
            if s == "measured" and not e and (not math.isfinite(g) or g >= MIN_SIGNIFICANCE)}


def _near_emission(lam: float, emitters: list[tuple[float, float]], fwhm: float) -> bool:
    """True when a line at ``lam`` lies within 2 emission FWHM + 1 line FWHM of an emission
    line."""
    own = fwhm if math.isfinite(fwhm) else 2.0
    return any(0 < abs(lam - lam_e) < 2.0 * fw_e + own for lam_e, fw_e in emitters)


def _line_choice(table, medium: str, path: str, *, keep_pulled: bool):
    """Per-line velocities, errors and reasons (see :func:`line_velocities`)."""
    from starlines.lines import line

    ids = [str(x) for x in table["line"]]
    lns = {i: line(i) for i in ids}
    for ln in list(lns.values()):
        lns.update({b: line(b) for b in ln.blends if b not in lns})
    rest = _rest_wavelengths(table, medium, path)
    cen = _col(table, "centroid").astype(float)
    cerr = _col(table, "centroid_err").astype(float)
    status = [str(s) for s in _col(table, "status", "measured")]
    emission = _col(table, "emission", False).astype(bool)
    fwhm = _col(table, "fwhm").astype(float)
    signif = np.abs(_col(table, "significance").astype(float))
    rv = C_KMS * (cen / rest - 1.0)
    err = C_KMS * cerr / rest
    measured = {i for i, s, e in zip(ids, status, emission) if s == "measured" and not e}
    unseparated = {i for i, s in zip(ids, status) if s == "blended"}
    kinds = _detected_kinds(ids, status, emission, signif)
    em = [k for k in range(len(ids)) if status[k] == "measured" and emission[k]]
    emitters = [(lns[ids[k]].wavelength(medium), fwhm[k] if math.isfinite(fwhm[k]) else 5.0)
                for k in em]
    of_star = any(ids[k] in OF_COMPLEX for k in em)
    balmer_emission = any(lns[ids[k]].kind == "balmer" for k in em)
    reasons, used = [], {}
    for k, ident in enumerate(ids):
        ln = lns[ident]
        pulled = [b for b in ln.blends if b in unseparated and lns[b].kind in kinds]
        twin = [b for b in ln.blends if b in used and used[b] == (rv[k], err[k])]
        if status[k] != "measured":
            reasons.append(status[k])
        elif emission[k]:
            reasons.append("emission")
        elif ident in WIND_LINES:
            reasons.append(WIND_LINES[ident])
        elif of_star and ident in OF_COMPLEX:
            reasons.append("Of emission complex")
        elif _near_emission(ln.wavelength(medium), emitters, fwhm[k]):
            reasons.append("near an emission line")
        elif pulled and keep_pulled is False:
            reasons.append(f"blended with {pulled[0]} (not separated)")
        elif not (np.isfinite(rv[k]) and np.isfinite(err[k]) and err[k] > 0):
            reasons.append("no centroid error")
        elif twin:
            reasons.append(f"same fit as {twin[0]}")
        else:
            reasons.append("")
            used[ident] = (rv[k], err[k])
            if any(b in measured for b in ln.blends) or pulled or (
                    balmer_emission and ln.kind == "balmer"):
                err[k] *= BLEND_ERROR_FACTOR
    return ids, rv, err, reasons


def line_velocities(table, medium: str, *, path: str = ""):
    """Per-line velocities and the choice of lines.

    A line is not used when it is not ``measured``, in emission, a wind line
    (:data:`WIND_LINES`), in the Of emission complex of a star showing emission there
    (:data:`OF_COMPLEX`), within two emission FWHM of a line in emission, blended with a
    catalogue neighbour that the fit did not separate (status ``blended``) when that
    neighbour's kind of line is present in the star (e.g. the He II Pickering lines on the
    blue side of H-delta/H-gamma/H-epsilon in O stars, which pull the Balmer centroids by
    up to ~40 km/s), or fitted together with an already used neighbour (same centroid).
    Lines with a measured neighbour, and Balmer lines of a star with Balmer emission, get
    :data:`BLEND_ERROR_FACTOR` times their error. When fewer than :data:`MIN_CLEAN_LINES`
    lines would remain (coarse spectra, where the Balmer lines carry the velocity), the
    unseparated blends are kept with that larger error instead.

    Returns
    -------
    (ids, rv, err, reasons)
        Arrays over the table rows; ``reasons[i]`` is "" for usable lines, else why not.
    """
    ids, rv, err, reasons = _line_choice(table, medium, path, keep_pulled=False)
    if sum(r == "" for r in reasons) < MIN_CLEAN_LINES:
        ids, rv, err, reasons = _line_choice(table, medium, path, keep_pulled=True)
    return ids, rv, err, reasons


def combine_velocities(rv: np.ndarray, err: np.ndarray, *, nsigma: float = CLIP_NSIGMA):
    """Robust inverse-variance mean.

    Returns
    -------
    (mean, mean_err, keep)
        ``mean_err = max(1/sqrt(sum w), std / sqrt(n))``; ``keep`` marks the lines kept.
    """
    rv, err = np.asarray(rv, float), np.asarray(err, float)
    keep = np.ones(rv.size, bool)
    if rv.size == 0:
        return math.nan, math.nan, keep
    for _ in range(10):
        w = 1.0 / err[keep] ** 2
        mean = float(np.sum(w * rv[keep]) / np.sum(w))
        resid = rv - mean
        s = 1.4826 * float(np.median(np.abs(resid[keep] - np.median(resid[keep]))))
        new = np.abs(resid) <= nsigma * np.sqrt(err**2 + s**2)
        if new.sum() < max(2, (keep.sum() + 1) // 2) or np.array_equal(new, keep):
            break
        keep = new
    w = 1.0 / err[keep] ** 2
    mean = float(np.sum(w * rv[keep]) / np.sum(w))
    n = int(keep.sum())
    mean_err = 1.0 / math.sqrt(float(np.sum(w)))
    if n > 1:
        mean_err = max(mean_err, float(np.std(rv[keep], ddof=1)) / math.sqrt(n))
    return mean, mean_err, keep
