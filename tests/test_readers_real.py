"""Real library spectra (../shared/reference-spectra, not in the repository) and a comparison
with specutils, the general-purpose reader, on the layouts where it reads correctly.

Expected first-pixel wavelengths and steps are the values stated in the folder README
(MILES: CRVAL1 = 3540.5, CDELT1 = 0.9; Pickles: 1150-10620 A in 5 A steps; Jacoby
regridded: 3510.0 + 1.4 i A; Jacoby CSV: 349.70 nm + 0.14 i nm, i.e. 3497.0 + 1.4 i A).
"""

from __future__ import annotations

import glob
import os
import warnings

import numpy as np
import pytest
from astropy.io import fits

from starlines.readers import read_spectra

ATOL = 0.01  # Angstrom
ROOT = os.environ.get("STARLINES_REFERENCE_SPECTRA", "/work/shared/reference-spectra")


def _files(pattern):
    files = sorted(glob.glob(os.path.join(ROOT, pattern)))
    if not files:
        pytest.skip(f"reference spectra not available ({os.path.join(ROOT, pattern)} absent)")
    return files


def test_miles_linear_wcs():
    for path in _files("miles/*.fits"):
        (spec,) = read_spectra(path)
        np.testing.assert_allclose(spec.wavelength, 3540.5 + 0.9 * np.arange(4300), atol=ATOL)
        assert spec.meta.resolution_fwhm == pytest.approx(2.5)  # header FWHM = 2.5 (README)
        assert spec.medium_assumed  # MILES headers do not state air/vacuum (README)


def test_pickles_binary_table():
    for path in _files("pickles1998/pickles_*.fits"):
        (spec,) = read_spectra(path)
        assert spec.wavelength[0] == pytest.approx(1150.0, abs=ATOL)
        assert spec.wavelength[-1] == pytest.approx(10620.0, abs=ATOL)
        np.testing.assert_allclose(np.diff(spec.wavelength), 5.0, atol=ATOL)
        assert spec.flux_unit == "flam"


def test_pickles_index_table_is_not_a_spectrum():
    (index,) = _files("pickles1998/pickles.fits")
    from starlines.errors import InputFormatError

    with pytest.raises(InputFormatError, match="no spectrum in any HDU"):
        read_spectra(index)


def test_jacoby_regridded_text():
    for path in _files("jacoby1984/regridded/*_jacoby_regridded.txt"):
        (spec,) = read_spectra(path)  # unit from the 'wavelength_angstrom' column name
        np.testing.assert_allclose(spec.wavelength, 3510.0 + 1.4 * np.arange(2799), atol=ATOL)


def test_jacoby_csv_in_nm():
    for path in _files("jacoby1984/*-Jacoby-spec.csv"):
        (spec,) = read_spectra(path)  # '# Wavelength [nm]' comment line
        np.testing.assert_allclose(spec.wavelength, 3497.0 + 1.4 * np.arange(2819), atol=ATOL)


# ----------------------------------------------------------------------------- specutils
@pytest.fixture(scope="module")
def specutils_spectrum():
    pytest.importorskip("specutils")
    from specutils import Spectrum

    return Spectrum


def _specutils_read(cls, path, fmt):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # specutils warns about missing units/WCS details
        return cls.read(path, format=fmt)


def test_specutils_agrees_on_miles(specutils_spectrum):
    (path,) = _files("miles/MILES_res2.50_star_m0011V.fits")
    ref = _specutils_read(specutils_spectrum, path, "wcs1d-fits")
    (spec,) = read_spectra(path)
    np.testing.assert_allclose(spec.wavelength, ref.spectral_axis.to_value("Angstrom"),
                               atol=ATOL)
    np.testing.assert_allclose(spec.flux, ref.flux.value)


def test_specutils_ctype_wave_in_metres(tmp_path, specutils_spectrum):
    """specutils returns a CTYPE1 = WAVE axis in metres; converted, it agrees with ours."""
    hdu = fits.PrimaryHDU(np.ones(3000))
    hdu.header.update(CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0)
    hdu.writeto(tmp_path / "wave.fits")
    ref = _specutils_read(specutils_spectrum, tmp_path / "wave.fits", "wcs1d-fits")
    (spec,) = read_spectra(tmp_path / "wave.fits")
    np.testing.assert_allclose(spec.wavelength, ref.spectral_axis.to_value("Angstrom"),
                               atol=ATOL)
    assert spec.medium == "vacuum"
