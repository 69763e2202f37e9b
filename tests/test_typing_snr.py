"""No type below a usable S/N in the classification region (the issue's "very low S/N: a
flag and no forced type").

Threshold: starlines.flags.MIN_TYPING_SNR, from the pixel-sum EW error sigma(EW) ~ 1.6 A /
(S/N) at ~0.5 A pixels and 2.5 A resolution (criteria.md section 7a) against the ~0.1-0.3 A
weak lines the type ratios need (common practice). Spectra are the package's forward model
(starlines.synth) of a B0.5 V star (Teff 29000 K, Pecaut & Mamajek 2013 Table 5; log g 4.0
from memory) with noise of a known level: white, or white noise smoothed over 5 pixels
(the correlated noise of a resampled spectrum, which DER_SNR underestimates).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from starlines.classify import classify
from starlines.flags import MIN_TYPING_SNR
from starlines.measure import measure_spectrum
from starlines.spectrum import Spectrum
from starlines.synth import synthetic_spectrum

WAVE = np.arange(3900.0, 5000.0, 0.5)
FLUX = synthetic_spectrum(WAVE, teff=29000.0, logg=4.0, he=0.1, vsini=80.0,
                          resolution_fwhm=2.5)


def _classify(noise: np.ndarray):
    spec = Spectrum(wavelength=WAVE.copy(), flux=FLUX + noise, medium="air",
                    path="synthetic B0.5 V")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = measure_spectrum(spec)
        return m, classify(m)


def _white(snr: float, seed: int = 5) -> np.ndarray:
    return np.random.default_rng(seed).normal(0.0, 1.0 / snr, WAVE.size)


def _correlated(snr: float, width: int = 5, seed: int = 5) -> np.ndarray:
    # white noise smoothed by a boxcar of `width` pixels, rescaled to rms 1 / snr
    n = np.convolve(_white(1.0, seed), np.ones(width) / width, mode="same")
    return n / np.std(n) / snr


@pytest.mark.parametrize("snr", [40.0, 150.0])
def test_usable_spectra_are_typed_and_their_region_snr_is_right(snr):
    m, c = _classify(_white(snr))
    region = m.table.meta["snr_typing_region"]
    assert region == pytest.approx(snr, rel=0.3)        # the injected S/N
    assert math.isfinite(c.subtype) and abs(c.subtype - 10.5) <= 1.0  # input B0.5
    assert ("low-snr" in c.flags) == (snr < 50)


@pytest.mark.parametrize("noise", [_white(5.0), _correlated(7.0)], ids=["white", "correlated"])
def test_noise_dominated_spectra_get_no_type(noise):
    m, c = _classify(noise)
    assert m.table.meta["snr_typing_region"] < MIN_TYPING_SNR
    assert math.isnan(c.subtype) and c.sptype == ""
    assert "low-snr" in c.flags and "no type" in c.notes


def test_correlated_noise_is_caught_by_the_fit_residuals():
    # injected S/N 7 smoothed over 5 pixels: DER_SNR reads ~13 (above the threshold), the
    # line fits' reduced chi-square brings the region's S/N below it
    m, _ = _classify(_correlated(7.0))
    assert m.table.meta["snr"] > MIN_TYPING_SNR
    assert m.table.meta["snr_typing_region"] < MIN_TYPING_SNR
