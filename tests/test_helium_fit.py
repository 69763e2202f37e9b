"""He/H from equivalent widths: measurement recovery, the joint Teff/log g/He fit, the flag.

The checks run the package's forward model (starlines.synth) through the measurement stage,
so the expected values are the synthetic inputs: the test is of the estimators against
their own forward model, not of the model against real stars (that is
test_reference_accuracy.py). Parameters of the test stars: B1 V 26000 K and B2 V 20600 K
(Pecaut & Mamajek 2013, Table 5, as in test_classify.py), log g 4.0 (from memory, typical
of main-sequence B stars). Normal He/H 0.10 by number (common practice for hot-star grids);
helium-strong stars reach He/H ~0.3-0.5 (from memory).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from starlines import flags as fl
from starlines.ewfit import FIT_LINES, _interpolator, fit_ews
from starlines.measure import measure_spectrum
from starlines.recovery import recovery_factors
from starlines.rules import line_values
from starlines.spectrum import Spectrum
from starlines.synth import synthetic_spectrum

FWHM, STEP, SNR = 2.5, 1.0, 250.0


def _measurement(teff, logg, he, seed=7, vsini=60.0, emission=None):
    """Measurement of the forward model at FWHM, STEP and SNR (white noise, fixed seed)."""
    wave = np.arange(3900.0, 5000.0, STEP)
    flux = synthetic_spectrum(wave, teff=teff, logg=logg, he=he, vsini=vsini,
                              resolution_fwhm=FWHM, emission_lines=emission)
    flux = flux + np.random.default_rng(seed).normal(0.0, 1.0 / SNR, wave.size)
    spec = Spectrum(wavelength=wave, flux=flux, uncertainty=np.full(wave.size, 1.0 / SNR),
                    medium="air", path=f"synthetic {teff} {logg} {he}")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return measure_spectrum(spec)


def _measured(teff, logg, he, seed=7, vsini=60.0):
    return line_values(_measurement(teff, logg, he, seed, vsini).table)


def _fit(values, teff, logg, teff_err=1500.0):
    rec = recovery_factors(FIT_LINES, teff=teff, logg=logg, resolution_fwhm=FWHM,
                           pixel_step=STEP, snr=SNR)
    return fit_ews(values, rec, teff0=teff, teff0_err=teff_err, logg0=logg + 0.25)


def test_trilinear_matches_scipy_regular_grid_interpolator():
    # reference: scipy.interpolate.RegularGridInterpolator, linear, extrapolating
    from scipy.interpolate import RegularGridInterpolator

    fast, axes = _interpolator()
    ref = RegularGridInterpolator(axes, fast.cube, bounds_error=False, fill_value=None)
    rng = np.random.default_rng(1)
    pts = np.column_stack([rng.uniform(14.0, 56.0, 40), rng.uniform(2.4, 4.6, 40),
                           rng.uniform(-1.7, -0.2, 40)])
    for p in pts:
        assert np.allclose(fast(p), ref(p[None, :])[0], atol=1e-12, equal_nan=True)


def test_recovery_factors_sharp_and_diffuse_lines():
    # He I 4713 (upper level 4s: little Stark broadening) comes back whole, within 6 %;
    # the diffuse 4471 and 4026 lose part of their wings to the fit's baseline (0.80-0.87
    # measured and stated in starlines.recovery; bounds 0.70-0.92 leave margin for Teff)
    rec = recovery_factors(("HeI4713", "HeI4471", "HeI4026"), teff=20600.0, logg=4.0,
                           resolution_fwhm=FWHM, pixel_step=STEP, snr=SNR, vsini=60.0)
    assert rec["HeI4713"] == pytest.approx(1.0, abs=0.06)
    assert 0.70 <= rec["HeI4471"] <= 0.92
    assert 0.70 <= rec["HeI4026"] <= 0.92


@pytest.mark.parametrize("teff", [26000.0, 20600.0])
def test_normal_star_fits_normal_helium_and_gravity(teff):
    f = _fit(_measured(teff, 4.0, 0.10), teff, 4.0)
    assert f is not None
    assert f.he == pytest.approx(0.10, abs=0.025)       # synthetic input 0.10
    assert f.logg == pytest.approx(4.0, abs=0.2)        # synthetic input 4.0
    assert f.sigma_outside(0.05, 0.15) == 0.0
    assert fl.helium_flag(f.he, f.he_err, f.sigma_outside(0.05, 0.15)) is None


def test_helium_strong_star_is_excluded_from_normal():
    # planted He/H 0.30 at B2 V: recovered within 0.22-0.40, normal range excluded > 3 sigma
    f = _fit(_measured(20600.0, 4.0, 0.30), 20600.0, 4.0)
    assert f is not None
    assert 0.22 <= f.he <= 0.40
    sig = f.sigma_outside(0.05, 0.15)
    assert sig > fl.HELIUM_SIGMA
    assert fl.helium_flag(f.he, f.he_err, sig) == "helium-strong"


def test_fit_needs_balmer_and_helium_lines():
    vals = _measured(26000.0, 4.0, 0.10)
    only_he = {k: v for k, v in vals.items() if k.startswith("He")}
    assert _fit(only_he, 26000.0, 4.0) is None
    assert fit_ews(vals, {}, teff0=math.nan, teff0_err=0.0, logg0=4.0) is None


def test_helium_flag_prefers_the_profile_significance():
    # common practice: a departure is reported at >= 3 sigma
    assert fl.helium_flag(0.30, 0.2, 3.5) == "helium-strong"   # profile says 3.5 sigma
    assert fl.helium_flag(0.30, 0.01, 1.0) is None              # profile says 1 sigma
    assert fl.helium_flag(0.02, 0.01, -4.0) == "helium-weak"
    assert fl.helium_flag(0.25, 0.02, math.nan) == "helium-strong"  # fallback: 7.5 sigma
    assert fl.helium_flag(0.25, 0.10, math.nan) is None             # fallback: 1.5 sigma


@pytest.mark.parametrize("lumnumber, expected", [(5.0, "V"), (3.0, "III")])
def test_classify_takes_gravity_and_luminosity_from_the_ew_fit(lumnumber, expected):
    # B1 star on the V and III tracks of starlines.teffscale (Pecaut & Mamajek 2013 Table 5;
    # Zorec et al. 2009 Table 6; log g 4.0 / 3.5 from memory): the EW fit's log g within
    # 0.2 dex of the input and the class read from it
    from starlines.classify import classify
    from starlines.teffscale import type_parameters

    teff, logg = type_parameters(11.0, lumnumber)
    c = classify(_measurement(teff, logg, 0.1, seed=3))
    assert c.logg == pytest.approx(logg, abs=0.2)
    assert c.lumclass.rstrip(":") == expected
    assert "EW fit" in c.notes


def test_no_ew_fit_with_balmer_emission():
    # the grid has no wind (grids/README.md, "Limits"): filled-in Balmer lines would read
    # as low gravity, so a star with Balmer emission keeps the model's log g and He/H
    from starlines.classify import classify

    c = classify(_measurement(20600.0, 4.0, 0.1, seed=4,
                              emission={"HI4861": -8.0, "HI4340": -3.0}))
    assert "balmer-emission" in c.flags
    assert math.isnan(c.helium_sigma) and "Balmer emission" in c.notes


def test_lines_without_a_usable_error_are_not_fitted():
    # a NaN error (a failed line fit, or a user's table) must not break the fit
    from starlines.rules import LineValue

    vals = dict(_measured(26000.0, 4.0, 0.10))
    vals["HeI4922"] = LineValue(vals["HeI4922"].ew, math.nan)
    f = _fit(vals, 26000.0, 4.0)
    assert f is not None and "HeI4922" not in f.lines
    assert f.he == pytest.approx(0.10, abs=0.025)   # synthetic input 0.10
