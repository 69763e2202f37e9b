"""Least-squares fitting of :class:`~starlines.profiles.BlendModel` line blends.

A Levenberg-Marquardt with the models' analytic Jacobians (scipy's general solvers cost
more in call overhead than the fits themselves on these small windows), projected hard
bounds with an active set, and weak Gaussian priors on the baseline (the continuum
placement and its uncertainty), on each velocity (around a first guess) and on each
log-width. The priors keep weak or absent lines from wandering; strong lines are set by
the data alone.

:func:`fit_blends` fits all the groups of a spectrum at once, vectorised over the groups
(:mod:`starlines.batchfit`); :func:`fit_blend` is the one-group call. Both give the same
result as fitting each group alone (each keeps its own damping and stopping rule).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from starlines.batchfit import FitProblem, solve_problems
from starlines.profiles import C_KMS, FWHM_PER_SIGMA, BlendModel, Component

__all__ = ["BlendFit", "fit_blend", "fit_blends", "problem", "fit_single_line"]


@dataclass
class BlendFit:
    """Result of :func:`fit_blend`.

    Attributes
    ----------
    model : BlendModel
    p : numpy.ndarray
        Best parameters.
    cov : numpy.ndarray
        Parameter covariance, scaled by the residual reduced chi-square (see
        :func:`fit_blend`).
    chi2_red : float
        Reduced chi-square of the data rows.
    residual_rms : float
        RMS of (data - model) in normalized flux.
    success : bool
        Whether the optimizer converged to finite values.
    """

    model: BlendModel
    p: np.ndarray
    cov: np.ndarray
    chi2_red: float
    residual_rms: float
    success: bool

    def ew(self, k: int) -> tuple[float, float]:
        """Equivalent width of component ``k`` and its 1-sigma error (Angstrom)."""
        ia = self.model.amp_index[k]
        return float(self.p[ia]), float(np.sqrt(max(self.cov[ia, ia], 0.0)))

    def centre(self, k: int) -> tuple[float, float]:
        """Fitted centre of component ``k`` and its error (Angstrom)."""
        c = self.model.components[k]
        iv = 2 + c.vgroup
        f = c.rest / C_KMS
        return c.rest + self.p[iv] * f, float(np.sqrt(max(self.cov[iv, iv], 0.0))) * f

    def widths(self, k: int) -> tuple[float, float]:
        """Gaussian sigma and Lorentzian gamma (0 for Gaussians) of component ``k``."""
        c = self.model.components[k]
        s = float(np.exp(self.p[2 + self.model.nv + c.wgroup]))
        if c.shape != "wing":
            return s, 0.0
        return s, float(np.exp(self.p[self.model.amp_index[k] + 2]))


def fit_blend(
    model: BlendModel,
    x: np.ndarray,
    y: np.ndarray,
    err: np.ndarray,
    p0: np.ndarray,
    prior_sigma: np.ndarray,
    *,
    free: np.ndarray | None = None,
    bounds: tuple[np.ndarray, np.ndarray] | None = None,
    floor_chi2: bool = True,
) -> BlendFit:
    """Least-squares fit of ``model`` to normalized flux with Gaussian priors.

    Parameters
    ----------
    model : BlendModel
    x, y, err : numpy.ndarray
        Wavelength (Angstrom), normalized flux and its 1-sigma error, good pixels only.
    p0 : numpy.ndarray
        Starting parameters; they are also the prior means of the baseline (``b0`` = 1
        expected, ``b1`` = 0), of the velocities and of the log-widths.
    prior_sigma : numpy.ndarray
        Prior 1-sigma for each parameter; ``inf`` means no prior (used for the areas).
    free : numpy.ndarray of bool, optional
        Parameters to fit; the others stay at ``p0`` with zero variance. Default all.
    bounds : (numpy.ndarray, numpy.ndarray), optional
        Hard lower and upper limits per parameter (default none).
    floor_chi2 : bool
        If True the covariance is scaled by ``max(1, chi2_red)`` (errors never smaller than
        the stated noise); if False by ``chi2_red`` itself (noise estimated from the data).

    Returns
    -------
    BlendFit
    """
    return fit_blends([problem(model, x, y, err, p0, prior_sigma, free=free, bounds=bounds,
                               floor_chi2=floor_chi2)])[0]


def problem(model: BlendModel, x, y, err, p0, prior_sigma, *, free=None, bounds=None,
            floor_chi2: bool = True, start=None) -> FitProblem:
    """Bundle the arguments of :func:`fit_blend` for :func:`fit_blends`; ``start``
    (default ``p0``) is where the iterations begin, ``p0`` stays the prior mean."""
    free = np.ones(p0.size, dtype=bool) if free is None else np.asarray(free, dtype=bool)
    lower, upper = (np.full(p0.size, -np.inf), np.full(p0.size, np.inf)) if bounds is None \
        else bounds
    return FitProblem(model, np.asarray(x, float), np.asarray(y, float), np.asarray(err, float),
                      np.asarray(p0, float), np.asarray(prior_sigma, float), free,
                      np.asarray(lower, float), np.asarray(upper, float), floor_chi2,
                      None if start is None else np.asarray(start, float))


def fit_blends(problems: list[FitProblem]) -> list[BlendFit]:
    """Fit many blends at once (see :mod:`starlines.batchfit`); same results as fitting
    each with :func:`fit_blend` (Levenberg-Marquardt with analytic Jacobians, projected
    bounds with an active set, priors as residual rows, covariance scaled by the reduced
    chi-square of the data rows)."""
    sols = solve_problems(problems)
    return [BlendFit(model=pr.model, p=s.p[:pr.model.npar],
                     cov=s.cov[:pr.model.npar, :pr.model.npar], chi2_red=s.chi2_red,
                     residual_rms=s.residual_rms, success=s.success)
            for pr, s in zip(problems, sols)]


def fit_single_line(
    w: np.ndarray,
    y: np.ndarray,
    err: np.ndarray,
    good: np.ndarray,
    rest: float,
    fwhm: float,
    *,
    v0: float = 0.0,
    n_iter: int = 3,
) -> dict | None:
    """Quick Gaussian fit of one line, the window following the fitted width.

    Used to size windows and to find a first velocity; not for the reported measurements.

    Parameters
    ----------
    w, y, err, good : numpy.ndarray
        Wavelength, normalized flux, its error and usable-pixel mask.
    rest : float
        Rest wavelength in the spectrum's medium.
    fwhm : float
        Starting FWHM guess (Angstrom).
    v0 : float
        Starting velocity (km/s).
    n_iter : int
        Number of window/width iterations.

    Returns
    -------
    dict or None
        ``ew, ew_err, significance, fwhm, rv`` or None when the window holds too few
        pixels or lies outside the spectrum.
    """
    dx = float(np.median(np.diff(w)))
    out = None
    for _ in range(n_iter):
        hw = max(2.0 * fwhm, 6.0 * dx)
        centre = rest * (1.0 + v0 / C_KMS)
        if centre - hw < w[0] or centre + hw > w[-1]:
            return None
        i0, i1 = np.searchsorted(w, [centre - hw, centre + hw])
        sel = slice(i0, i1)
        g = good[sel]
        if g.sum() < 8:
            return None
        x, yy, ee = w[sel][g], y[sel][g], err[sel][g]
        model = BlendModel([Component("line", rest, "gauss", 0, 0)], centre, hw)
        sig0 = fwhm / FWHM_PER_SIGMA
        a0 = float(np.sum(1.0 - yy) * dx)
        p0 = np.array([1.0, 0.0, v0, np.log(sig0), a0])
        prior = np.array([0.05, 0.05, 300.0, 1.0, np.inf])
        fit = fit_blend(model, x, yy, ee, p0, prior, floor_chi2=False)
        ew, ew_err = fit.ew(0)
        s, _ = fit.widths(0)
        new_fwhm = float(np.clip(FWHM_PER_SIGMA * s, 2.0 * dx, 60.0))
        v0 = float(np.clip(fit.p[2], -600.0, 600.0))
        out = dict(ew=ew, ew_err=ew_err, significance=abs(ew) / ew_err if ew_err > 0 else 0.0,
                   fwhm=new_fwhm, rv=v0)
        if abs(new_fwhm - fwhm) < 0.05 * fwhm:
            break
        fwhm = new_fwhm
    return out
