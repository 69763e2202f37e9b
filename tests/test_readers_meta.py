"""Header metadata -> ObservationMeta, checked against astropy (time, angles, geodesy)."""

from __future__ import annotations

import numpy as np
import pytest
from astropy.io import fits

from starlines.errors import InputFormatError, StarlinesWarning
from starlines.headers_coords import iso_to_mjd, parse_angle
from starlines.readers import read_spectra


def _read(tmp_path, cards, comments=None):
    hdu = fits.PrimaryHDU(np.ones(3000))
    hdu.header.update(CRVAL1=3900.0, CDELT1=0.5, CRPIX1=1.0)
    for key, value in cards.items():
        hdu.header[key] = (value, (comments or {}).get(key, ""))
    path = tmp_path / "meta.fits"
    hdu.writeto(path, overwrite=True)
    return read_spectra(path)[0].meta


# ----------------------------------------------------------------------------- angles, dates
@pytest.mark.parametrize(
    "text, hours, ref",
    [("05:35:17.3", True, "5h35m17.3s"), ("-05:23:28", False, "-5d23m28s"),
     ("-00 30 00", False, "-0d30m0s"), ("12 30", True, "12h30m"), ("83.5", False, "83.5d")],
)
def test_parse_angle_matches_astropy(text, hours, ref):
    from astropy.coordinates import Angle

    assert parse_angle(text, hours=hours) == pytest.approx(Angle(ref).deg, abs=1e-9)


@pytest.mark.parametrize(
    "text", ["2024-03-05T22:10:30.25", "2024-03-05", "1999-12-31T23:59:59", "2016-02-29T00:00"]
)
def test_iso_to_mjd_matches_astropy(text):
    from astropy.time import Time

    mjd, _ = iso_to_mjd(text)
    assert mjd == pytest.approx(Time(text, scale="utc").mjd, abs=1e-8)  # 1 ms


def test_old_fits_date():
    from astropy.time import Time

    assert iso_to_mjd("05/03/95")[0] == pytest.approx(Time("1995-03-05").mjd, abs=1e-9)


# ----------------------------------------------------------------------------- time
def test_date_obs_plus_ut_plus_half_exposure(tmp_path):
    from astropy.time import Time

    meta = _read(tmp_path, {"DATE-OBS": "2024-03-05", "UT": "22:10:30", "EXPTIME": 600.0})
    assert meta.mjd_mid == pytest.approx(Time("2024-03-05T22:15:30").mjd, abs=1e-7)
    assert meta.exptime == 600.0


def test_mjd_obs_and_date_avg_preference(tmp_path):
    from astropy.time import Time

    meta = _read(tmp_path, {"MJD-OBS": 60374.5, "EXPTIME": 1200.0})
    assert meta.mjd_mid == pytest.approx(60374.5 + 600 / 86400, abs=1e-9)
    meta = _read(tmp_path, {"MJD-OBS": 60374.5, "EXPTIME": 1200.0,
                            "DATE-AVG": "2024-03-06T12:05:00"})
    assert meta.mjd_mid == pytest.approx(Time("2024-03-06T12:05:00").mjd, abs=1e-8)
    meta = _read(tmp_path, {"MJD-OBS": 60374.5, "EXPTIME": 1200.0, "MJD-MID": 60374.52})
    assert meta.mjd_mid == pytest.approx(60374.52, abs=1e-9)


def test_eso_utc_in_seconds(tmp_path):
    """ESO writes UTC as seconds after midnight (comment says so); DATE-OBS has the day."""
    from astropy.time import Time

    meta = _read(tmp_path, {"DATE-OBS": "2023-11-02", "UTC": 3600.0 * 3 + 45.0,
                            "EXPTIME": 60.0}, {"UTC": "03:00:45.000 UTC at start (sec)"})
    assert meta.mjd_mid == pytest.approx(Time("2023-11-02T03:01:15").mjd, abs=1e-8)


def test_tt_timescale_converted(tmp_path):
    from astropy.time import Time

    meta = _read(tmp_path, {"MJD-OBS": 60000.0, "TIMESYS": "TT"})
    assert meta.mjd_mid == pytest.approx(Time(60000.0, format="mjd", scale="tt").utc.mjd,
                                         abs=1e-9)


# ----------------------------------------------------------------------------- position
def test_sexagesimal_radec(tmp_path):
    from astropy.coordinates import SkyCoord

    meta = _read(tmp_path, {"OBJECT": "HD 37022", "RA": "05:35:16.46", "DEC": "-05:23:22.8",
                            "RADESYS": "FK5", "EQUINOX": 2000.0})
    ref = SkyCoord("05h35m16.46s", "-05d23m22.8s")
    assert meta.object == "HD 37022"
    assert meta.ra_deg == pytest.approx(ref.ra.deg, abs=1e-7)
    assert meta.dec_deg == pytest.approx(ref.dec.deg, abs=1e-7)


def test_degree_radec_and_fk4(tmp_path):
    from astropy.coordinates import FK4, SkyCoord

    meta = _read(tmp_path, {"RA": 83.8186, "DEC": -5.3897})
    assert (meta.ra_deg, meta.dec_deg) == pytest.approx((83.8186, -5.3897))
    meta = _read(tmp_path, {"RA": 83.2, "DEC": -5.4, "RADESYS": "FK4", "EQUINOX": 1950.0})
    ref = SkyCoord(83.2, -5.4, unit="deg", frame=FK4(equinox="B1950")).icrs
    assert meta.ra_deg == pytest.approx(ref.ra.deg, abs=1e-6)
    assert meta.dec_deg == pytest.approx(ref.dec.deg, abs=1e-6)


# ----------------------------------------------------------------------------- site
def test_obsgeo_xyz_matches_astropy(tmp_path):
    from astropy import units as u
    from astropy.coordinates import EarthLocation

    ref = EarthLocation.from_geodetic(-70.7346 * u.deg, -29.2563 * u.deg, 2400.0 * u.m)
    x, y, z = (float(v.to_value(u.m)) for v in ref.geocentric)
    meta = _read(tmp_path, {"OBSGEO-X": x, "OBSGEO-Y": y, "OBSGEO-Z": z})
    assert meta.site_lon_deg == pytest.approx(-70.7346, abs=1e-7)
    assert meta.site_lat_deg == pytest.approx(-29.2563, abs=1e-7)
    assert meta.site_height_m == pytest.approx(2400.0, abs=1e-3)


def test_obsgeo_blh_and_name(tmp_path):
    meta = _read(tmp_path, {"OBSGEO-B": 28.7606, "OBSGEO-L": -17.8816, "OBSGEO-H": 2332.0,
                            "OBSERVAT": "ORM", "TELESCOP": "NOT"})
    assert (meta.site_lat_deg, meta.site_lon_deg, meta.site_height_m) == pytest.approx(
        (28.7606, -17.8816, 2332.0))
    assert meta.site_name == "ORM"


def test_west_positive_longitude_from_comment(tmp_path):
    """Some observatories write west-positive longitudes; the comment says so."""
    meta = _read(tmp_path, {"SITELAT": "31:57:48", "SITELONG": "111:36:00", "SITEELEV": 2120.0},
                 {"SITELONG": "[deg] west longitude (positive west)"})
    assert meta.site_lon_deg == pytest.approx(-111.6, abs=1e-9)
    assert meta.site_lat_deg == pytest.approx(31.963333333, abs=1e-8)
    meta = _read(tmp_path, {"LATITUDE": -29.2563, "LONGITUD": "70:44:04.5 W"})
    assert meta.site_lon_deg == pytest.approx(-(70 + 44 / 60 + 4.5 / 3600), abs=1e-9)
    meta = _read(tmp_path, {"LATITUDE": 28.76, "LONGITUD": -17.88},
                 {"LONGITUD": "East longitude, degrees"})
    assert meta.site_lon_deg == pytest.approx(-17.88)


# ----------------------------------------------------------------------------- frame
def test_specsys_barycentric_with_correction(tmp_path):
    meta = _read(tmp_path, {"SPECSYS": "BARYCENT", "BARYCORR": 12.345})
    assert meta.frame == "barycentric" and meta.frame_correction_kms == pytest.approx(12.345)
    meta = _read(tmp_path, {"SPECSYS": "TOPOCENT", "BARYCORR": 12.345})
    assert meta.frame == "topocentric" and meta.frame_correction_kms is None
    assert meta.header["BARYCORR"] == pytest.approx(12.345)  # kept for the velocity stage


def test_eso_berv_in_hierarch(tmp_path):
    meta = _read(tmp_path, {"SPECSYS": "BARYCENT", "HIERARCH ESO DRS BERV": -8.5})
    assert meta.frame_correction_kms == pytest.approx(-8.5)


def test_iraf_dopcor_and_vhelio(tmp_path):
    meta = _read(tmp_path, {"VHELIO": 17.2, "DOPCOR": "-17.2 flux"})
    assert meta.frame == "heliocentric" and meta.frame_correction_kms == pytest.approx(17.2)
    meta = _read(tmp_path, {"DOPCOR": "-17.2"})  # sign convention: minus the dopcor velocity
    assert meta.frame == "heliocentric" and meta.frame_correction_kms == pytest.approx(17.2)
    meta = _read(tmp_path, {"VHELIO": 17.2})  # computed by rvcorrect, not applied
    assert meta.frame == "topocentric"


def test_unstated_barycentric_correction_warns(tmp_path):
    with pytest.warns(StarlinesWarning, match="BERV = 3.000 km/s but no SPECSYS"):
        meta = _read(tmp_path, {"BERV": 3.0})
    assert meta.frame == "topocentric"


def test_unsupported_specsys(tmp_path):
    with pytest.raises(InputFormatError, match="SPECSYS 'LSRK' is not supported"):
        _read(tmp_path, {"SPECSYS": "LSRK"})


# ----------------------------------------------------------------------------- resolution
@pytest.mark.parametrize(
    "cards, comments, fwhm",
    [
        ({"FWHM": 2.5}, {"FWHM": "FWHM of resolution element (angstroms)"}, 2.5),
        ({"SPEC_RES": 4000.0}, {}, 4649.75 / 4000.0),  # FWHM = lambda_mid / R
        ({"RESOLUTN": 0.25}, {"RESOLUTN": "[nm] FWHM"}, 2.5),
        ({"RESOLUTN": 3.0}, {"RESOLUTN": "FWHM in pixels"}, 1.5),  # 0.5 A per pixel
        ({"FWHM": 1.2}, {"FWHM": "seeing [arcsec]"}, None),
    ],
    ids=["angstrom", "R", "nm", "pixels", "seeing"],
)
def test_resolution(tmp_path, cards, comments, fwhm):
    meta = _read(tmp_path, cards, comments)
    if fwhm is None:
        assert meta.resolution_fwhm is None
    else:
        assert meta.resolution_fwhm == pytest.approx(fwhm, abs=1e-6)
