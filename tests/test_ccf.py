"""Cross-correlation: injected shifts recovered; scatter against the Cramer-Rao bound."""

import numpy as np
import pytest

from starlines.ccf import C_KMS, cross_correlate, line_template

# An O9-like line list (depths and widths invented for the injection; wavelengths of
# H I, He I, He II lines in air rounded to 0.1 A: only self-consistency matters here).
CEN = [4101.7, 4340.5, 4861.3, 4471.5, 4026.2, 4921.9, 4387.9, 4713.1, 4541.6, 4199.8]
DEP = [0.35, 0.35, 0.35, 0.2, 0.15, 0.12, 0.1, 0.06, 0.1, 0.08]
FWHM = [12, 12, 12, 3, 3, 3, 3, 3, 2.5, 2.5]
SHAPE = ["lorentzian"] * 3 + ["gaussian"] * 7


def model(w, rv, vsini, res):
    return line_template(w, CEN, DEP, FWHM, shapes=SHAPE, rv=rv, vsini=vsini,
                         resolution_fwhm=res)


def cramer_rao(w, flux, sigma):
    """Bouchy, Pepe & Queloz (2001): dV = c / sqrt(sum W), W = lambda^2 (dA/dlambda)^2 /
    sigma^2 (criteria.md section 7b)."""
    d = np.gradient(flux, w)
    return C_KMS / np.sqrt(np.sum(w**2 * d**2 / sigma**2))


@pytest.mark.parametrize("rv", [-500.0, -173.3, 0.0, 61.7, 500.0])
def test_noise_free_shift_recovered(rv):
    w = np.arange(3950.0, 4950.0, 0.8)
    r = cross_correlate(w, model(w, rv, 100, 2.0), lambda x: model(x, 0, 100, 2.0),
                        noise=0.01)
    assert r.rv == pytest.approx(rv, abs=0.05)  # analytic injection; 50 m/s << 1 km/s


@pytest.mark.parametrize("snr,res,step,rv", [(50, 1.0, 0.4, -420.0), (300, 3.0, 1.0, 250.0),
                                             (120, 2.0, 0.7, 33.0)])
def test_monte_carlo_bias_and_scatter(snr, res, step, rv):
    rng = np.random.default_rng(int(snr + 10 * res))
    w = np.arange(3950.0, 4950.0, step)
    f = model(w, rv, 120, res)
    sigma = 1.0 / snr
    tmpl = (w, model(w, 0, 120, res))  # tabulated template, as a caller may pass it
    vel, err = [], []
    for _ in range(40):
        r = cross_correlate(w, f + rng.normal(0, sigma, w.size), tmpl, noise=sigma)
        vel.append(r.rv)
        err.append(r.rv_err)
    vel = np.array(vel)
    bound = cramer_rao(w, f, sigma)
    se = vel.std(ddof=1) / np.sqrt(vel.size)
    # bias < 1 km/s, allowing the Monte Carlo's own 3-sigma uncertainty of the mean
    assert abs(vel.mean() - rv) < 1.0 + 3 * se
    assert vel.std(ddof=1) < 1.5 * bound  # within 1.5 x Cramer-Rao (the brief)
    assert 0.6 * bound < np.mean(err) < 1.5 * bound  # Zucker (2003) error is realistic
