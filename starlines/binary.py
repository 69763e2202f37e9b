"""Double-lined binaries: two velocity components in the He I lines or in the CCF.

Two tests, either of which marks a spectrum double-lined (SB2):

1. **Profile fit** of the strong He I lines (4471, 4922, 4026, 4388, 4713) jointly, in
   velocity space. One component: a rotational profile (linear limb darkening 0.6, common
   practice) convolved with a Gaussian, shared velocity and widths, one depth per line.
   Two components: two Gaussians with their own velocity and width, two depths per line.
   Each line also gets a free continuum offset. Depths and offsets are solved linearly
   inside the non-linear fit (variable projection). The two-component model wins when the
   Bayesian information criterion ``BIC = chi^2 + k ln n`` (Schwarz 1978) drops by more
   than :data:`BIC_THRESHOLD`, the components are at least :data:`MIN_SEPARATION_FACTOR`
   instrumental FWHM apart, and the weaker one holds at least :data:`MIN_FLUX_RATIO` of
   the line strength and is significant.
2. **Two CCF peaks**: a cross-correlation with a narrow-line (He I, He II) template shows
   two maxima separated by a dip deeper than :data:`CCF_DIP_NSIGMA` times the CCF noise
   and than :data:`CCF_DIP_FRACTION` of the weaker peak; when He I lines are available the
   profile fit must prefer two components near the same velocities (lower BIC, within
   max(50 km/s, FWHM / 2)), which removes the false peaks
   that rotational profiles and unmodelled lines leave in the CCF.

The thresholds were set on injected binaries and singles (tests/test_binary.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from starlines.ccf import C_KMS, CCFResult, cross_correlate, line_template, rotational_kernel

__all__ = ["SB2Result", "detect_sb2", "fit_components", "ccf_two_peaks", "SB2_LINES"]

#: He I lines used for the profile test (strong in late-O and early-B stars).
SB2_LINES = ("HeI4471", "HeI4922", "HeI4026", "HeI4388", "HeI4713")
#: Lines of the narrow-line CCF template (He I and the unblended He II lines).
CCF_LINES = SB2_LINES + ("HeI4144", "HeI4121", "HeI5876", "HeI6678", "HeII4541", "HeII4200",
                         "HeII5411")
#: Required BIC improvement of two components over one (Kass & Raftery 1995 call > 10
#: "very strong"; we ask more because real profiles are never exactly our model).
BIC_THRESHOLD = 25.0
#: Smallest separation, in units of the instrumental FWHM in km/s.
MIN_SEPARATION_FACTOR = 0.6
#: Weaker component's share of the summed equivalent width.
MIN_FLUX_RATIO = 0.1
#: Two CCF peaks: dip below the weaker peak in CCF-noise sigmas and as a fraction.
CCF_DIP_NSIGMA = 6.0
CCF_DIP_FRACTION = 0.05
#: Half-width (km/s) of the velocity window around each line.
WINDOW_KMS = 550.0


@dataclass
class SB2Result:
    """Outcome of the double-lined test.

    Attributes
    ----------
    sb2 : bool
        True when two components were found.
    velocities, errors : list of float
        Component velocities (stronger first) and their 1-sigma errors (km/s, as measured,
        same frame as the input wavelengths); empty when single.
    method : str
        ``"profile-bic"``, ``"ccf-peaks"`` or ``""``.
    delta_bic : float
        BIC(one component) - BIC(two components); NaN if not fitted.
    lines : list of str
        Lines used in the profile fit.
    notes : list of str
        Why the test said yes or no.
    """

    sb2: bool = False
    velocities: list[float] = field(default_factory=list)
    errors: list[float] = field(default_factory=list)
    method: str = ""
    delta_bic: float = math.nan
    lines: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _gauss(v: np.ndarray, v0: float, sigma: float) -> np.ndarray:
    return np.exp(-0.5 * ((v - v0) / sigma) ** 2)


_U = np.linspace(-1.0, 1.0, 13)


def _rot_gauss(v: np.ndarray, v0: float, sigma: float, vsini: float) -> np.ndarray:
    """Rotational profile convolved with a Gaussian, peak-normalized, on velocities ``v``."""
    if vsini < 1.0:
        return _gauss(v, v0, sigma)
    wk = rotational_kernel(_U * vsini * 0.999, vsini)
    wk = wk / wk.sum()
    prof = (wk[:, None] * _gauss(v[None, :], v0 + _U[:, None] * vsini, sigma)).sum(axis=0)
    return prof / max(float(prof.max()), 1e-12)


@dataclass
class _LineData:
    v: list[np.ndarray]
    depth: list[np.ndarray]
    ids: list[str]


def _line_data(wavelength, norm_flux, good, rest: dict[str, float]) -> _LineData:
    vs, ds, ids = [], [], []
    for ident, lam0 in rest.items():
        v = C_KMS * (wavelength / lam0 - 1.0)
        sel = good & (np.abs(v) < WINDOW_KMS)
        if sel.sum() >= 12 and np.abs(v[sel]).max() > 0.8 * WINDOW_KMS:
            vs.append(v[sel])
            ds.append(1.0 - norm_flux[sel])
            ids.append(ident)
    return _LineData(vs, ds, ids)


def _solve(data: _LineData, profiles_of) -> tuple[np.ndarray, list[np.ndarray]]:
    """Linear depths and offsets per line for given shapes; returns residuals and coefs."""
    res, coefs = [], []
    for v, d in zip(data.v, data.depth):
        a = np.column_stack([*profiles_of(v), np.ones_like(v)])
        c, *_ = np.linalg.lstsq(a, d, rcond=None)
        res.append(d - a @ c)
        coefs.append(c)
    return np.concatenate(res), coefs


def _bases(data: _LineData, vgrid: np.ndarray, sigmas, vsinis) -> list[np.ndarray]:
    """Per line: profiles for every (sigma, vsini, v), shape (n_sigma, n_vsini, n_v, n_pix).

    Each shape is tabulated once on a fine velocity grid and shifted by interpolation.
    """
    fine = np.arange(-1200.0, 1200.0 + 1.0, 2.0)
    shapes = [[_rot_gauss(fine, 0.0, sg, vs) for vs in vsinis] for sg in sigmas]
    out = []
    for v in data.v:
        rel = (v[None, :] - vgrid[:, None]).ravel()
        arr = np.array([[np.interp(rel, fine, sh, left=0.0, right=0.0)
                         .reshape(vgrid.size, v.size) for sh in row] for row in shapes])
        out.append(arr)
    return out


def _chi2_single(data: _LineData, bases, noise: float) -> np.ndarray:
    """chi^2 of depth * profile + offset for every basis profile, summed over lines."""
    total = 0.0
    for d, g in zip(data.depth, bases):
        g = g.reshape(-1, d.size)
        n, s1, sd, sdd = d.size, d.sum(), g @ d, d @ d
        gg, g1 = (g * g).sum(axis=1), g.sum(axis=1)
        det = gg * n - g1 * g1
        det = np.where(det > 1e-12, det, np.inf)  # a profile that is flat on the window
        a = (sd * n - g1 * s1) / det
        c = (s1 - a * g1) / n
        total = total + sdd - a * sd - c * s1
    return np.asarray(total) / noise**2


def _chi2_pairs(data: _LineData, bases, noise: float):
    """chi^2 and summed depths for every pair of profiles sharing a sigma.

    The free offset is removed by centring data and profiles; the two depths then follow
    from a 2x2 system solved in closed form for all pairs at once.
    """
    chi, dep1, dep2 = 0.0, 0.0, 0.0
    for d, g in zip(data.depth, bases):
        ns, n = g.shape[0], d.size
        g = g.reshape(ns, -1, n)
        gc = g - g.mean(axis=2, keepdims=True)
        dc = d - d.mean()
        gram = np.einsum("spk,sqk->spq", gc, gc)
        sd = gc @ dc
        diag = np.diagonal(gram, axis1=1, axis2=2)
        gpp, gqq = diag[:, :, None], diag[:, None, :]
        sp, sq = sd[:, :, None], sd[:, None, :]
        det = gpp * gqq - gram * gram
        det = np.where(det > 1e-9 * gpp * gqq, det, np.inf)  # identical profiles
        x1 = (gqq * sp - gram * sq) / det
        x2 = (gpp * sq - gram * sp) / det
        chi = chi + dc @ dc - (x1 * sp + x2 * sq)
        dep1, dep2 = dep1 + x1, dep2 + x2
    return np.asarray(chi) / noise**2, dep1, dep2


def fit_components(data: _LineData, noise: float, sigma_inst: float, v_guess: float):
    """Grid search of one and two components.

    Returns
    -------
    (chi2_1, k1, chi2_2, k2, (v1, vsini1, v2, vsini2, sigma), (depth1, depth2))
        Best chi^2 and parameter counts of each model, the best pair and its summed depths.
    """
    n_lines = len(data.ids)
    step = min(25.0, sigma_inst * 2.3548 / 3.0)
    vgrid = v_guess + np.arange(-350.0, 350.0 + step / 2, step)
    sig1 = [sigma_inst, math.hypot(sigma_inst, 20.0), math.hypot(sigma_inst, 45.0)]
    chi1 = float(_chi2_single(data, _bases(data, vgrid, sig1,
                                           [0, 40, 80, 120, 160, 200, 250, 300, 360]),
                              noise).min())
    sig2, vs2 = [sigma_inst, math.hypot(sigma_inst, 30.0)], [0.0, 60.0, 130.0]
    chi2, dep1, dep2 = _chi2_pairs(data, _bases(data, vgrid, sig2, vs2), noise)
    chi2 = np.where((dep1 > 0) & (dep2 > 0), chi2, np.inf)
    i, p, q = np.unravel_index(int(np.argmin(chi2)), chi2.shape)
    (jp, kp), (jq, kq) = divmod(p, vgrid.size), divmod(q, vgrid.size)
    params = (float(vgrid[kp]), vs2[jp], float(vgrid[kq]), vs2[jq], sig2[i])
    return (chi1, 3 + 2 * n_lines, float(chi2[i, p, q]), 5 + 3 * n_lines, params,
            (float(dep1[i, p, q]), float(dep2[i, p, q])))


def ccf_two_peaks(result: CCFResult, min_separation: float, max_separation: float = 600.0):
    """Two significant peaks in a CCF; returns (v1, v2) stronger first, or None."""
    c, v = result.ccf, result.velocity
    i1 = int(np.argmax(c))
    peaks = np.flatnonzero((c[1:-1] > c[:-2]) & (c[1:-1] >= c[2:])) + 1
    best = None
    for j in peaks:
        sep = abs(v[j] - v[i1])
        if j == i1 or not (min_separation <= sep <= max_separation) or c[j] <= 0:
            continue
        a, b = sorted((i1, j))
        dip = c[j] - float(c[a:b + 1].min())
        if dip > CCF_DIP_NSIGMA * result.noise and dip > CCF_DIP_FRACTION * c[j]:
            if best is None or c[j] > c[best]:
                best = j
    return None if best is None else (float(v[i1]), float(v[best]))


def detect_sb2(wavelength, norm_flux, good, *, noise: float, rest: dict[str, float],
               resolution_fwhm: float, v_guess: float = 0.0) -> SB2Result:
    """Test a normalized spectrum for two velocity components.

    Parameters
    ----------
    wavelength, norm_flux, good : numpy.ndarray
        Spectrum normalized to 1, and the usable pixels.
    noise : float
        Noise per pixel of the normalized flux.
    rest : dict
        Line id -> rest wavelength in the spectrum's medium, for :data:`CCF_LINES`.
    resolution_fwhm : float
        Instrumental FWHM in Angstrom.
    v_guess : float
        Starting velocity (km/s), e.g. the CCF peak.

    Returns
    -------
    SB2Result
    """
    w = np.asarray(wavelength, float)
    wmid = float(np.median(w))
    fwhm_kms = C_KMS * resolution_fwhm / wmid
    sigma_inst = fwhm_kms / 2.3548
    min_sep = MIN_SEPARATION_FACTOR * fwhm_kms
    out = SB2Result()
    in_range = {k: lam for k, lam in rest.items() if w[0] + 5 < lam < w[-1] - 5}
    peaks = None
    if in_range:
        tmpl_lines = list(in_range.values())
        tmpl = lambda x: line_template(  # noqa: E731 - a short closure reads best here
            x, tmpl_lines, [0.2] * len(tmpl_lines), [resolution_fwhm] * len(tmpl_lines))
        use = np.asarray(good, bool)
        near = np.zeros_like(use)
        for lam in in_range.values():
            near |= np.abs(C_KMS * (w / lam - 1.0)) < 900.0
        try:
            res = cross_correlate(w, norm_flux, tmpl, noise=noise, good=use & near, vmax=900.0)
            peaks = ccf_two_peaks(res, max(min_sep, 2 * res.step_kms))
            v_guess = res.rv
        except ValueError:
            peaks = None
    if peaks is not None:
        out.velocities = list(peaks)
        out.errors = [math.nan, math.nan]
        out.notes.append(f"two CCF peaks at {peaks[0]:+.0f} and {peaks[1]:+.0f} km/s")
    data = _line_data(w, np.asarray(norm_flux, float), np.asarray(good, bool),
                      {k: rest[k] for k in SB2_LINES if k in rest})
    out.lines = data.ids
    if len(data.ids) < 2:
        out.notes.append("fewer than 2 He I lines for the profile test")
        if peaks is not None:
            out.sb2, out.method = True, "ccf-peaks"
        return out
    chi1, k1, chi2, k2, p, depths = fit_components(data, noise, sigma_inst, v_guess)
    n = sum(v.size for v in data.v)
    out.delta_bic = (chi1 + k1 * math.log(n)) - (chi2 + k2 * math.log(n))
    tol = max(50.0, 0.5 * fwhm_kms)
    agree = peaks is not None and (
        max(abs(p[0] - peaks[0]), abs(p[2] - peaks[1])) < tol
        or max(abs(p[0] - peaks[1]), abs(p[2] - peaks[0])) < tol)
    if agree and out.delta_bic > 0:  # CCF peaks confirmed by the He I profiles
        out.sb2, out.method = True, "ccf-peaks"
    elif peaks is not None:
        out.velocities, out.errors = [], []
        out.notes.append("CCF peaks not confirmed by the He I profiles")
    _judge_profile_fit(out, p, depths, min_sep, sigma_inst, noise, n)
    return out


def _judge_profile_fit(out: SB2Result, p, depths, min_sep: float, sigma_inst: float,
                       noise: float, n: int) -> None:
    v1, vs1, v2, vs2, sig = p
    # equivalent width ~ depth x width of each component's profile
    ew1 = depths[0] * math.hypot(sig, 0.6 * vs1)
    ew2 = depths[1] * math.hypot(sig, 0.6 * vs2)
    sep = abs(v2 - v1)
    ratio = min(ew1, ew2) / max(ew1 + ew2, 1e-12)
    ok = out.delta_bic > BIC_THRESHOLD and sep >= min_sep and ratio >= MIN_FLUX_RATIO
    out.notes.append(
        f"He I profile fit: dBIC {out.delta_bic:.1f}, components {v1:+.0f}/{v2:+.0f} km/s, "
        f"weaker share {ratio:.2f}")
    if ok and not out.sb2:
        out.sb2, out.method = True, "profile-bic"
    if ok and out.method == "profile-bic":
        order = (0, 1) if ew1 >= ew2 else (1, 0)
        vv = (v1, v2)
        # grid step limits the precision; velocity error of a line centroid ~ width/(S/N)
        # scaled by the number of pixels (common practice, rough)
        err = max(math.hypot(sig, 0.6 * max(vs1, vs2)) * noise * math.sqrt(8.0 / n)
                  / max(min(depths), 1e-3), 25.0 / math.sqrt(12.0))
        out.velocities = [float(vv[i]) for i in order]
        out.errors = [err, err]
