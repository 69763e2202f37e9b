"""Bad input: every failure is an InputFormatError naming the file and the cause in one line."""

from __future__ import annotations

import numpy as np
import pytest
from astropy.io import fits

from starlines.errors import InputFormatError
from starlines.readers import read_spectra, read_spectrum


def _image(path, flux=None, **cards):
    flux = np.ones(3000) if flux is None else flux
    hdu = fits.PrimaryHDU(flux)
    hdu.header.update(cards)
    hdu.writeto(path)
    return path


def _fails(path, pattern, **kw):
    """Read ``path``; the error must name the file, match ``pattern`` and be one line."""
    with pytest.raises(InputFormatError) as info:
        read_spectra(path, **kw)
    message = str(info.value)
    assert message.startswith(str(path) + ": "), message
    assert "\n" not in message
    assert pytest.importorskip("re").search(pattern, info.value.reason), message
    return info.value


def test_missing_file(tmp_path):
    _fails(tmp_path / "nothere.fits", "no such file")


def test_directory(tmp_path):
    _fails(tmp_path, "is a directory")


def test_empty_file(tmp_path):
    path = tmp_path / "empty.fits"
    path.write_bytes(b"")
    _fails(path, "empty file")


def test_garbage_with_fits_extension(tmp_path):
    path = tmp_path / "garbage.fits"
    path.write_bytes(np.random.default_rng(1).bytes(5000))
    _fails(path, "not a FITS file")


def test_garbage_binary_without_extension(tmp_path):
    path = tmp_path / "garbage.bin"
    path.write_bytes(np.random.default_rng(2).bytes(5000))
    _fails(path, "neither FITS nor text")


def test_text_that_is_not_a_table(tmp_path):
    path = tmp_path / "notes.txt"
    path.write_text("observing log\nclouds after midnight\n")
    _fails(path, "line 2 is not numeric")


def test_truncated_fits(tmp_path):
    full = _image(tmp_path / "full.fits", np.ones(20000), CRVAL1=3900.0, CDELT1=0.1)
    data = full.read_bytes()
    cut = tmp_path / "cut.fits"
    cut.write_bytes(data[: len(data) // 2])
    _fails(cut, "truncated")
    header_only = tmp_path / "cut2.fits"
    header_only.write_bytes(data[:1000])  # not even a full header block
    _fails(header_only, "not a readable FITS file")


def test_empty_hdu(tmp_path):
    path = tmp_path / "nodata.fits"
    fits.PrimaryHDU().writeto(path)
    _fails(path, "no spectrum in any HDU")


def test_missing_wavelength_solution(tmp_path):
    _fails(_image(tmp_path / "nowcs.fits"), "no wavelength solution")


def test_zero_dispersion(tmp_path):
    _fails(_image(tmp_path / "zero.fits", CRVAL1=4000.0, CDELT1=0.0), "no wavelength solution")


def test_non_monotonic_table(tmp_path):
    wave = 3900.0 + 0.5 * np.arange(2000)
    wave[700], wave[701] = wave[701], wave[700]
    cols = [fits.Column("WAVE", "D", unit="Angstrom", array=wave),
            fits.Column("FLUX", "E", array=np.ones(2000))]
    path = tmp_path / "shuffled.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(path)
    _fails(path, r"not monotonic \(pixel 701")


def test_all_nan_wavelengths(tmp_path):
    cols = [fits.Column("WAVE", "D", unit="Angstrom", array=np.full(100, np.nan)),
            fits.Column("FLUX", "E", array=np.ones(100))]
    path = tmp_path / "nanwave.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(path)
    _fails(path, "no wavelength solution")


def test_table_without_flux_column(tmp_path):
    cols = [fits.Column("WAVE", "D", unit="Angstrom", array=np.arange(100.0) + 4000),
            fits.Column("FOO", "E", array=np.ones(100))]
    path = tmp_path / "noflux.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(path)
    _fails(path, "no flux column")


def test_all_nan_flux(tmp_path):
    path = _image(tmp_path / "allnan.fits", np.full(3000, np.nan), CRVAL1=3900.0, CDELT1=0.5)
    _fails(path, "no usable flux")


def test_all_zero_flux(tmp_path):
    path = _image(tmp_path / "zeros.fits", np.zeros(3000), CRVAL1=3900.0, CDELT1=0.5)
    _fails(path, "no usable flux")


def test_range_without_classification_lines(tmp_path):
    path = _image(tmp_path / "red.fits", CRVAL1=6000.0, CDELT1=0.5, CRPIX1=1.0)
    err = _fails(path, "covers 6000-7500 A, none of the classification lines")
    assert "He I 4471" in err.reason or "HeI" in err.reason or "4471" in err.reason
    # the check can be switched off for other uses
    assert read_spectra(path, check_coverage=False)[0].wavelength[0] == 6000.0


def test_line_too_close_to_the_edge_is_not_covered(tmp_path):
    # 4683.7-4783.6 A: He II 4685.7 (air) only 2 A inside the edge, less than the 5 A margin
    path = _image(tmp_path / "edge.fits", np.ones(1000), CRVAL1=4683.7, CDELT1=0.1)
    _fails(path, "none of the classification lines")


def test_wrong_shape_image(tmp_path):
    path = _image(tmp_path / "img2d.fits", np.ones((50, 3000)), CRVAL1=3900.0, CDELT1=0.5)
    _fails(path, "not a 1D spectrum")


def test_unreadable_multispec(tmp_path):
    hdu = fits.PrimaryHDU(np.ones((2, 500)))
    hdu.header["WAT0_001"] = "system=multispec"
    hdu.header["WAT1_001"] = "wtype=multispec label=Wavelength units=angstroms"
    hdu.header["WAT2_001"] = 'wtype=multispec spec1 = "1 1 2 4000. 0.1 500 0. 1. 2. 1. 0. 3 4'
    hdu.header["WAT2_002"] = ' 1. 500. 1. 2. 3. 4. 5. 6. 7."'
    path = tmp_path / "spline.fits"
    hdu.writeto(path)
    _fails(path, "multispec wavelength solution unusable.*spline")


def test_multi_order_drops_bad_orders_but_keeps_good(tmp_path):
    n = 500
    data = np.ones((2, n))
    data[1] = np.nan
    hdu = fits.PrimaryHDU(data)
    hdu.header["WAT0_001"] = "system=multispec"
    hdu.header["WAT1_001"] = "wtype=multispec label=Wavelength units=angstroms"
    hdu.header["WAT2_001"] = (f'wtype=multispec spec1 = "1 5 0 4300. 0.2 {n} 0. 1. 2." '
                              'spec2 = "2 4 0 4400. 0.2 500')
    hdu.header["WAT2_002"] = ' 0. 3. 4."'
    path = tmp_path / "twoorders.fits"
    hdu.writeto(path)
    spectra = read_spectra(path)
    assert [s.label for s in spectra] == ["order 5"]
    assert read_spectrum(path).label == "order 5"


def test_wrong_default_medium(tmp_path):
    from starlines.errors import ConfigError

    with pytest.raises(ConfigError, match="default_medium must be one of"):
        read_spectra(tmp_path / "x.fits", default_medium="vac")
