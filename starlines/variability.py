"""Radial-velocity variability of a star from its epochs across nights.

Two statistics are computed from the usable epochs (barycentric velocity with a positive,
finite error; a heliocentric one is accepted too, as the two frames differ by less than
0.02 km/s, from memory, far below the errors of hot-star velocities):

* the chi-square of a constant velocity (the error-weighted mean) with ``n - 1`` degrees of
  freedom and its p-value ``scipy.stats.chi2.sf(chi2, n - 1)``;
* every pair of epochs: the difference ``|v_i - v_j|`` and its significance
  ``|v_i - v_j| / sqrt(s_i**2 + s_j**2)``.

A star is *velocity variable* when the constant-velocity hypothesis is rejected at
``p < 0.001`` (common practice) AND at least one pair of epochs differs by more than 4.0
sigma and by more than 20 km/s, the criterion of the VLT-FLAMES Tarantula Survey binary
study (Sana et al. 2013, A&A 550, A107; thresholds from memory, not in criteria.md).
The amplitude threshold guards against line-profile variability of hot stars mimicking
orbital motion.

Topocentric velocities (or any unknown frame) are never compared across nights: such
epochs are skipped and the reason is kept in the result.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "SIGMA_THRESHOLD",
    "AMPLITUDE_THRESHOLD_KMS",
    "P_THRESHOLD",
    "COMPARABLE_FRAMES",
    "VariabilityResult",
    "usable_epoch",
    "velocity_variability",
]

#: Pair significance threshold (Sana et al. 2013, A&A 550, A107; from memory).
SIGMA_THRESHOLD = 4.0
#: Pair amplitude threshold in km/s (Sana et al. 2013, A&A 550, A107; from memory).
AMPLITUDE_THRESHOLD_KMS = 20.0
#: Chi-square p-value below which a constant velocity is rejected (common practice).
P_THRESHOLD = 1e-3
#: Velocity frames that can be compared across nights.
COMPARABLE_FRAMES = ("barycentric", "heliocentric")


@dataclass
class VariabilityResult:
    """Outcome of the variability test of one star.

    Attributes
    ----------
    star_id : int or None
        Archive star id.
    name : str or None
        Canonical star name.
    n_epochs : int
        Epochs offered (spectra of the star).
    n_used : int
        Epochs with a comparable velocity and a usable error.
    mean_rv, mean_rv_err : float
        Error-weighted mean velocity and its error, km/s (NaN with no usable epoch).
    chi2 : float
        Chi-square about the weighted mean.
    dof : int
        Degrees of freedom, ``n_used - 1``.
    p_value : float
        ``chi2.sf(chi2, dof)``; NaN with fewer than two epochs.
    peak_to_peak : float
        Largest minus smallest usable velocity, km/s.
    max_significance : float
        Largest pair significance ``|dv| / sqrt(s_i^2 + s_j^2)``.
    best_pair_dv : float
        ``|dv|`` of the most significant pair meeting the amplitude threshold (else of the
        most significant pair), km/s.
    variable : bool
        True when the star is velocity variable (see the module docstring).
    reason : str
        One line explaining the verdict.
    skipped : list of str
        One entry per epoch not used, with the reason.
    """

    star_id: int | None = None
    name: str | None = None
    n_epochs: int = 0
    n_used: int = 0
    mean_rv: float = math.nan
    mean_rv_err: float = math.nan
    chi2: float = math.nan
    dof: int = 0
    p_value: float = math.nan
    peak_to_peak: float = math.nan
    max_significance: float = math.nan
    best_pair_dv: float = math.nan
    variable: bool = False
    reason: str = ""
    skipped: list = field(default_factory=list)


def _as_float(x) -> float:
    try:
        return float(x) if x is not None else math.nan
    except (TypeError, ValueError):
        return math.nan


def usable_epoch(rv, rv_err, frame) -> str | None:
    """Say why an epoch cannot enter the test, or None when it can.

    Parameters
    ----------
    rv, rv_err : float or None
        Velocity and its 1-sigma error in km/s.
    frame : str or None
        Velocity frame.

    Returns
    -------
    str or None
        The reason for skipping, None for a usable epoch.
    """
    frame = None if frame is None else str(frame)
    if frame not in COMPARABLE_FRAMES:
        return (f"velocity frame {frame!r} is not barycentric: "
                "cannot be compared across nights")
    if not math.isfinite(_as_float(rv)):
        return "no velocity"
    err = _as_float(rv_err)
    if not (math.isfinite(err) and err > 0):
        return "no usable velocity error"
    return None


def velocity_variability(rv: Sequence[float], rv_err: Sequence[float],
                         frames: Sequence[str | None] | None = None, *,
                         labels: Sequence[str] | None = None,
                         star_id: int | None = None, name: str | None = None,
                         sigma_threshold: float = SIGMA_THRESHOLD,
                         amplitude_kms: float = AMPLITUDE_THRESHOLD_KMS,
                         p_threshold: float = P_THRESHOLD) -> VariabilityResult:
    """Test a set of epochs for a variable radial velocity.

    Parameters
    ----------
    rv, rv_err : sequence of float
        Velocities and 1-sigma errors in km/s, one per epoch.
    frames : sequence of str, optional
        Frame of each velocity; all barycentric when None.
    labels : sequence of str, optional
        Epoch labels used in the ``skipped`` reasons.
    star_id, name : optional
        Copied into the result.
    sigma_threshold, amplitude_kms, p_threshold : float
        Thresholds of the criterion (defaults: module constants).

    Returns
    -------
    VariabilityResult
    """
    n = len(rv)
    frames = ["barycentric"] * n if frames is None else list(frames)
    labels = [f"epoch {i + 1}" for i in range(n)] if labels is None else list(labels)
    res = VariabilityResult(star_id=star_id, name=name, n_epochs=n)
    v, s = [], []
    for i in range(n):
        why = usable_epoch(rv[i], rv_err[i], frames[i])
        if why:
            res.skipped.append(f"{labels[i]}: {why}")
        else:
            v.append(_as_float(rv[i]))
            s.append(_as_float(rv_err[i]))
    v, s = np.asarray(v, dtype=float), np.asarray(s, dtype=float)
    res.n_used = len(v)
    if res.n_used == 0:
        res.reason = "no epoch with a barycentric velocity"
        return res
    w = 1.0 / s**2
    res.mean_rv = float(np.sum(w * v) / np.sum(w))
    res.mean_rv_err = float(1.0 / math.sqrt(np.sum(w)))
    if res.n_used < 2:
        res.reason = "one barycentric epoch: variability cannot be tested"
        return res
    from scipy.stats import chi2 as chi2_dist

    res.chi2 = float(np.sum(w * (v - res.mean_rv) ** 2))
    res.dof = res.n_used - 1
    res.p_value = float(chi2_dist.sf(res.chi2, res.dof))
    res.peak_to_peak = float(v.max() - v.min())
    i, j = np.triu_indices(res.n_used, k=1)
    dv = np.abs(v[i] - v[j])
    sig = dv / np.sqrt(s[i] ** 2 + s[j] ** 2)
    res.max_significance = float(sig.max())
    passing = (sig > sigma_threshold) & (dv > amplitude_kms)
    pick = int(np.argmax(np.where(passing, sig, -1.0))) if passing.any() else int(sig.argmax())
    res.best_pair_dv = float(dv[pick])
    pair_ok = bool(passing.any())
    chi_ok = res.p_value < p_threshold
    res.variable = pair_ok and chi_ok
    verdict = "velocity variable" if res.variable else "no significant variability"
    res.reason = (
        f"{verdict}: chi2={res.chi2:.1f} (dof {res.dof}, p={res.p_value:.2g}), "
        f"max |dv|={res.best_pair_dv:.1f} km/s at {sig[pick]:.1f} sigma "
        f"(needs p<{p_threshold:g}, >{sigma_threshold:g} sigma and >{amplitude_kms:g} km/s)"
    )
    return res
