"""Star identity: name normalisation and sky cross-match (starlines.identity).

Name forms follow the designation conventions of the catalogues (HD numbers, Durchmusterung
zone + number, Tycho triplets), as used by the CDS Dictionary of Nomenclature (from memory);
angular separations are checked against spherical geometry, the reference being
astropy.coordinates.
"""

from __future__ import annotations

import logging

import pytest

from starlines.archive import Archive
from starlines.identity import StarRecord, normalise_name, resolve


@pytest.mark.parametrize(
    "forms",
    [
        # the same HD star written three ways (common practice in observing logs)
        ("HD 12345", "HD12345", "hd  012345", "HDE 12345", "HD_12345"),
        # Durchmusterung: zone +40, star 4220, packed or spaced, with a degree sign
        ("BD+40 4220", "BD+404220", "bd +40 4220", "BD+40°4220", "BD+40 04220"),
        ("CD-28 1234", "CD-281234", "cd -28  1234"),
        ("TYC 1234-567-1", "TYC 1234-0567-1", "tyc1234-567-1"),
        ("zeta Oph", "zet Oph", "ζ Oph", "* zet Oph"),
        ("V* V1234 Cyg", "V1234 Cyg"),
        ("Cl* NGC 2244 OI 203", "NGC 2244 OI 203", "NGC  2244 OI 0203"),
    ],
)
def test_name_forms_meet(forms):
    keys = {normalise_name(f) for f in forms}
    assert len(keys) == 1 and None not in keys, keys


@pytest.mark.parametrize(
    "a, b",
    [
        ("BD+40 4220", "BD+4 4220"),  # zone +40 versus zone +04
        ("BD+40 4220", "BD-40 4220"),  # north versus south of the equator
        ("BD+40 4220", "CD+40 4220"),  # different catalogues
        ("HD 12345", "HD 123450"),
        ("HD 12345", "HD 12345 B"),  # a component is another star
        ("HD 12345", "HIP 12345"),
    ],
)
def test_different_names_stay_apart(a, b):
    assert normalise_name(a) != normalise_name(b)


def test_durchmusterung_keys_are_zone_and_number():
    # BD+404220 can only be zone +40 star 4220: zones are two digits (common practice)
    assert normalise_name("BD+404220") == "BD+40 4220"
    assert normalise_name("BD+4 4220") == "BD+04 4220"


@pytest.mark.parametrize("placeholder", [None, "", "   ", "UNKNOWN", "n/a", "object"])
def test_placeholders_are_no_name(placeholder):
    assert normalise_name(placeholder) is None


STAR = StarRecord(1, "HD 37022", 83.8186, -5.3897, frozenset({"HD 37022"}))


def test_coordinate_only_entry_meets_its_star():
    # 1 arcsec due north: the separation is exactly the declination offset (spherical
    # geometry, reference astropy SkyCoord.separation)
    m = resolve(None, STAR.ra, STAR.dec + 1.0 / 3600, [STAR])
    assert m.star_id == 1 and m.how == "sky"
    assert m.separation_arcsec == pytest.approx(1.0, abs=1e-6)


def test_name_confirmed_by_position():
    m = resolve("HD37022", STAR.ra, STAR.dec, [STAR])
    assert (m.star_id, m.how) == (1, "name+sky")


def test_name_without_position_matches_by_name():
    assert resolve("hd 037022", None, None, [STAR]).how == "name"


def test_name_match_too_far_is_a_different_star(caplog):
    with caplog.at_level(logging.WARNING, logger="starlines.identity"):
        m = resolve("HD 37022", STAR.ra, STAR.dec + 10.0 / 3600, [STAR], radius_arcsec=3.0)
    assert m.star_id is None and m.how == "new"
    assert "10.0 arcsec" in m.warning and "different star" in caplog.text


@pytest.mark.parametrize(
    "star, probe, expected_arcsec",
    [
        # across RA = 0: 0.0002 deg of RA on the equator is 0.72 arcsec (spherical geometry)
        ((359.9999, 0.0), (0.0001, 0.0), 0.72),
        # across the pole: opposite RAs at 0.0001 deg from the pole are 0.72 arcsec apart
        ((0.0, 89.9999), (180.0, 89.9999), 0.72),
    ],
)
def test_sky_match_uses_spherical_geometry(star, probe, expected_arcsec):
    rec = StarRecord(7, "X", *star, frozenset())
    m = resolve(None, *probe, [rec])
    assert m.star_id == 7
    assert m.separation_arcsec == pytest.approx(expected_arcsec, abs=1e-3)


def test_archive_joins_name_forms_and_coordinate_only_files(tmp_path):
    forms = [("HD 12345", 10.0, 20.0), ("HD12345", None, None), ("hd  012345", 10.0, 20.0),
             (None, 10.0 + 0.5 / 3600, 20.0), ("BD+40 4220", 300.0, 40.0),
             ("BD+404220", 300.0, 40.0), ("BD+4 4220", 150.0, 4.0)]
    with Archive(tmp_path / "a.db") as arch:
        for i, (name, ra, dec) in enumerate(forms):
            arch.store_spectrum({"file": f"f{i}.fits", "object": name, "ra": ra, "dec": dec,
                                 "checksum": f"c{i}", "night": "n1"}, [])
        stars = arch.stars()
        assert len(stars) == 3
        assert len(arch.epochs("HD 12345")) == 4
        assert len(arch.epochs("BD+40 4220")) == 2
        assert len(arch.epochs("BD+04 4220")) == 1


def test_coordinate_only_star_takes_the_name_seen_later(tmp_path):
    with Archive(tmp_path / "a.db") as arch:
        arch.store_spectrum({"file": "a.fits", "ra": 50.0, "dec": -30.0, "checksum": "a"}, [])
        arch.store_spectrum({"file": "b.fits", "object": "CPD-30 123", "ra": 50.0,
                             "dec": -30.0 + 2.0 / 3600, "checksum": "b"}, [])
        stars = arch.stars()
        assert list(stars["name"]) == ["CPD-30 123"]
        assert stars["n_spectra"][0] == 2


def test_same_name_far_apart_in_the_archive(tmp_path, caplog):
    with Archive(tmp_path / "a.db") as arch, caplog.at_level(logging.WARNING, logger="starlines"):
        arch.store_spectrum({"file": "a.fits", "object": "HD 5", "ra": 10.0, "dec": 20.0,
                             "checksum": "a"}, [])
        arch.store_spectrum({"file": "b.fits", "object": "HD5", "ra": 10.0, "dec": 21.0,
                             "checksum": "b"}, [])
        assert len(arch.stars()) == 2
        assert "3600.0 arcsec" in caplog.text  # 1 degree along a meridian
        res = arch.flag_variables(["HD 5"])["HD 5"]
        assert not res.variable and "shared by stars" in res.reason
        assert len(arch.epochs("#2")) == 1
