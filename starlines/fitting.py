"""Least-squares fitting of :class:`~starlines.profiles.BlendModel` line blends.

A small Levenberg-Marquardt with the models' analytic Jacobians (scipy's general solvers
cost more in call overhead than the fits themselves on these small windows), projected
hard bounds with an active set, and weak Gaussian priors written as extra residual rows:
on the baseline (the continuum placement and its uncertainty), on each velocity (around a
first guess) and on each log-width. The priors keep weak or absent lines from wandering;
strong lines are set by the data alone.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from starlines.profiles import C_KMS, FWHM_PER_SIGMA, BlendModel, Component

__all__ = ["BlendFit", "fit_blend", "fit_single_line"]


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


def _levenberg_marquardt(fun_jac, p0, free, lower, upper, linear=False, max_iter=60,
                         tol=1e-3):
    """Minimise |r(p)|^2 over ``p[free]`` within [lower, upper]; ``fun_jac(p)`` gives (r, J).

    Steps are projected onto the bounds. With ``linear`` (r linear in the free parameters)
    one Gauss-Newton step is exact.
    """
    p = p0.copy()
    r, J = fun_jac(p)
    if linear:
        Jf = J[:, free]
        try:
            step = np.linalg.solve(Jf.T @ Jf, -(Jf.T @ r))
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(Jf, -r, rcond=None)[0]
        p[free] += step
        return p, r + Jf @ step, J
    cost = float(r @ r)
    lam = 1e-3
    all_free = free
    for _ in range(max_iter):
        # parameters held at a bound by the gradient sit this step out (active set)
        grad = J[:, all_free].T @ r
        pa = p[all_free]
        held = ((pa <= lower[all_free]) & (grad > 0)) | ((pa >= upper[all_free]) & (grad < 0))
        free = all_free[~held]
        Jf = J[:, free]
        A = Jf.T @ Jf
        g = grad[~held]
        d = np.diag(A).copy()
        d[d <= 0] = 1.0
        improved = False
        while lam < 1e10:
            try:
                step = np.linalg.solve(A + lam * np.diag(d), -g)
            except np.linalg.LinAlgError:
                lam *= 10.0
                continue
            pn = p.copy()
            pn[free] += step
            np.clip(pn, lower, upper, out=pn)
            rn, Jn = fun_jac(pn)
            cn = float(rn @ rn)
            if np.isfinite(cn) and cn <= cost:
                improved = True
                break
            lam *= 8.0
        if not improved:
            break
        done = cost - cn <= tol  # chi-square units: 1e-3 is far below a 1-sigma change
        p, r, J, cost = pn, rn, Jn, cn
        lam = max(lam / 5.0, 1e-9)
        if done:
            break
    return p, r, J


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
    free = np.ones(p0.size, dtype=bool) if free is None else np.asarray(free, dtype=bool)
    w = 1.0 / err
    pidx = np.flatnonzero(np.isfinite(prior_sigma) & free)
    pw = 1.0 / prior_sigma[pidx]
    pmean = p0[pidx].copy()
    n = x.size
    rows = n + np.arange(pidx.size)

    def fun_jac(p):
        m, J = model.evaluate(p, x, jac=True)
        r = np.concatenate([(m - y) * w, (p[pidx] - pmean) * pw])
        out = np.zeros((n + pidx.size, p.size))
        out[:n] = J * w[:, None]
        out[rows, pidx] = pw
        return r, out

    linear = not np.any(free & model.nonlinear)
    lower, upper = (np.full(p0.size, -np.inf), np.full(p0.size, np.inf)) if bounds is None \
        else bounds
    p, r, J = _levenberg_marquardt(fun_jac, p0, np.flatnonzero(free), lower, upper,
                                   linear=linear)
    ok = bool(np.all(np.isfinite(p)))
    nfree = int(free.sum())
    dof = max(n - (nfree - pidx.size), 1)
    chi2_red = float(np.sum(r[:n] ** 2) / dof)
    scale = max(1.0, chi2_red) if floor_chi2 else max(chi2_red, 0.25)
    fi = np.flatnonzero(free)
    Jf = J[:, fi]
    try:
        cf = np.linalg.inv(Jf.T @ Jf) * scale
    except np.linalg.LinAlgError:
        cf = np.linalg.pinv(Jf.T @ Jf) * scale
    cov = np.zeros((p.size, p.size))
    cov[np.ix_(fi, fi)] = cf
    rms = float(np.sqrt(np.mean((r[:n] / w) ** 2)))
    return BlendFit(model=model, p=p, cov=cov, chi2_red=chi2_red, residual_rms=rms, success=ok)


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
