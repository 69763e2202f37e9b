"""Data-quality checks: spectra that pass the S/N cut and still cannot be trusted.

Two signs of bad data in a hot-star spectrum, both decided from one result row and its line
rows (the ``suspect-data`` flag of :mod:`starlines.flags`):

1. **The strong Balmer lines fail.** Every O and early-B star has H-delta, H-gamma and
   H-beta in clear absorption (see :data:`MIN_BALMER_EW`). One of them not detected, weaker
   than that, measured with an error larger than its value, or in emission while a
   lower-series Balmer line is in absorption (no star shows that: emission decreases up the
   series, H-alpha first) means the spectrum, its continuum or its wavelength scale is bad.
   Wind emission fills Balmer lines in (see below).
2. **The continuum scatters far more than the noise.** :func:`starlines.snr.der_snr`
   (DER_SNR, Stoehr et al. 2008) estimates the noise from 2 f_i - f_(i-2) - f_(i+2). It
   assumes independent pixels: an oversampled or smoothed spectrum (MILES: 0.9 A pixels at
   2.5 A FWHM, resampled; the Jacoby et al. library: 1.4 A pixels at ~15 A) has correlated
   pixel noise, so DER_SNR *overestimates* its S/N. The robust scatter of the normalized
   continuum (``continuum_scatter``) includes correlated noise, ripples and weak lines, so
   its inverse is a pessimistic S/N; :func:`continuum_snr` returns it and
   :func:`effective_snr` the smaller of the two, which is what ``low-snr`` uses. Noise
   smoothed by the instrumental profile (Gaussian of ``resolution_fwhm``, pixel step
   ``pixel_step``) makes the ratio scatter / DER_SNR noise at most :func:`der_snr_bias`;
   a ratio above :data:`SCATTER_EXCESS` times that (ripples, fringes, a bad continuum) is
   suspect data. Ripples in a heavily oversampled spectrum hide below this bound, and
   without a stated resolution (``resolution_source`` not header/argument) the check is
   not made.

Stars with wind emission (He II 4686, N III 4634-42 or H-alpha in emission: Of stars,
supergiants, LBV-like stars) may have every Balmer line filled in; their Balmer lines are
not judged.

Measured on the spectra of this project (``data`` below): white-noise synthetic spectra have
scatter x DER_SNR = 0.94-1.17; the 20 MILES O/B spectra of the reference folder 1.45-3.07
(bound 1.65); the 33 Jacoby et al. (1984) O/B spectra 10-17 (bound ~15).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

__all__ = [
    "MIN_BALMER_EW",
    "SCATTER_EXCESS",
    "CORRELATED_NOISE_RATIO",
    "BALMER_CHECKED",
    "continuum_snr",
    "effective_snr",
    "suspect_reasons",
    "too_noisy_to_type",
    "MIN_TYPING_SNR",
    "TYPING_REGION",
    "noise_note",
    "der_snr_bias",
    "NOT_DETECTED_EW",
    "RESOLUTION_KNOWN",
]

#: Smallest absorption EW (A) of H-delta, H-gamma or H-beta accepted in an O/early-B star.
#: Hot-star Balmer lines are ~2 A at the earliest O types and 3-9 A at B0-B3 ([memory]);
#: data: the weakest among the 19 good MILES O/B spectra of the reference folder is
#: H-beta 0.76 A (HD 41117, B2 Ia, wind-filled) and H-gamma 1.11 A (HD 190603, B1.5 Ia).
MIN_BALMER_EW = 0.5
#: Continuum scatter x DER_SNR, in units of :func:`der_snr_bias` (at least 1), above which
#: the continuum varies far more than the noise (ripples, fringes, a bad continuum): weak
#: lines in the continuum windows raise the ratio of good MILES spectra to 1.9 x their
#: bound (data); 4 leaves room for that.
SCATTER_EXCESS = 4.0
#: scatter x DER_SNR above which the row notes that DER_SNR overestimates the S/N
#: (correlated pixel noise); white noise gives 1 +- 0.2 here (data).
CORRELATED_NOISE_RATIO = 1.4
#: A Balmer line "not detected" is suspect only when its fitted EW is also below this (A):
#: at low resolution (~15 A) H-delta shares a fit with Si IV / He II / N III and comes out
#: "not detected" with a normal EW (3.6-6.9 A) and a large error in the Jacoby et al.
#: spectra (data): a degenerate blend, not bad data.
NOT_DETECTED_EW = 2 * MIN_BALMER_EW
#: Sources of ``resolution_source`` trusted for the scatter bound (the file or the user
#: stated the resolution; an estimate from line widths is not trusted).
RESOLUTION_KNOWN = ("header", "argument")
#: The Balmer lines checked, with their names for the reasons, lowest series member last.
BALMER_CHECKED = {"HI4102": "H-delta", "HI4340": "H-gamma", "HI4861": "H-beta"}
_BALMER_SERIES = ("HI3835", "HI3889", "HI3970", "HI4102", "HI4340", "HI4861", "HI6563")
_BALMER_NAMES = dict(zip(_BALMER_SERIES, ("H9", "H8", "H-epsilon", "H-delta", "H-gamma",
                                          "H-beta", "H-alpha")))
_EMISSION_LINES = ("HeII4686", "NIII4634", "NIII4641", "NIII4642", "HI6563")


#: S/N per pixel in the classification region (:data:`TYPING_REGION`; line-table meta
#: ``snr_typing_region``: median 1 / error of its continuum pixels divided by sqrt of the
#: median reduced chi-square of its line fits, :func:`starlines.measure.region_snr`) below
#: which no type is given: with ~0.5 A pixels and lines ~5 A wide, sigma(EW) ~ 1.6 A /
#: (S/N) (pixel-sum formula, criteria.md section 7a) = 0.16 A at S/N 10, as large as the
#: weak lines the type ratios need (He II 4541, Si III 4553 ~0.1-0.3 A; common practice),
#: so every ratio would be a 1-sigma guess.
MIN_TYPING_SNR = 10.0
#: Wavelength range (A) of the classification lines (He I 4026-4471, He II 4200/4541,
#: Si III/IV, Mg II), where the S/N for :data:`MIN_TYPING_SNR` is measured.
TYPING_REGION = (4000.0, 4700.0)


def _num(x) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return math.nan
    return v


def der_snr_bias(fwhm_pixels: float) -> float:
    """True noise / DER_SNR noise when white noise was smoothed by a Gaussian of FWHM
    ``fwhm_pixels`` (pixels); 1 for independent pixels.

    The smoothed noise has a Gaussian autocorrelation rho(d) = exp(-d^2 / (4 s^2)), s the
    kernel sigma, so the DER_SNR stencil 2 f_i - f_(i-2) - f_(i+2) has variance
    sigma^2 (6 - 8 rho(2) + 2 rho(4)) instead of 6 sigma^2 (computed).
    """
    if not math.isfinite(fwhm_pixels) or fwhm_pixels <= 0:
        return 1.0
    s2 = (fwhm_pixels / 2.3548200450309493) ** 2
    rho2, rho4 = math.exp(-4.0 / (4 * s2)), math.exp(-16.0 / (4 * s2))
    return math.sqrt(6.0 / max(6.0 - 8.0 * rho2 + 2.0 * rho4, 1e-9))


def _scatter_bound(row: Mapping) -> float:
    """Largest scatter x DER_SNR that smoothed noise explains; NaN when the resolution was
    only estimated from the lines (too uncertain to bound anything)."""
    if row.get("resolution_source") not in RESOLUTION_KNOWN:
        return math.nan
    fwhm, step = _num(row.get("resolution_fwhm")), _num(row.get("pixel_step"))
    if not (math.isfinite(fwhm) and math.isfinite(step) and step > 0):
        return math.nan
    return max(1.0, der_snr_bias(fwhm / step))


def continuum_snr(row: Mapping) -> float:
    """S/N from the continuum scatter, 1 / ``continuum_scatter`` (NaN when unknown)."""
    s = _num(row.get("continuum_scatter"))
    return 1.0 / s if math.isfinite(s) and s > 0 else math.nan


def effective_snr(row: Mapping) -> float:
    """The smaller of DER_SNR (``snr``) and :func:`continuum_snr` (NaN if neither is known)."""
    vals = [v for v in (_num(row.get("snr")), continuum_snr(row)) if math.isfinite(v)]
    return min(vals) if vals else math.nan


def noise_note(row: Mapping) -> str:
    """A note when the continuum scatter says the S/N is lower than DER_SNR, else ''."""
    snr, cs = _num(row.get("snr")), continuum_snr(row)
    if not (math.isfinite(snr) and math.isfinite(cs)) or snr / cs <= CORRELATED_NOISE_RATIO:
        return ""
    return (f"continuum scatter implies S/N {cs:.0f}, DER_SNR {snr:.0f}: pixel noise "
            "correlated (oversampled or smoothed spectrum?), DER_SNR overestimates the S/N")


def _by_id(lines: Sequence[Mapping]) -> dict[str, Mapping]:
    return {str(ln.get("line", "")): ln for ln in lines}


def _detected(ln: Mapping | None, sigma: float, *, emission: bool) -> bool:
    if ln is None or ln.get("status") != "measured" or bool(ln.get("emission")) != emission:
        return False
    sig = _num(ln.get("significance"))
    return math.isfinite(sig) and abs(sig) >= sigma


def inverted_emission(lines: Sequence[Mapping], sigma: float = 3.0) -> list[str]:
    """Balmer lines detected in emission while a lower member is detected in absorption."""
    by = _by_id(lines)
    out = []
    for k, ident in enumerate(_BALMER_SERIES):
        if not _detected(by.get(ident), sigma, emission=True):
            continue
        if any(_detected(by.get(lower), sigma, emission=False)
               for lower in _BALMER_SERIES[k + 1:]):
            out.append(ident)
    return out


def _wind_emission(lines: Sequence[Mapping], sigma: float) -> bool:
    by = _by_id(lines)
    return any(_detected(by.get(i), sigma, emission=True) for i in _EMISSION_LINES)


def _balmer_reasons(lines: Sequence[Mapping], sigma: float) -> list[str]:
    by = _by_id(lines)
    out = []
    judged = {} if _wind_emission(lines, sigma) else BALMER_CHECKED  # wind fills them in
    for ident, name in judged.items():
        ln = by.get(ident)
        if ln is None or ln.get("status") not in ("measured", "not detected"):
            continue  # outside the range, masked, or fitted as part of a blend
        ew, err = _num(ln.get("ew")), _num(ln.get("ew_err"))
        if ln.get("status") == "not detected":
            if not (math.isfinite(ew) and ew >= NOT_DETECTED_EW):
                out.append(f"{name} not detected")
        elif ln.get("emission"):
            continue  # judged by the emission pattern below
        elif math.isfinite(ew) and ew < MIN_BALMER_EW:
            out.append(f"{name} EW {ew:.2f} A (< {MIN_BALMER_EW:g} A in any O/B star)")
        elif math.isfinite(ew) and math.isfinite(err) and err > abs(ew):
            out.append(f"{name} EW error {err:.2f} A larger than its EW {ew:.2f} A")
    for ident in inverted_emission(lines, sigma):
        out.append(f"{_BALMER_NAMES[ident]} in emission while a lower Balmer line is in "
                   "absorption")
    return out


def too_noisy_to_type(row: Mapping) -> bool:
    """The classification region's S/N is below :data:`MIN_TYPING_SNR` (no type given)."""
    region = row.get("snr_typing_region")
    return math.isfinite(_num(region)) and _num(region) < MIN_TYPING_SNR


def suspect_reasons(row: Mapping, lines: Sequence[Mapping], sigma: float = 3.0) -> list[str]:
    """Why a hot-star spectrum's data look bad; empty when they look fine.

    Parameters
    ----------
    row : mapping
        Result row; ``subtype`` (hot star when finite), ``snr``, ``continuum_scatter``,
        ``resolution_fwhm``, ``resolution_source`` and ``pixel_step`` (A).
    lines : sequence of mapping
        Per-line rows (``line, status, emission, significance, ew, ew_err``).
    sigma : float
        Detection threshold in sigma.

    Returns
    -------
    list of str
        One short reason per problem (see the module docstring).
    """
    if row.get("status") == "failed":
        return []
    out = []
    if math.isfinite(_num(row.get("subtype"))) or too_noisy_to_type(row):
        out += _balmer_reasons(lines, sigma)
    snr, cs = _num(row.get("snr")), continuum_snr(row)
    bound = _scatter_bound(row)
    if (math.isfinite(snr) and math.isfinite(cs) and math.isfinite(bound)
            and snr / cs > SCATTER_EXCESS * bound):
        out.append(f"continuum scatter {snr / cs:.1f} x the DER_SNR noise (smoothed noise: "
                   f"<= {bound:.1f})")
    return out
