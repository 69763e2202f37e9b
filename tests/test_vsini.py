"""v sin i: the rotation kernel, its Fourier zero, and recovery of injected rotation."""

import numpy as np
import pytest
from linesynth import hot_continuum, make_spectrum, rotational
from scipy.special import jn_zeros

from starlines.lines import line
from starlines.measure import measure_spectrum
from starlines.vsini import (
    LineEstimate,
    combine_estimates,
    first_zero_constant,
    resolution_floor,
    rotation_kernel,
    vsini_fourier,
)

C_KMS = 299792.458
HEI = line("HeI4471").wavelength("air")


def test_kernel_has_unit_area_and_compact_support():
    x = np.linspace(-2.0, 2.0, 40001)
    for eps in (0.0, 0.6, 1.0):
        g = rotation_kernel(x, 1.3, eps)
        assert np.trapezoid(g, x) == pytest.approx(1.0, abs=1e-4)
        assert np.all(g[np.abs(x) >= 1.3] == 0.0)


def test_first_zero_constant():
    # Gray (Observation and Analysis of Stellar Photospheres): sigma_1 v sin i = 0.660 for
    # epsilon = 0.6 [from the issue, Gray's notation; recomputed here from the kernel].
    assert first_zero_constant(0.6) == pytest.approx(0.660, abs=0.001)
    # Limiting cases with closed forms (scipy as the reference library):
    # eps = 0, semi-ellipse: FT ~ J1(2 pi s)/s, first zero at 2 pi s = j_1,1.
    assert first_zero_constant(0.0) == pytest.approx(jn_zeros(1, 1)[0] / (2 * np.pi),
                                                     abs=5e-4)
    # eps = 1, parabola: FT ~ (sin a - a cos a)/a^3, a = 2 pi s, first zero where tan a = a
    # (a = 4.4934, the first positive root; computed with scipy.optimize.brentq).
    from scipy.optimize import brentq

    a1 = brentq(lambda a: np.tan(a) - a, 4.0, 4.6)
    assert first_zero_constant(1.0) == pytest.approx(a1 / (2 * np.pi), abs=5e-4)


INJECTED = (("HeI4471", 1.0), ("HeII4541", 0.4), ("MgII4481", 0.2), ("HeI4388", 0.6))


def _rotating_spectrum(vsini, fwhm_instr, snr=200.0, seed=3, lines=INJECTED):
    w = np.arange(4300.0, 4700.0, 0.1)
    norm = 1.0
    for ident, ew in lines:
        norm = norm - ew * rotational(w, line(ident).wavelength("air"), fwhm_instr, vsini)
    return make_spectrum(w, norm, hot_continuum(w), snr=snr, seed=seed,
                         resolution=fwhm_instr)


# The narrow Mg II 4481 is preferred to He I 4471 (starlines.measure.VSINI_TIERS) up to the
# speed where it sits in the wing of the stronger He I 4471, 9.7 A away (measure.
# VSINI_CLEAR_FWHM); then the diffuse He I fallback is used.
@pytest.mark.parametrize(("vsini", "used"), [(50.0, "MgII4481"), (150.0, "MgII4481"),
                                             (300.0, "HeI4471")])
def test_injected_rotation_recovered(vsini, used):
    # R ~ 10000 (0.45 A FWHM at 4471 A): floor c FWHM / lambda = 30 km/s.
    meta = measure_spectrum(_rotating_spectrum(vsini, 0.45)).table.meta
    assert not meta["vsini_upper_limit"]
    assert meta["vsini_line"] == used
    assert meta["vsini"] == pytest.approx(vsini, rel=0.10)
    assert 0 < meta["vsini_err"] < 0.1 * vsini


def test_diffuse_he_i_fallback_without_narrow_lines():
    # no metal line injected: the first diffuse He I line of the list is fitted alone
    no_metal = tuple(x for x in INJECTED if x[0] != "MgII4481")
    meta = measure_spectrum(_rotating_spectrum(150.0, 0.45, lines=no_metal)).table.meta
    assert meta["vsini_line"] == "HeI4471"
    assert meta["vsini_method"].startswith("kernel fit, diffuse He I")
    assert meta["vsini"] == pytest.approx(150.0, rel=0.10)


def test_below_resolution_floor_gives_upper_limit():
    # 2.5 A FWHM: floor = c * 2.5 / lambda of the line used (Mg II 4481: 167 km/s);
    # 50 km/s cannot be resolved.
    meta = measure_spectrum(_rotating_spectrum(50.0, 2.5)).table.meta
    assert meta["vsini_line"] == "MgII4481"
    rest = line("MgII4481").wavelength("air")
    assert meta["vsini_floor"] == pytest.approx(resolution_floor(rest, 2.5))
    assert meta["vsini_floor"] == pytest.approx(C_KMS * 2.5 / rest)
    assert meta["vsini_upper_limit"]
    assert meta["vsini"] >= 50.0
    assert np.isnan(meta["vsini_err"])
    # a fast rotator at the same resolution is measured
    fast = measure_spectrum(_rotating_spectrum(300.0, 2.5)).table.meta
    assert not fast["vsini_upper_limit"]
    assert fast["vsini"] == pytest.approx(300.0, rel=0.15)


@pytest.mark.parametrize("vsini", [80.0, 150.0, 300.0])
def test_fourier_first_zero_on_noise_free_profile(vsini):
    w = np.arange(HEI - 15.0, HEI + 15.0, 0.02)
    flux = 1.0 - rotational(w, HEI, 0.1, vsini)
    assert vsini_fourier(w, flux, centre=HEI) == pytest.approx(vsini, rel=0.05)


# ----------------------------------------------------------------- combining line estimates
def test_combination_is_the_weighted_mean_with_the_larger_of_internal_and_external_error():
    est = [LineEstimate("a", 100.0, 10.0, 50.0), LineEstimate("b", 130.0, 20.0, 60.0)]
    res = combine_estimates(est, "test")
    # inverse-variance weights 1/100 and 1/400: mean (100*4 + 130) / 5 = 106 km/s
    assert res.vsini == pytest.approx(106.0, abs=1e-9)
    # internal 1/sqrt(1/100 + 1/400) = 8.94; external sqrt(sum w (v - m)^2 / (sum w)) = 12.0
    assert res.vsini_err == pytest.approx(12.0, abs=1e-9)
    assert not res.upper_limit and res.floor == 60.0
    assert res.line == "a,b" and res.method == "test"
    # with floors of 150 and 160 km/s: below the larger one, an upper limit at
    # max(floor, v + 2 err) = max(160, 130) = 160
    est = [LineEstimate("a", 100.0, 10.0, 150.0), LineEstimate("b", 130.0, 20.0, 160.0)]
    res = combine_estimates(est, "test")
    assert res.upper_limit and res.floor == 160.0 and res.vsini == 160.0
    assert np.isnan(res.vsini_err)


def test_combination_clips_a_line_far_from_the_others():
    est = [LineEstimate("a", 250.0, 20.0, 160.0), LineEstimate("b", 260.0, 20.0, 160.0),
           LineEstimate("c", 240.0, 20.0, 160.0), LineEstimate("d", 60.0, 15.0, 160.0)]
    res = combine_estimates(est, "test")
    assert res.line == "a,b,c"
    assert res.vsini == pytest.approx(250.0, abs=1e-9)
    assert not res.upper_limit


def test_the_mean_of_noisy_lines_is_not_biased_low_like_their_minimum():
    # five lines of a 200 km/s star, each measured with a 20 km/s Gaussian error (seeded
    # draws): the mean over 2000 stars stays at 200, the minimum lies ~1.16 sigma low (the
    # expected minimum of 5 standard normal draws, common practice)
    rng = np.random.default_rng(7)
    v = 200.0 + 20.0 * rng.normal(size=(2000, 5))
    means = [combine_estimates([LineEstimate(str(i), x, 20.0, 100.0) for i, x in
                                enumerate(row)], "t").vsini for row in v]
    assert np.mean(means) == pytest.approx(200.0, abs=1.0)
    assert np.mean(v.min(axis=1)) == pytest.approx(200.0 - 1.163 * 20.0, abs=1.5)


# -------------------------------------------- the package's own forward model (starlines.synth)
# The checks below are of the estimator against its own forward model: the spectra are
# starlines.synth.synthetic_spectrum (LTE line formation with Stark widths for He I, rotation
# by Gray's kernel, Gaussian instrument), so the expected v sin i is the synthetic input.
def _model_star(subtype, he, vsini, fwhm, step, snr=200.0, seed=11):
    from starlines.spectrum import ObservationMeta, Spectrum
    from starlines.synth import parameters_for_type, synthetic_spectrum

    teff, logg = parameters_for_type(subtype, "V")
    w = 3850.0 + step * np.arange(int(1200.0 / step) + 1)
    flux = synthetic_spectrum(w, teff=teff, logg=logg, he=he, vsini=vsini, rv=20.0,
                              resolution_fwhm=fwhm, medium="air")
    rng = np.random.default_rng(seed)
    flux = 1000.0 * (flux + rng.normal(0.0, 1.0 / snr, w.size))
    return Spectrum(w, flux, medium="air", meta=ObservationMeta(resolution_fwhm=fwhm))


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_helium_strong_slow_rotator_is_not_a_fast_rotator(seed):
    from starlines.flags import FAST_ROTATOR_VSINI

    # B2 V (subtype 12), He/H = 0.30, 60 km/s, 2.5 A FWHM, S/N 200 (the demo's FLD-205).
    # He I 4471 alone reads ~230 km/s here (its Stark and saturation width is not in the
    # kernel fit); the metal lines give an upper limit at the resolution floor.
    meta = measure_spectrum(_model_star(12.0, 0.30, 60.0, 2.5, 0.6, seed=seed)).table.meta
    assert meta["vsini_upper_limit"]
    assert meta["vsini"] < FAST_ROTATOR_VSINI
    # the limit is the floor c FWHM / lambda of a v sin i line (4089-5016 A: 149-183 km/s)
    # or, when a line reads above it, within 10 % of the floor
    assert C_KMS * 2.5 / 5016.0 <= meta["vsini_floor"] <= C_KMS * 2.5 / 4088.0
    assert meta["vsini"] <= 1.1 * meta["vsini_floor"]
    assert "HeI4471" not in meta["vsini_line"]


def test_helium_strong_slow_rotator_at_high_resolution_from_metal_lines():
    # same star at 0.5 A FWHM (floor ~33 km/s): the metal lines recover 60 km/s within 10 %
    # (measured 59-64 km/s over 10 noise seeds); He I 4471 alone reads ~150 km/s
    meta = measure_spectrum(_model_star(12.0, 0.30, 60.0, 0.5, 0.15)).table.meta
    assert not meta["vsini_upper_limit"]
    assert meta["vsini_method"].startswith("kernel fit, metal lines")
    assert meta["vsini"] == pytest.approx(60.0, rel=0.10)


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_fast_b_dwarf_recovered(seed):
    from starlines.flags import FAST_ROTATOR_VSINI

    # B1 V (subtype 11), He/H 0.10, 250 km/s, 2.5 A FWHM, S/N 200: recovered within 15 %
    # (measured 249-271 km/s over 10 seeds, mean 258: the He I s/p lines read ~3 % high)
    meta = measure_spectrum(_model_star(11.0, 0.10, 250.0, 2.5, 0.6, seed=seed)).table.meta
    assert not meta["vsini_upper_limit"]
    assert meta["vsini"] == pytest.approx(250.0, rel=0.15)
    assert meta["vsini"] > FAST_ROTATOR_VSINI
    assert "HeI4471" not in meta["vsini_line"]
