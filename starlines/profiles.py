"""Line profile models for single lines and blends (the fitting is in :mod:`starlines.fitting`).

Every profile has unit area, so the amplitude of a component in continuum-normalized flux
*is* its equivalent width in Angstrom (positive for absorption, negative for emission).

Two component shapes are used:

``"gauss"``
    A Gaussian, for He and metal lines broadened by the instrument and rotation.
``"wing"``
    A Gaussian core plus a Lorentzian wing sharing one centre: total area ``A``, a
    fraction ``f = 1 / (1 + exp(-q))`` of it in the Lorentzian (``q`` is the parameter,
    so f stays in (0, 1) without hard bounds). A fast analytic stand-in for a Voigt
    profile that also follows Stark-broadened Balmer wings (the Lorentzian carries the far
    wing, the Gaussian the core); the bounded fraction keeps core and wing from cancelling
    each other.

A :class:`BlendModel` adds any number of components on a linear local baseline. Lines
close to each other share one Doppler velocity and one Gaussian width (their parameters are
*tied*); every other parameter is free. :mod:`starlines.fitting` fits such a model.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

__all__ = [
    "C_KMS",
    "gaussian",
    "lorentzian",
    "voigt",
    "Component",
    "BlendModel",
    "profile_fwhm",
    "lorentz_fraction",
    "FWHM_PER_SIGMA",
]

#: Speed of light in km/s (exact, SI definition).
C_KMS = 299792.458
_SQRT2PI = float(np.sqrt(2.0 * np.pi))
#: FWHM of a Gaussian in units of its sigma: 2 sqrt(2 ln 2).
FWHM_PER_SIGMA = 2.0 * float(np.sqrt(2.0 * np.log(2.0)))

Shape = Literal["gauss", "wing"]


def lorentz_fraction(q):
    """Lorentzian share of a ``"wing"`` component from its logit parameter ``q``."""
    return 1.0 / (1.0 + np.exp(-np.clip(q, -50.0, 50.0)))


def gaussian(x: np.ndarray, mu: float, sigma: float) -> np.ndarray:
    """Unit-area Gaussian."""
    u = (x - mu) / sigma
    return np.exp(-0.5 * u * u) / (sigma * _SQRT2PI)


def lorentzian(x: np.ndarray, mu: float, gamma: float) -> np.ndarray:
    """Unit-area Lorentzian with half width at half maximum ``gamma``."""
    d = x - mu
    return gamma / np.pi / (d * d + gamma * gamma)


def voigt(x: np.ndarray, mu: float, sigma: float, gamma: float) -> np.ndarray:
    """Unit-area Voigt profile (Gaussian sigma, Lorentzian HWHM gamma), via scipy."""
    from scipy.special import voigt_profile

    return voigt_profile(x - mu, sigma, gamma)


@dataclass(frozen=True)
class Component:
    """One line inside a blend model.

    Attributes
    ----------
    name : str
        Line id.
    rest : float
        Rest wavelength (Angstrom) in the spectrum's medium.
    shape : {"gauss", "wing"}
        Profile shape (see the module docstring).
    vgroup, wgroup : int
        Index of the velocity and of the Gaussian-width parameter this component uses;
        components with the same index are tied.
    """

    name: str
    rest: float
    shape: Shape
    vgroup: int
    wgroup: int


@dataclass
class BlendModel:
    """Components on a linear baseline ``b0 + b1 t`` with ``t`` in [-1, 1] over the window.

    Parameter vector: ``b0, b1``, one velocity (km/s) per velocity group, one
    ``ln(sigma)`` per width group, then per component its area ``A`` (and for ``"wing"``
    shapes the logit ``q`` of the Lorentzian fraction and ``ln(gamma)``).
    """

    components: list[Component]
    xmid: float
    halfspan: float
    nv: int = field(init=False)
    nw: int = field(init=False)
    amp_index: list[int] = field(init=False)

    def __post_init__(self) -> None:
        self.nv = 1 + max(c.vgroup for c in self.components)
        self.nw = 1 + max(c.wgroup for c in self.components)
        idx, k = [], 2 + self.nv + self.nw
        for c in self.components:
            idx.append(k)
            k += 3 if c.shape == "wing" else 1
        self.amp_index = idx
        self.npar = k
        # vectorised bookkeeping: one column per component
        self._rest = np.array([c.rest for c in self.components])
        self._vg = np.array([c.vgroup for c in self.components])
        self._wg = np.array([c.wgroup for c in self.components])
        self._ia = np.array(idx)
        self._wing = np.array([c.shape == "wing" for c in self.components])
        self._iaw = self._ia[self._wing]
        self._pv = np.eye(self.nv)[self._vg]  # (K, nv) component -> velocity group
        self._pw = np.eye(self.nw)[self._wg]
        self.nonlinear = np.ones(self.npar, dtype=bool)  # all but baseline and areas
        self.nonlinear[:2] = False
        self.nonlinear[self._ia] = False

    def evaluate(self, p: np.ndarray, x: np.ndarray, jac: bool = False):
        """Model flux at ``x`` and, if ``jac``, the Jacobian (n_x, n_par)."""
        t = (x - self.xmid) / self.halfspan
        dmu = self._rest / C_KMS
        mu = self._rest + p[2 + self._vg] * dmu
        s = np.exp(p[2 + self.nv + self._wg])
        area = p[self._ia]
        frac = np.zeros(area.size)
        frac[self._wing] = lorentz_fraction(p[self._iaw + 1])
        a = area * (1.0 - frac)
        d = x[:, None] - mu
        u = d / s
        g = np.exp(-0.5 * u * u) / (s * _SQRT2PI)
        m = p[0] + p[1] * t - g @ a
        wing = self._wing.any()
        if wing:
            gam = np.exp(p[self._iaw + 2])
            al = area[self._wing] * frac[self._wing]
            dw = d[:, self._wing]
            den = dw * dw + gam * gam
            lor = gam / np.pi / den
            m -= lor @ al
        if not jac:
            return m
        J = np.zeros((x.size, self.npar))
        J[:, 0] = 1.0
        J[:, 1] = t
        J[:, self._ia] = -g
        ag = a * g
        dv = -(ag * u / s * dmu)
        J[:, 2 + self.nv:2 + self.nv + self.nw] = -(ag * (u * u - 1.0)) @ self._pw
        if wing:
            gw = g[:, self._wing]
            fw = frac[self._wing]
            J[:, self._iaw] = -((1.0 - fw) * gw + fw * lor)
            J[:, self._iaw + 1] = -area[self._wing] * (lor - gw) * fw * (1.0 - fw)
            J[:, self._iaw + 2] = -al * lor * (1.0 - 2.0 * gam * gam / den)
            dv[:, self._wing] -= al * lor * 2.0 * dw / den * dmu[self._wing]
        J[:, 2:2 + self.nv] = dv @ self._pv
        return m, J

    def component_profile(self, p: np.ndarray, x: np.ndarray, k: int) -> np.ndarray:
        """Absorbed flux (area-weighted profile) of component ``k`` alone."""
        c, ia = self.components[k], self.amp_index[k]
        mu = c.rest * (1.0 + p[2 + c.vgroup] / C_KMS)
        g = gaussian(x, mu, np.exp(p[2 + self.nv + c.wgroup]))
        if c.shape != "wing":
            return p[ia] * g
        frac = lorentz_fraction(p[ia + 1])
        return p[ia] * ((1.0 - frac) * g + frac * lorentzian(x, mu, np.exp(p[ia + 2])))


def profile_fwhm(area_g: float, sigma: float, area_l: float, gamma: float) -> float:
    """FWHM of a Gaussian-plus-Lorentzian profile with a common centre (Angstrom).

    Solved on a grid with linear interpolation; exact for a pure Gaussian or Lorentzian
    to better than 0.1 %.
    """
    if area_l == 0.0 or gamma <= 0.0:
        return FWHM_PER_SIGMA * sigma
    if area_g == 0.0:
        return 2.0 * gamma
    xmax = 4.0 * max(sigma * FWHM_PER_SIGMA, 2.0 * gamma)
    d = np.linspace(0.0, xmax, 2001)
    prof = area_g * gaussian(d, 0.0, sigma) + area_l * lorentzian(d, 0.0, gamma)
    half = 0.5 * prof[0]
    below = np.flatnonzero(np.sign(prof - half) != np.sign(prof[0] - half))
    if below.size == 0:
        return float("nan")
    i = below[0]
    x0, x1, y0, y1 = d[i - 1], d[i], prof[i - 1], prof[i]
    return float(2.0 * (x0 + (half - y0) * (x1 - x0) / (y1 - y0)))
