"""Readers: every layout is written here with known wavelengths and read back.

The expected wavelengths are the values written into the file (analytic: the WCS formula of
Greisen & Calabretta 2002, A&A 395, 1061, eq. 1 for linear axes; the IRAF DC-FLAG = 1 log10
convention, common practice; WAVE/AWAV meaning vacuum/air, Greisen et al. 2006, A&A 446,
747, table 1). Tolerance 0.01 Angstrom throughout.
"""

from __future__ import annotations

import numpy as np
import pytest
from astropy.io import fits

from starlines.errors import ConfigError, InputFormatError, StarlinesWarning
from starlines.readers import describe, merge_orders, read_spectra, read_spectrum

ATOL = 0.01  # Angstrom


def flux_for(wave):
    """Positive flux with an absorption line at H-gamma (4340.47 A air), for realism."""
    return 1.0 - 0.3 * np.exp(-0.5 * ((np.asarray(wave) - 4340.47) / 2.0) ** 2)


def write_image(path, n=3000, flux=None, **cards):
    hdu = fits.PrimaryHDU(flux_for(np.linspace(3900, 5400, n)) if flux is None else flux)
    for k, v in cards.items():
        hdu.header[k.replace("_", "-") if k in ("DC_FLAG",) else k] = v
    hdu.writeto(path)
    return path


# ----------------------------------------------------------------------------- FITS images
@pytest.mark.parametrize(
    "cards, first, step",
    [
        ({"CRVAL1": 3900.0, "CDELT1": 0.5, "CRPIX1": 1.0}, 3900.0, 0.5),
        ({"CRVAL1": 3950.0, "CDELT1": 0.5, "CRPIX1": 101.0}, 3900.0, 0.5),
        ({"CRVAL1": 3900.0, "CD1_1": 0.5, "CRPIX1": 1.0}, 3900.0, 0.5),
        ({"CRVAL1": 390.0, "CDELT1": 0.05, "CRPIX1": 1.0, "CUNIT1": "nm"}, 3900.0, 0.5),
        ({"CRVAL1": 3.9e-7, "CDELT1": 5e-11, "CRPIX1": 1.0, "CUNIT1": "m"}, 3900.0, 0.5),
        ({"CRVAL1": 3900.0, "CDELT1": 0.5, "CRPIX1": 1.0, "CUNIT1": "Angstrom"}, 3900.0, 0.5),
    ],
    ids=["crpix1", "crpix101", "cd1_1", "nm", "metre", "angstrom"],
)
def test_linear_wcs(tmp_path, cards, first, step):
    path = write_image(tmp_path / "lin.fits", **cards)
    (spec,) = read_spectra(path)
    expected = first + step * np.arange(3000)  # Greisen & Calabretta (2002) eq. 1
    np.testing.assert_allclose(spec.wavelength, expected, atol=ATOL, rtol=0)
    assert spec.label == ""


def test_linear_wcs_agrees_with_astropy_wcs(tmp_path):
    """astropy.wcs (a general reference library) converts WAVE in Angstrom to metres."""
    from astropy.wcs import WCS

    path = write_image(tmp_path / "w.fits", CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=4000.0,
                       CDELT1=0.37, CRPIX1=12.5)
    (spec,) = read_spectra(path)
    ref = WCS(fits.getheader(path)).pixel_to_world_values(np.arange(3000)) * 1e10
    np.testing.assert_allclose(spec.wavelength, ref, atol=ATOL, rtol=0)


def test_decreasing_wavelength_is_reversed(tmp_path):
    flux = flux_for(5399.5 - 0.5 * np.arange(3000))  # pixel i holds 5399.5 - 0.5 i
    path = write_image(tmp_path / "dec.fits", flux=flux, CRVAL1=5399.5, CDELT1=-0.5, CRPIX1=1.0)
    (spec,) = read_spectra(path)
    np.testing.assert_allclose(spec.wavelength, 3900.0 + 0.5 * np.arange(3000), atol=ATOL)
    # flux followed its pixel: the H-gamma dip is at 4340 A after reversal
    assert abs(spec.wavelength[np.argmin(spec.flux)] - 4340.47) < 0.5


def test_log_linear_iraf(tmp_path):
    """DC-FLAG = 1: CRVAL1/CDELT1 in log10 Angstrom (IRAF convention, common practice)."""
    crval, cdelt = np.log10(3900.0), 4.0e-5
    path = write_image(tmp_path / "log.fits", CRVAL1=crval, CDELT1=cdelt, CRPIX1=1.0,
                       DC_FLAG=1, CTYPE1="LINEAR")
    (spec,) = read_spectra(path)
    expected = 10 ** (crval + cdelt * np.arange(3000))
    np.testing.assert_allclose(spec.wavelength, expected, atol=ATOL, rtol=0)
    assert 3899.99 < spec.wavelength[0] < 3900.01


def test_wave_log_paper3(tmp_path):
    """CTYPE1 'WAVE-LOG': lambda = CRVAL exp(CDELT (p - CRPIX) / CRVAL), Greisen et al. 2006."""
    path = write_image(tmp_path / "wl.fits", CTYPE1="WAVE-LOG", CUNIT1="Angstrom",
                       CRVAL1=3900.0, CDELT1=0.4, CRPIX1=1.0)
    (spec,) = read_spectra(path)
    expected = 3900.0 * np.exp(0.4 * np.arange(3000) / 3900.0)
    np.testing.assert_allclose(spec.wavelength, expected, atol=ATOL, rtol=0)
    assert spec.medium == "vacuum"


def test_log10_values_without_flag_raise(tmp_path):
    path = write_image(tmp_path / "nolog.fits", CRVAL1=3.59, CDELT1=4e-5, CRPIX1=1.0)
    with pytest.raises(InputFormatError, match=r"nolog\.fits: .*log10.*DC-FLAG"):
        read_spectra(path)


@pytest.mark.parametrize(
    "ctype, medium",
    [("AWAV", "air"), ("WAVE", "vacuum")],  # Greisen et al. (2006) table 1
)
def test_ctype_medium(tmp_path, ctype, medium):
    path = write_image(tmp_path / "m.fits", CTYPE1=ctype, CUNIT1="Angstrom", CRVAL1=3900.0,
                       CDELT1=0.5, CRPIX1=1.0)
    (spec,) = read_spectra(path)
    assert (spec.medium, spec.medium_assumed) == (medium, False)
    np.testing.assert_allclose(spec.wavelength[0], 3900.0, atol=ATOL)


def test_medium_keywords_and_defaults(tmp_path, caplog):
    base = {"CRVAL1": 3900.0, "CDELT1": 0.5, "CRPIX1": 1.0}
    p1 = write_image(tmp_path / "vac.fits", AIRORVAC="vac", **base)
    assert read_spectra(p1)[0].medium == "vacuum"
    p2 = write_image(tmp_path / "sdss.fits", VACUUM=True, **base)
    assert read_spectra(p2)[0].medium == "vacuum"
    p3 = write_image(tmp_path / "none.fits", **base)
    with caplog.at_level("INFO", logger="starlines.readers"):
        spec = read_spectra(p3)[0]
    assert (spec.medium, spec.medium_assumed) == ("air", True)
    assert "medium not stated" in caplog.text
    spec = read_spectra(p3, default_medium="vacuum")[0]
    assert (spec.medium, spec.medium_assumed) == ("vacuum", True)
    spec = read_spectra(p1, medium="air")[0]  # the caller's word wins over the file
    assert (spec.medium, spec.medium_assumed) == ("air", False)
    with pytest.raises(ConfigError, match="medium must be one of"):
        read_spectra(p1, medium="water")


def test_flux_passed_raw_and_masked(tmp_path):
    flux = flux_for(np.linspace(3900, 5400, 3000))
    flux[100:120] = 0.0  # zero used as "no data"
    flux[200] = np.nan
    flux[300] = -0.5
    path = tmp_path / "mask.fits"
    hdu = fits.PrimaryHDU(flux)
    hdu.header.update(CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0)
    hdu.writeto(path)
    (spec,) = read_spectra(path)
    assert spec.mask[100:120].all() and spec.mask[200] and spec.mask[300]
    assert spec.mask.sum() == 22
    assert spec.flux[110] == 0.0 and spec.flux[300] == -0.5  # values untouched


def test_apall_band_cube_with_sigma(tmp_path):
    """IRAF apall output: (band, aperture, pixel) with BANDIDn naming the sigma band."""
    wave = 3900.0 + 0.5 * np.arange(3000)
    cube = np.stack([flux_for(wave), flux_for(wave) * 1.1, 0.01 + 0 * wave, 0.02 + 0 * wave])
    hdu = fits.PrimaryHDU(cube[:, None, :])
    hdu.header.update(CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0, BANDID1="spectrum - optimal",
                      BANDID2="spectrum - raw", BANDID3="background", BANDID4="sigma - x")
    hdu.writeto(tmp_path / "apall.fits")
    (spec,) = read_spectra(tmp_path / "apall.fits")
    np.testing.assert_allclose(spec.wavelength, wave, atol=ATOL)
    np.testing.assert_allclose(spec.flux, cube[0])
    np.testing.assert_allclose(spec.uncertainty, 0.02)


def test_wavelength_and_error_extensions(tmp_path):
    wave = np.linspace(390.0, 540.0, 2000)  # nm, stated by BUNIT of the WAVE extension
    hdul = fits.HDUList([
        fits.PrimaryHDU(),
        fits.ImageHDU(flux_for(wave * 10), name="FLUX"),
        fits.ImageHDU(np.full(wave.size, 4.0e4), name="IVAR"),
        fits.ImageHDU(wave, name="WAVE"),
    ])
    hdul[3].header["BUNIT"] = "nm"
    hdul.writeto(tmp_path / "ext.fits")
    (spec,) = read_spectra(tmp_path / "ext.fits")
    np.testing.assert_allclose(spec.wavelength, wave * 10, atol=ATOL)
    np.testing.assert_allclose(spec.uncertainty, 1 / np.sqrt(4.0e4))


# ----------------------------------------------------------------------------- multispec
def _wat_cards(header, key, text):
    """Write ``text`` into KEY_001, KEY_002... 68 characters per card (IRAF layout)."""
    for i in range(0, len(text), 68):
        header[f"{key}_{i // 68 + 1:03d}"] = text[i : i + 68]


def _multispec_text(specs):
    """WAT2 text where some 68-character card ends in a blank between two numbers."""
    body = " ".join(f'spec{n} = "{s}"' for n, s in enumerate(specs, start=1))
    for pad in range(80):
        text = "wtype=multispec" + " " * (1 + pad) + body
        cuts = [text[k - 1 : k + 1] for k in range(68, len(text), 68)]
        if any(c[0] == " " and c[1].isdigit() for c in cuts):
            return text
    raise AssertionError("could not place a blank at a card boundary")


def test_multispec_echelle(tmp_path):
    n = 1200
    orders = [
        # ap beam dtype w1 dw nw z aplow aphigh
        "1 62 0 4000.0 0.1 1200 0. 10.5 20.5",
        "2 61 0 4100.0 0.1 1150 0. 22.5 32.5",
        f"3 60 1 {np.log10(4300.0):.10f} 1.0e-5 1200 0. 34.5 44.5",
        "4 59 0 4450.0 0.1 1200 3.0e-4 46.5 56.5",
    ]
    text = _multispec_text(orders)
    data = np.vstack([flux_for(np.linspace(4000, 4600, n))] * 4)
    hdu = fits.PrimaryHDU(data)
    hdu.header["WAT0_001"] = "system=multispec"
    hdu.header["WAT1_001"] = "wtype=multispec label=Wavelength units=angstroms"
    _wat_cards(hdu.header, "WAT2", text)
    hdu.header["CTYPE1"] = "MULTISPE"
    hdu.writeto(tmp_path / "ech.fits")

    spectra = read_spectra(tmp_path / "ech.fits")
    assert [s.label for s in spectra] == ["order 62", "order 61", "order 60", "order 59"]
    p = np.arange(n)
    np.testing.assert_allclose(spectra[0].wavelength, 4000.0 + 0.1 * p, atol=ATOL)
    np.testing.assert_allclose(spectra[1].wavelength, 4100.0 + 0.1 * p[:1150], atol=ATOL)
    assert spectra[1].wavelength.size == 1150  # nw valid pixels only
    np.testing.assert_allclose(spectra[2].wavelength, 10 ** (np.log10(4300.0) + 1e-5 * p),
                               atol=ATOL)
    np.testing.assert_allclose(spectra[3].wavelength, (4450.0 + 0.1 * p) / (1 + 3.0e-4),
                               atol=ATOL)
    merged = read_spectrum(tmp_path / "ech.fits")
    assert np.all(np.diff(merged.wavelength) > 0)
    assert merged.wavelength[0] == pytest.approx(4000.0, abs=ATOL)
    assert merged.wavelength[-1] == pytest.approx(spectra[3].wavelength[-1], abs=ATOL)


def test_multispec_chebyshev(tmp_path):
    """dtype 2, Chebyshev order 2: lambda = w0 + c0 + c1 * (2p - (pmax + pmin)) / (pmax - pmin)."""
    n = 1000
    spec = f"1 1 2 4000. 0.1 {n} 0. 1. 10. 1. 4300. 1 2 1. {n}. 50. 100."
    hdu = fits.PrimaryHDU(flux_for(np.linspace(4250, 4450, n)))
    hdu.header["WAT0_001"] = "system=multispec"
    hdu.header["WAT1_001"] = "wtype=multispec label=Wavelength units=angstroms"
    _wat_cards(hdu.header, "WAT2", f'wtype=multispec spec1 = "{spec}"')
    hdu.writeto(tmp_path / "cheb.fits")
    (out,) = read_spectra(tmp_path / "cheb.fits")
    p = np.arange(1, n + 1)
    expected = 4300.0 + 50.0 + 100.0 * (2 * p - (n + 1.0)) / (n - 1.0)
    np.testing.assert_allclose(out.wavelength, expected, atol=ATOL)


# ----------------------------------------------------------------------------- binary tables
def test_table_columns_with_units(tmp_path):
    wave = np.linspace(390.0, 540.0, 1500)  # nm
    cols = [
        fits.Column("WAVELENGTH", "D", unit="nm", array=wave),
        fits.Column("FLUX", "E", unit="erg/(s cm2 Angstrom)", array=flux_for(wave * 10)),
        fits.Column("IVAR", "E", array=np.full(wave.size, 100.0)),
    ]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(
        tmp_path / "tab.fits")
    (spec,) = read_spectra(tmp_path / "tab.fits")
    np.testing.assert_allclose(spec.wavelength, wave * 10, atol=ATOL)
    np.testing.assert_allclose(spec.uncertainty, 0.1, rtol=1e-6)
    assert spec.flux_unit == "erg/(s cm2 Angstrom)"


def test_table_one_row_of_arrays(tmp_path):
    """Archive 1D-spectrum layout: one row, array columns WAVE/FLUX/ERR, TUNIT, SPECSYS."""
    n = 2500
    wave = 3900.0 + 0.6 * np.arange(n)
    cols = [
        fits.Column("WAVE", f"{n}D", unit="Angstrom", array=wave[None, :]),
        fits.Column("FLUX", f"{n}E", array=flux_for(wave)[None, :]),
        fits.Column("ERR", f"{n}E", array=np.full((1, n), 0.05)),
    ]
    table = fits.BinTableHDU.from_columns(cols)
    table.header["TCTYP1"] = "AWAV"
    primary = fits.PrimaryHDU()
    primary.header.update(OBJECT="HD 93129A", SPECSYS="BARYCENT", SPEC_RES=20000.0)
    fits.HDUList([primary, table]).writeto(tmp_path / "sdp.fits")
    (spec,) = read_spectra(tmp_path / "sdp.fits")
    np.testing.assert_allclose(spec.wavelength, wave, atol=ATOL)
    np.testing.assert_allclose(spec.uncertainty, 0.05, rtol=1e-6)
    assert (spec.medium, spec.medium_assumed) == ("air", False)
    assert spec.meta.object == "HD 93129A"
    assert spec.meta.frame == "barycentric"
    mid = 0.5 * (wave[0] + wave[-1])
    assert spec.meta.resolution_fwhm == pytest.approx(mid / 20000.0, abs=1e-4)  # FWHM = lambda/R


def test_table_rows_are_orders(tmp_path):
    n = 800
    waves = np.array([4000.0 + 0.1 * np.arange(n), 4075.0 + 0.1 * np.arange(n)])
    cols = [
        fits.Column("ORDER", "J", array=[71, 70]),
        fits.Column("WAVELENGTH", f"{n}D", unit="Angstrom", array=waves),
        fits.Column("FLUX", f"{n}E", array=flux_for(waves)),
    ]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(
        tmp_path / "rows.fits")
    spectra = read_spectra(tmp_path / "rows.fits")
    assert [s.label for s in spectra] == ["order 71", "order 70"]
    np.testing.assert_allclose(spectra[1].wavelength, waves[1], atol=ATOL)
    merged = merge_orders(spectra)
    assert merged.wavelength.size < 2 * n and np.all(np.diff(merged.wavelength) > 0)
    np.testing.assert_allclose(merged.wavelength[[0, -1]], [4000.0, waves[1, -1]], atol=ATOL)


def test_table_loglam_sdss_style(tmp_path):
    loglam = np.log10(3900.0) + 1e-4 * np.arange(1500)
    cols = [fits.Column("loglam", "E", array=loglam),
            fits.Column("flux", "E", array=flux_for(10**loglam))]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(
        tmp_path / "sdss.fits")
    (spec,) = read_spectra(tmp_path / "sdss.fits")
    # float32 log10 wavelengths: 1 ulp of 3.6 is 2.4e-7 dex = 0.002 A at 4000 A
    np.testing.assert_allclose(spec.wavelength, 10 ** loglam.astype(np.float32), atol=ATOL)


def test_table_without_unit_warns(tmp_path):
    wave = np.linspace(3900.0, 5400.0, 1000)
    cols = [fits.Column("WAVE", "D", array=wave), fits.Column("FLUX", "E", array=flux_for(wave))]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(
        tmp_path / "nounit.fits")
    with pytest.warns(StarlinesWarning, match="taken as Angstrom"):
        (spec,) = read_spectra(tmp_path / "nounit.fits")
    np.testing.assert_allclose(spec.wavelength, wave, atol=ATOL)


# ----------------------------------------------------------------------------- text
def _write(path, text):
    path.write_text(text)
    return path


def _rows(wave, *cols, fmt="{:.3f}", sep=" "):
    return "\n".join(sep.join(fmt.format(v) for v in row) for row in zip(wave, *cols)) + "\n"


def test_text_two_columns_angstrom_inferred(tmp_path):
    wave = 3900.0 + 0.7 * np.arange(2000)
    path = _write(tmp_path / "a.txt", _rows(wave, flux_for(wave)))
    with pytest.warns(StarlinesWarning, match="taken as Angstrom"):
        (spec,) = read_spectra(path)
    np.testing.assert_allclose(spec.wavelength, wave, atol=ATOL)
    assert spec.uncertainty is None and spec.medium_assumed


def test_text_nm_inferred(tmp_path):
    wave = 390.0 + 0.07 * np.arange(2000)
    path = _write(tmp_path / "b.dat", _rows(wave, flux_for(wave * 10)))
    with pytest.warns(StarlinesWarning, match="taken as nm"):
        (spec,) = read_spectra(path)
    np.testing.assert_allclose(spec.wavelength, wave * 10, atol=ATOL)


def test_text_ambiguous_unit_raises(tmp_path):
    wave = 1500.0 + 2.0 * np.arange(2000)  # 1500-5500: neither all-Angstrom nor all-nm
    path = _write(tmp_path / "amb.txt", _rows(wave, 1.0 + 0 * wave))
    with pytest.raises(InputFormatError, match=r"amb\.txt: wavelength unit not stated"):
        read_spectra(path)
    (spec,) = read_spectra(path, wavelength_unit="Angstrom")
    np.testing.assert_allclose(spec.wavelength[0], 1500.0, atol=ATOL)


def test_csv_with_header_line_and_error(tmp_path):
    wave = 390.0 + 0.05 * np.arange(2500)
    text = "wavelength [nm],flux,error\n" + _rows(wave, flux_for(wave * 10), 0.02 + 0 * wave,
                                                  sep=",")
    (spec,) = read_spectra(_write(tmp_path / "c.csv", text))
    np.testing.assert_allclose(spec.wavelength, wave * 10, atol=ATOL)
    np.testing.assert_allclose(spec.uncertainty, 0.02)


def test_text_comment_unit_medium_and_cards(tmp_path):
    wave = 4000.0 + 0.5 * np.arange(1500)
    head = ("# OBJECT = HD 46223\n# AIRORVAC = vac\n# EXPTIME = 900\n"
            "# wave(Angstrom)  flux\n")
    (spec,) = read_spectra(_write(tmp_path / "d.txt", head + _rows(wave, flux_for(wave))))
    np.testing.assert_allclose(spec.wavelength, wave, atol=ATOL)
    assert (spec.medium, spec.medium_assumed) == ("vacuum", False)
    assert spec.meta.object == "HD 46223" and spec.meta.exptime == 900.0


def test_text_wavelength_unit_argument(tmp_path):
    wave = 0.39 + 1e-4 * np.arange(1500)  # micron
    path = _write(tmp_path / "um.txt", _rows(wave, flux_for(wave * 1e4), fmt="{:.6f}"))
    (spec,) = read_spectra(path, wavelength_unit="um")
    np.testing.assert_allclose(spec.wavelength, wave * 1e4, atol=ATOL)


def test_unknown_extension_is_sniffed(tmp_path):
    wave = 3900.0 + 0.7 * np.arange(2000)
    txt = _write(tmp_path / "star.spec", "# lambda [A] flux\n" + _rows(wave, flux_for(wave)))
    np.testing.assert_allclose(read_spectra(txt)[0].wavelength, wave, atol=ATOL)
    fit = write_image(tmp_path / "star.xyz", CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0)
    np.testing.assert_allclose(read_spectra(fit)[0].wavelength[-1], 5399.5, atol=ATOL)


def test_describe(tmp_path):
    path = write_image(tmp_path / "desc.fits", CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0,
                       OBJECT="HD 12345")
    text = describe(read_spectra(path)[0])
    assert "3900.0-5399.5 A" in text and "3000 px" in text and "air (assumed)" in text
    assert "HD 12345" in text and "topocentric" in text and "\n" not in text


def test_gzipped_fits_and_text(tmp_path):
    import gzip

    plain = write_image(tmp_path / "z.fits", CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0)
    gz = tmp_path / "z.fits.gz"
    gz.write_bytes(gzip.compress(plain.read_bytes()))
    np.testing.assert_allclose(read_spectra(gz)[0].wavelength[-1], 5399.5, atol=ATOL)
    wave = 3900.0 + 0.7 * np.arange(2000)
    tgz = tmp_path / "t.txt.gz"
    tgz.write_bytes(gzip.compress(("# wavelength [Angstrom] flux\n" + _rows(
        wave, flux_for(wave))).encode()))
    np.testing.assert_allclose(read_spectra(tgz)[0].wavelength, wave, atol=ATOL)


def test_text_named_columns_any_order(tmp_path):
    wave = 3900.0 + 0.7 * np.arange(2000)
    text = "# pixel flux_norm sigma wavelength_nm\n" + _rows(
        np.arange(2000), flux_for(wave), 0.01 + 0 * wave, wave / 10, fmt="{:.5f}")
    (spec,) = read_spectra(_write(tmp_path / "named.txt", text))
    np.testing.assert_allclose(spec.wavelength, wave, atol=ATOL)
    np.testing.assert_allclose(spec.uncertainty, 0.01)


def test_text_ragged_rows_raise(tmp_path):
    path = _write(tmp_path / "ragged.txt", "4000 1.0\n4001 1.0 0.1\n")
    with pytest.raises(InputFormatError, match=r"ragged\.txt: line 2 has a different number"):
        read_spectra(path)


def test_merge_of_overlapping_fibers_picks_one(tmp_path):
    n = 2000
    wave = np.vstack([3900.0 + 0.5 * np.arange(n)] * 2)
    flux = flux_for(wave)
    flux[1, :1500] = np.nan  # fiber 2 mostly empty
    cols = [fits.Column("WAVE", f"{n}D", unit="Angstrom", array=wave),
            fits.Column("FLUX", f"{n}E", array=flux)]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(
        tmp_path / "fibers.fits")
    spectra = read_spectra(tmp_path / "fibers.fits")
    assert [s.label for s in spectra] == ["row 1", "row 2"]
    assert read_spectrum(tmp_path / "fibers.fits").label == "row 1"


def test_explicit_medium_keyword_beats_ctype(tmp_path, caplog):
    path = write_image(tmp_path / "conf.fits", CTYPE1="WAVE", CUNIT1="Angstrom", AIRORVAC="air",
                       CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0)
    with caplog.at_level("WARNING", logger="starlines.readers"):
        (spec,) = read_spectra(path)
    assert (spec.medium, spec.medium_assumed) == ("air", False)
    assert "contradicts" in caplog.text
