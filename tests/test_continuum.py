"""Continuum placement and DER_SNR, on injected spectra (the injected values are the reference)."""

import warnings

import numpy as np
import pytest
from linesynth import b_star_lines, hot_continuum, make_spectrum

from starlines.continuum import fit_continuum
from starlines.errors import MeasurementError
from starlines.measure import measure_lines
from starlines.snr import der_snr, der_snr_noise
from starlines.spectrum import Spectrum

W = np.arange(3850.0, 5500.0, 0.5)  # 3850-5500 A at 0.5 A/pixel
HGAMMA = 4340.47  # air, criteria.md 5b [computed-H]


def _window_ew(w, norm, centre, half):
    sel = (w > centre - half) & (w < centre + half)
    return float(np.trapezoid(1.0 - norm[sel], w[sel]))


@pytest.mark.parametrize("snr", [50.0, 200.0])
def test_der_snr_recovers_injected_noise(snr):
    # Reference: the injected Gaussian noise; estimator of Stoehr et al. (2008).
    rng = np.random.default_rng(3)
    cont = hot_continuum(W)
    flux = cont + rng.normal(0.0, 1.0, W.size) * np.median(cont) / snr
    assert der_snr(flux) == pytest.approx(snr, rel=0.06)
    assert der_snr_noise(flux / np.median(cont)) == pytest.approx(1.0 / snr, rel=0.06)


def test_der_snr_edge_cases():
    assert np.isnan(der_snr(np.ones(5)))
    assert der_snr(np.ones(100)) == np.inf


def test_hgamma_ew_survives_sloped_curved_continuum():
    # Injected: Voigt Balmer lines (Lorentzian wings) on a steep blue, curved continuum.
    norm, ews, _ = b_star_lines(W)
    spec = make_spectrum(W, norm, hot_continuum(W), snr=200.0, resolution=2.5)
    cf = fit_continuum(spec)
    injected = _window_ew(W, norm, HGAMMA, 30.0)
    ours = _window_ew(W, cf.normalized, HGAMMA, 30.0)
    assert ours == pytest.approx(injected, rel=0.03)
    # the full measurement (profile area, wings included) against the injected total EW
    tab = measure_lines(spec, continuum=cf, lines=["HI4340"])
    assert tab["ew"][0].value == pytest.approx(ews["HI4340"], rel=0.03)

    # A straightforward default loses far more: specutils' generic continuum fitter and a
    # plain cubic over all pixels are dragged down by the Balmer wings (measured here:
    # about -23 % for both; the issue quotes ~30 % for such defaults).
    import astropy.units as u
    from specutils import Spectrum as SuSpectrum
    from specutils.fitting import fit_generic_continuum

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = fit_generic_continuum(SuSpectrum(flux=spec.flux * u.Jy,
                                                 spectral_axis=W * u.AA))
    generic = _window_ew(W, spec.flux / model(W * u.AA).value, HGAMMA, 30.0)
    cubic = np.polyval(np.polyfit(W, spec.flux, 3), W)
    plain = _window_ew(W, spec.flux / cubic, HGAMMA, 30.0)
    for default in (generic, plain):
        loss = 1.0 - default / injected
        assert loss > 0.15
        assert loss > 5.0 * abs(ours / injected - 1.0)


def test_quality_figures_and_snr():
    norm, _, _ = b_star_lines(W)
    spec = make_spectrum(W, norm, hot_continuum(W), snr=100.0, resolution=2.5)
    cf = fit_continuum(spec)
    assert cf.scatter == pytest.approx(0.01, rel=0.15)  # injected noise 1/100
    assert cf.snr == pytest.approx(100.0, rel=0.1)
    assert cf.snr_source == "DER_SNR"
    assert 0.3 < cf.fraction_kept < 0.95
    assert not cf.already_normalized
    assert cf.reference_line == "HeI4471"
    # statistical error on the continuum pixels, growing (at most 3 scatter) across gaps
    assert np.median(cf.continuum_err[cf.kept]) < 0.2 * cf.scatter
    assert np.all(cf.continuum_err <= 3.01 * cf.scatter)
    # the continuum itself within 1 % of the injected one away from the blue end
    inj = hot_continuum(W)
    sel = W > 3950
    assert np.max(np.abs(cf.continuum[sel] / inj[sel] - 1.0)) < 0.01


def test_uncertainty_array_sets_snr():
    norm, _, _ = b_star_lines(W)
    spec = make_spectrum(W, norm, hot_continuum(W), snr=80.0, with_err=True, resolution=2.5)
    cf = fit_continuum(spec)
    assert cf.snr_source == "uncertainty"
    assert cf.snr == pytest.approx(80.0, rel=0.05)


def test_already_normalized_is_recognised():
    norm, _, _ = b_star_lines(W)
    spec = make_spectrum(W, norm, None, snr=150.0, resolution=2.5)
    cf = fit_continuum(spec)
    assert cf.already_normalized
    np.testing.assert_allclose(cf.continuum, 1.0)


def test_windows_widen_for_fast_rotators():
    # Gaussian lines of FWHM 9 A (about v sin i 300 km/s at 2.5 A resolution)
    norm, _, _ = b_star_lines(W, fwhm=9.0)
    spec = make_spectrum(W, norm, hot_continuum(W), snr=200.0, resolution=2.5)
    cf = fit_continuum(spec)
    assert cf.line_fwhm == pytest.approx(9.0, rel=0.2)
    ours = _window_ew(W, cf.normalized, HGAMMA, 30.0)
    assert ours == pytest.approx(_window_ew(W, norm, HGAMMA, 30.0), rel=0.03)


def test_low_resolution_flux_calibrated():
    # 15 A FWHM, 1.4 A pixels (like an old spectrophotometric library)
    w = np.arange(3600.0, 7000.0, 1.4)
    norm, ews, _ = b_star_lines(w, fwhm=15.0)
    spec = make_spectrum(w, norm, hot_continuum(w), snr=150.0, resolution=15.0)
    cf = fit_continuum(spec)
    assert _window_ew(w, cf.normalized, HGAMMA, 45.0) == pytest.approx(
        _window_ew(w, norm, HGAMMA, 45.0), rel=0.05)


def test_too_few_pixels_is_a_measurement_error():
    w = np.arange(4400.0, 4460.0, 0.5)
    flux = np.ones(w.size)
    flux[15:] = np.nan
    with pytest.raises(MeasurementError, match="usable pixels"):
        fit_continuum(Spectrum(w, flux, path="x.fits"))
