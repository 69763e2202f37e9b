"""Many small :class:`~starlines.profiles.BlendModel` fits at once (vectorised Levenberg-Marquardt).

A spectrum has 15-25 fit groups of 20-300 pixels and 5-30 parameters each. Fitted one by
one, numpy's per-call overhead dominates: every evaluation is a few dozen array operations
on arrays of a few hundred elements. Here all groups of similar size are packed into padded
arrays (problem x pixel x component) and every Levenberg-Marquardt trial is one pass of
array operations over the whole batch:

* the model and its analytic Jacobian are evaluated per component row (pixels contiguous);
  area, Lorentz-fraction and Lorentz-width derivatives are copied to their parameters'
  rows, velocity and width derivatives summed onto their (possibly tied) parameters with
  one batched matrix product by a 0/1 routing matrix;
* the normal equations of all problems are solved in one batched ``numpy.linalg.solve``;
* each problem has its own damping, acceptance test and stopping rule, exactly as in a
  single fit; finished problems are dropped from the batch.

Padding: pixels beyond a problem's own count have weight 0; components beyond its count
have zero area and point at a dummy parameter (the last one), which is never free.
Priors (Gaussian, on the baseline, velocities and log-widths) enter the normal equations as
extra diagonal terms, equivalent to the residual rows of a single fit.

Problems without free nonlinear parameters (only baseline and areas free) are linear: one
undamped Gauss-Newton step is exact and bounds are not applied, as in
:func:`starlines.fitting.fit_blend`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from starlines.profiles import C_KMS, BlendModel

__all__ = ["FitProblem", "solve_problems"]

_SQRT2PI = float(np.sqrt(2.0 * np.pi))
#: Largest ratio of pixel counts packed into one batch (padding costs pixels x components).
_BUCKET_RATIO = 2.5


@dataclass
class FitProblem:
    """One blend fit: model, good pixels, start, priors, free mask and bounds."""

    model: BlendModel
    x: np.ndarray
    y: np.ndarray
    err: np.ndarray
    p0: np.ndarray
    prior_sigma: np.ndarray
    free: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    floor_chi2: bool = True
    start: np.ndarray | None = None


@dataclass
class Solution:
    """Raw result of one problem (see :func:`starlines.fitting.fit_blends`)."""

    p: np.ndarray
    cov: np.ndarray
    chi2_red: float
    residual_rms: float
    success: bool


class _Batch:
    """Padded constant arrays of a batch of problems."""

    def __init__(self, probs: list[FitProblem]):
        B = len(probs)
        N = max(pr.x.size for pr in probs)
        K = max(len(pr.model.components) for pr in probs)
        P = max(pr.model.npar for pr in probs) + 1
        dummy = P - 1
        self.N, self.K, self.P = N, K, P
        self.n = np.array([pr.x.size for pr in probs])
        self.X = np.zeros((B, N))
        self.Y = np.zeros((B, N))
        self.W = np.zeros((B, N))
        self.T = np.zeros((B, N))
        rest = np.zeros((B, K))
        idx = np.full((5, B, K), dummy)  # v, w, a, q, g parameter of each component
        wing = np.zeros((B, K), dtype=bool)
        self.p0 = np.zeros((B, P))
        self.start = np.zeros((B, P))
        self.free = np.zeros((B, P), dtype=bool)
        self.lo = np.full((B, P), -np.inf)
        self.hi = np.full((B, P), np.inf)
        self.pw = np.zeros((B, P))
        self.floor = np.array([pr.floor_chi2 for pr in probs])
        for b, pr in enumerate(probs):
            m, n, npar = pr.model, pr.x.size, pr.model.npar
            self.X[b, :n], self.Y[b, :n], self.W[b, :n] = pr.x, pr.y, 1.0 / pr.err
            self.X[b, n:] = m.xmid
            self.T[b, :n] = (pr.x - m.xmid) / m.halfspan
            k = len(m.components)
            rest[b, :k], rest[b, k:] = m._rest, m.xmid
            idx[0, b, :k] = 2 + m._vg
            idx[1, b, :k] = 2 + m.nv + m._wg
            idx[2, b, :k] = m._ia
            wing[b, :k] = m._wing
            idx[3, b, :k][m._wing] = m._iaw + 1
            idx[4, b, :k][m._wing] = m._iaw + 2
            self.p0[b, :npar] = pr.p0
            self.start[b, :npar] = pr.p0 if pr.start is None else pr.start
            self.free[b, :npar] = pr.free
            self.lo[b, :npar], self.hi[b, :npar] = pr.lower, pr.upper
            use = np.isfinite(pr.prior_sigma) & pr.free
            self.pw[b, :npar][use] = 1.0 / pr.prior_sigma[use]
        self.rest, self.dmu, self.idx, self.wing = rest, rest / C_KMS, idx, wing
        self._derived()
        self.linear = ~np.any(self.free & self._nonlinear_mask(), axis=1)
        # velocity and width derivatives of the components summed onto their (tied)
        # parameters by one matrix product: MapVW (B, P, 2K), 0/1
        self.MapVW = np.zeros((B, P, 2 * K))
        bb = np.repeat(np.arange(B), K)
        for j in (0, 1):
            self.MapVW[bb, idx[j].ravel(), np.tile(j * K + np.arange(K), B)] = 1.0
        self.MapVW[:, dummy, :] = 0.0

    def _derived(self) -> None:
        B, P = self.p0.shape
        self.flat = self.idx + (P * np.arange(B))[None, :, None]
        self.wingf = self.wing.astype(float)
        self.anywing = bool(self.wing.any())
        self.freemask = self.free[:, :, None] & self.free[:, None, :]
        self.diag = np.arange(P)
        self.bK = np.repeat(np.arange(B), self.K)
        self.rows = [self.idx[j].ravel() for j in range(5)]

    def _nonlinear_mask(self) -> np.ndarray:
        B, P = self.free.shape
        nl = np.zeros((B, P), dtype=bool)
        for j in (0, 1, 3, 4):
            np.put_along_axis(nl, self.idx[j], True, axis=1)
        nl[:, P - 1] = False
        return nl

    def take(self, sel: np.ndarray) -> _Batch:
        """The sub-batch of problems ``sel`` (padding trimmed to their largest size)."""
        out = object.__new__(_Batch)
        N = int(self.n[sel].max())
        for name in ("X", "Y", "W", "T"):
            setattr(out, name, getattr(self, name)[sel, :N])
        for name in ("n", "rest", "dmu", "wing", "p0", "start", "free", "lo", "hi", "pw", "floor",
                     "linear", "MapVW"):
            setattr(out, name, getattr(self, name)[sel])
        out.idx = self.idx[:, sel]
        out.N, out.K, out.P = N, self.K, self.P
        out._derived()
        return out

    def evaluate(self, p: np.ndarray):
        """Weighted residuals (B, N) and transposed weighted Jacobian (B, P, N) at ``p``.

        Component-major layout (B, K, N): the pixel axis is the contiguous one, so every
        operation runs over long rows; few full-size temporaries.
        """
        v, lw, area, q, lg = (x[:, :, None] for x in p.ravel()[self.flat])
        B, K, N, P = self.X.shape[0], self.K, self.X.shape[1], self.P
        si = np.exp(-lw)
        d = self.X[:, None, :] - (self.rest[:, :, None] + v * self.dmu[:, :, None])
        u = d * si
        u2 = u * u
        g = np.exp(u2 * -0.5)
        g *= si / _SQRT2PI
        if self.anywing:
            frac = self.wingf[:, :, None] / (1.0 + np.exp(-np.clip(q, -50.0, 50.0)))
            a, al, gam = area * (1.0 - frac), area * frac, np.exp(lg)
        else:
            a = area
        ag = g * a
        m = p[:, :1] + p[:, 1:2] * self.T - (a.transpose(0, 2, 1) @ g)[:, 0, :]
        JT = np.zeros((B, P, N))
        VW = np.empty((B, 2 * K, N))
        bv, bw = VW[:, :K], VW[:, K:]
        np.multiply(ag, u, out=bv)
        bv *= -self.dmu[:, :, None] * si
        np.multiply(ag, u2, out=bw)
        np.subtract(ag, bw, out=bw)
        rows = self.bK
        if self.anywing:
            iden = d * d
            iden += gam * gam
            np.reciprocal(iden, out=iden)
            lor = iden * (gam / np.pi)
            m -= (al.transpose(0, 2, 1) @ lor)[:, 0, :]
            all_ = lor * al
            t = d * iden
            t *= all_
            t *= -2.0 * self.dmu[:, :, None]
            bv += t
            h = lor - g
            t = h * -frac
            t -= g
            JT[rows, self.rows[2]] = t.reshape(B * K, N)
            JT[rows, self.rows[3]] = (h * (-area * frac * (1.0 - frac))).reshape(B * K, N)
            t = all_ * iden
            t *= 2.0 * gam * gam
            t -= all_
            JT[rows, self.rows[4]] = t.reshape(B * K, N)
        else:
            JT[rows, self.rows[2]] = -g.reshape(B * K, N)
        JT[:, P - 1] = 0.0  # the dummy parameter collects padded components
        JT += self.MapVW @ VW
        JT[:, 0] = 1.0
        JT[:, 1] = self.T
        JT *= self.W[:, None, :]
        return (m - self.Y) * self.W, JT


def _normal(b: _Batch, p, r, JT, pmean):
    """Cost, gradient and Gauss-Newton matrix including the prior terms."""
    rp = (p - pmean) * b.pw
    cost = np.einsum("bn,bn->b", r, r) + np.einsum("bp,bp->b", rp, rp)
    A = JT @ JT.transpose(0, 2, 1)
    A[:, b.diag, b.diag] += b.pw * b.pw
    grad = (JT @ r[:, :, None])[:, :, 0] + b.pw * rp
    return cost, grad, A


def _masked(A: np.ndarray, use: np.ndarray) -> np.ndarray:
    """``A`` restricted to the ``use`` parameters, identity on the others."""
    M = np.where(use[:, :, None] & use[:, None, :], A, 0.0)
    i = np.arange(A.shape[1])
    M[:, i, i] += ~use
    return M


def _solve(M: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    try:
        return np.linalg.solve(M, rhs[:, :, None])[:, :, 0]
    except np.linalg.LinAlgError:
        return np.stack([np.linalg.lstsq(m, v, rcond=None)[0] for m, v in zip(M, rhs)])


def _inverse(M: np.ndarray) -> np.ndarray:
    try:
        return np.linalg.inv(M)
    except np.linalg.LinAlgError:
        return np.stack([np.linalg.pinv(m) for m in M])


def _finish(b: _Batch, p, r, A) -> list[Solution]:
    """Solutions at ``p`` (residuals ``r``, Gauss-Newton matrix ``A`` there)."""
    cov = _inverse(_masked(A, b.free)) * (b.free[:, :, None] & b.free[:, None, :])
    nfree, npri = b.free.sum(axis=1), (b.pw > 0).sum(axis=1)
    dof = np.maximum(b.n - (nfree - npri), 1)
    chi2 = np.einsum("bn,bn->b", r, r) / dof
    scale = np.where(b.floor, np.maximum(1.0, chi2), np.maximum(chi2, 0.25))
    cov = cov * scale[:, None, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        resid = np.where(b.W > 0, r / b.W, 0.0)
    rms = np.sqrt(np.einsum("bn,bn->b", resid, resid) / b.n)
    ok = np.all(np.isfinite(p), axis=1)
    return [Solution(p[i], cov[i], float(chi2[i]), float(rms[i]), bool(ok[i]))
            for i in range(p.shape[0])]


def _run(b: _Batch, max_trials: int, tol: float) -> list[Solution]:
    B = b.p0.shape[0]
    p, pmean = b.start.copy(), b.p0.copy()
    r, J = b.evaluate(p)
    cost, grad, A = _normal(b, p, r, J, pmean)
    lam = np.where(b.linear, 0.0, 1e-3)
    out: list[Solution | None] = [None] * B
    alive = np.arange(B)  # original indices of the problems still in the batch
    frozen = np.zeros(B, dtype=bool)  # finished, waiting to leave the batch: no more steps
    for trial in range(max_trials):
        # parameters held at a bound by the gradient sit this step out (active set)
        held = (((p <= b.lo) & (grad > 0)) | ((p >= b.hi) & (grad < 0))) & ~b.linear[:, None]
        held |= frozen[:, None]
        if held.any():
            use = b.free & ~held
            Au = _masked(A, use)
        else:
            use = b.free
            Au = np.where(b.freemask, A, 0.0)
            Au[:, b.diag, b.diag] += ~use
        dd = Au[:, b.diag, b.diag]
        Au[:, b.diag, b.diag] += lam[:, None] * np.where(dd > 0, dd, 1.0)
        pn = p + _solve(Au, np.where(use, -grad, 0.0))
        if not b.linear.all():
            pn = np.where(b.linear[:, None], pn, np.clip(pn, b.lo, b.hi))
        rn, Jn = b.evaluate(pn)
        cn, gn, An = _normal(b, pn, rn, Jn, pmean)
        good = (np.isfinite(cn) & (cn <= cost)) | b.linear | frozen
        done = ~frozen & ((good & ((cost - cn <= tol) | b.linear))
                          | (~good & (lam * 8.0 >= 1e10)))
        if good.all():
            p, r, J, cost, grad, A = pn, rn, Jn, cn, gn, An
        else:
            g1, g2, g3 = good[:, None], good[:, None, None], good
            p, r, J = np.where(g1, pn, p), np.where(g1, rn, r), np.where(g2, Jn, J)
            cost, grad, A = np.where(g3, cn, cost), np.where(g1, gn, grad), np.where(g2, An, A)
        lam = np.where(b.linear, 0.0, np.where(good, np.maximum(lam / 5.0, 1e-9), lam * 8.0))
        frozen |= done
        last = trial == max_trials - 1
        if not (frozen.all() or last or 2 * frozen.sum() >= frozen.size > 1):
            continue
        fin = np.flatnonzero(frozen | last)
        bf = b.take(fin)
        for i, sol in zip(fin, _finish(bf, p[fin], r[fin, :bf.N], A[fin])):
            out[alive[i]] = sol
        keep = np.flatnonzero(~(frozen | last))
        if keep.size == 0:
            break
        alive, b = alive[keep], b.take(keep)
        p, pmean, lam, cost, frozen = p[keep], pmean[keep], lam[keep], cost[keep], frozen[keep]
        r, J, grad, A = r[keep, :b.N], J[keep, :, :b.N], grad[keep], A[keep]
    return out  # type: ignore[return-value]


def _buckets(sizes: np.ndarray) -> list[np.ndarray]:
    order = np.argsort(sizes, kind="stable")
    out, cur = [], [order[0]]
    for i in order[1:]:
        if sizes[i] > _BUCKET_RATIO * sizes[cur[0]]:
            out.append(np.array(cur))
            cur = []
        cur.append(i)
    out.append(np.array(cur))
    return out


def solve_problems(problems: list[FitProblem], *, max_trials: int = 150,
                   tol: float = 1e-3) -> list[Solution]:
    """Fit every problem; returns one :class:`Solution` per problem, in order.

    Parameters
    ----------
    problems : list of FitProblem
    max_trials : int
        Most Levenberg-Marquardt trial steps per problem.
    tol : float
        A problem stops when an accepted step lowers its chi-square by no more than this
        (1e-3 is far below a 1-sigma change of any parameter).
    """
    if not problems:
        return []
    out: list[Solution | None] = [None] * len(problems)
    for sel in _buckets(np.array([pr.x.size for pr in problems])):
        for i, sol in zip(sel, _run(_Batch([problems[i] for i in sel]), max_trials, tol)):
            out[i] = sol
    return out  # type: ignore[return-value]
