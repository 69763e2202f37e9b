"""Barycentric correction against an independent calculation, sites, frames."""

import math
import warnings

import numpy as np
import pytest

from starlines.barycentric import apply_correction, barycentric_correction, frame_correction
from starlines.errors import ConfigError
from starlines.sites import find_site, location_from_meta
from starlines.spectrum import ObservationMeta


def independent_correction(ra, dec, mjd, loc):
    """Earth's barycentric velocity (get_body_barycentric_posvel, evaluated at TDB) plus the
    observatory's GCRS velocity (EarthLocation.get_gcrs_posvel), projected on the star
    direction. Neglects relativistic terms of order v^2/c (< 3 m/s, common practice)."""
    import astropy.units as u
    from astropy.coordinates import get_body_barycentric_posvel
    from astropy.time import Time

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # 2030: ERFA calls future UTC "dubious" (expected)
        t = Time(mjd, format="mjd", scale="utc")
        _, v_earth = get_body_barycentric_posvel("earth", t)
        _, v_obs = loc.get_gcrs_posvel(t)
    r, d = math.radians(ra), math.radians(dec)
    n = np.array([math.cos(d) * math.cos(r), math.cos(d) * math.sin(r), math.sin(d)])
    v = (v_earth.xyz + v_obs.xyz).to_value(u.km / u.s)
    return float(n @ v)


@pytest.mark.parametrize("ra,dec,mjd,site", [
    (83.82, -5.39, 60000.1, "lasilla"), (279.23, 38.78, 60400.9, "lapalma"),
    (10.0, -70.0, 61000.3, "sidingspring"), (200.0, 20.0, 62800.7, "maunakea"),
])
def test_matches_independent_calculation(ra, dec, mjd, site):
    from starlines.offline import configure_astropy_offline

    configure_astropy_offline()
    loc = find_site(site).location()
    got = barycentric_correction(ra, dec, mjd, loc)
    # 10 m/s tolerance (the brief; astropy adds the relativistic and gravitational terms)
    assert got == pytest.approx(independent_correction(ra, dec, mjd, loc), abs=0.010)
    assert abs(got) < 30.3 + 0.5  # orbit 29.8 + rotation 0.47 km/s (common practice)


def test_west_longitude_header_gives_the_same_site():
    """A header giving Kitt Peak's longitude as 111.5967 W (west positive), converted by the
    reader's convention (starlines.headers), must match the site table's east longitude."""
    headers = pytest.importorskip("starlines.headers")
    fits = pytest.importorskip("astropy.io.fits")
    hdr = fits.Header()
    hdr["LATITUDE"] = (31.9583, "degrees")
    hdr["LONGITUD"] = (111.5967, "[deg W] west positive longitude")
    hdr["ALTITUDE"] = (2096.0, "m")
    hdr["RA"], hdr["DEC"], hdr["MJD-OBS"] = 150.0, 20.0, 61000.0
    meta = headers.meta_from_cards(headers.Cards(hdr), path="header.fits")
    assert meta.site_lon_deg == pytest.approx(-111.5967, abs=1e-6)
    loc, _ = location_from_meta(meta)
    ref = find_site("kpno").location()
    assert abs(barycentric_correction(150, 20, 61000.0, loc)
               - barycentric_correction(150, 20, 61000.0, ref)) < 1e-6
    # the wrong sign would move the site ~200 degrees: the rotation term changes sign
    wrong = find_site("kpno")
    from starlines.sites import earth_location

    flipped = earth_location(wrong.lat_deg, -wrong.lon_east_deg, wrong.height_m)
    # over a day the diurnal term differs by up to 2 x 0.39 km/s x cos(dec): the sign matters
    diffs = [abs(barycentric_correction(150, 20, 61000.0 + k / 8, flipped)
                 - barycentric_correction(150, 20, 61000.0 + k / 8, ref)) for k in range(8)]
    assert max(diffs) > 0.3


def test_obsgeo_xyz_used():
    ref = find_site("paranal").location()
    meta = ObservationMeta(header={"OBSGEO-X": ref.x.value, "OBSGEO-Y": ref.y.value,
                                   "OBSGEO-Z": ref.z.value})
    loc, where = location_from_meta(meta)
    assert "OBSGEO" in where and abs(loc.lat.deg - ref.lat.deg) < 1e-6


def test_already_barycentric_not_corrected_twice():
    meta = ObservationMeta(ra_deg=1, dec_deg=2, mjd_mid=60000, site_name="paranal",
                           frame="heliocentric", frame_correction_kms=12.0)
    fc = frame_correction(meta)
    assert fc.frame == "heliocentric" and math.isnan(fc.correction_kms)
    assert apply_correction(50.0, fc.correction_kms) == 50.0


def test_missing_metadata_is_flagged_topocentric():
    fc = frame_correction(ObservationMeta(ra_deg=1, dec_deg=2))
    assert fc.frame == "topocentric" and "rv-topocentric" in fc.flags
    assert "mid-exposure time" in fc.reason and "site" in fc.reason


def test_user_site_config(tmp_path):
    cfg = tmp_path / "sites.toml"
    cfg.write_text('[sites.backyard]\nname = "Backyard"\nlat_deg = 50.0\n'
                   'lon_west_deg = 5.0\nheight_m = 100\naliases = ["my scope"]\n')
    s = find_site("My Scope", config=cfg)
    assert s.lon_east_deg == -5.0
    meta = ObservationMeta(ra_deg=1, dec_deg=2, mjd_mid=60000)
    fc = frame_correction(meta, site="backyard", site_config=cfg)
    assert fc.frame == "barycentric" and math.isfinite(fc.correction_kms)
    with pytest.raises(ConfigError, match="unknown site"):
        find_site("nowhere", config=cfg)
    bad = tmp_path / "bad.toml"
    bad.write_text("[sites.x]\nlat_deg = 1\n")
    with pytest.raises(ConfigError, match="lon_east_deg"):
        find_site("x", config=bad)


@pytest.mark.parametrize("site", ["lasilla", "maunakea", "kpno"])
def test_interpolated_matches_astropy_radial_velocity_correction(site):
    """The cached hourly-node spline reproduces astropy's own
    SkyCoord.radial_velocity_correction (the reference library) to 1 cm/s at random
    times (2015-2030, incl. past the IERS predictions), positions and sites."""
    from starlines.offline import configure_astropy_offline

    configure_astropy_offline()
    rng = np.random.default_rng(len(site))
    loc = find_site(site).location()
    for _ in range(6):
        ra, dec = rng.uniform(0, 360), math.degrees(math.asin(rng.uniform(-1, 1)))
        mjd = rng.uniform(57000, 64000)
        fast = barycentric_correction(ra, dec, mjd, loc)
        assert fast == pytest.approx(barycentric_correction(ra, dec, mjd, loc, exact=True),
                                     abs=1e-5)  # km/s
