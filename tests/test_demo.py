"""The invented demo night: its files, and the triage finding every planted case.

The reference here is the injected signal: each planted case (starlines.demo.PLANTED) was
made with a known property (emission, a companion, v sin i, a velocity offset, helium
abundance, S/N, a truncated file, a wrong catalogue type), so the flag it must raise is
known in advance; the normal stars were made without any of these and must raise none.
"""

from __future__ import annotations

import contextlib
import fcntl
import math
import os

import numpy as np
import pytest

from starlines.cli import main
from starlines.demo import CLUSTER, PLANTED, SITE, demo_stars, write_demo_night
from starlines.flags import split_flags
from starlines.sptype import parse_sptype


@contextlib.contextmanager
def _locked(path):
    """Exclusive lock on ``path`` (POSIX flock), held while the block runs."""
    with open(path, "w") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    # one demo night per test run, shared by the pytest-xdist workers (their base folders
    # share a parent): the first worker writes and triages it, the others wait and reuse
    base = tmp_path_factory.getbasetemp()
    out = (base.parent if os.environ.get("PYTEST_XDIST_WORKER") else base) / "demo-shared"
    with _locked(f"{out}.lock"):
        if not (out / "README.txt").exists():
            assert main(["-q", "demo", "--out", str(out), "--no-triage"]) == 0
    return out


@pytest.fixture(scope="module")
def triaged(demo):
    from starlines.triage import triage_night

    # a second worker resumes from the first one's journal (nothing analysed twice)
    with _locked(f"{demo}.triage.lock"):
        return triage_night(demo / "night", demo / "triage", targets=demo / "targets.ecsv",
                            workers=2, figures=False, progress=False)


def test_demo_night_files_have_full_headers(demo):
    from astropy.io import fits

    files = sorted(os.listdir(demo / "night"))
    assert 30 <= len(files) <= 60
    stars = {s.name: s for s in demo_stars()}
    good = [f for f in files if not f.endswith("H7-26.fits")]
    for name in good[:5]:
        with fits.open(demo / "night" / name) as hdul:
            h = hdul[0].header
            flux = hdul[0].data
        assert h["CTYPE1"] == "AWAV" and h["CUNIT1"] == "Angstrom"
        for key in ("OBJECT", "RA", "DEC", "DATE-OBS", "EXPTIME", "OBSGEO-X", "SITELAT",
                    "RESOLUTN"):
            assert key in h
        assert 1.5 <= h["RESOLUTN"] <= 3.0
        wave = h["CRVAL1"] + h["CDELT1"] * np.arange(flux.size)
        assert wave[0] <= 3900 and wave[-1] >= 5000
        # S/N per pixel from the injected noise: std of first differences / sqrt(2) in two
        # windows without catalogue lines (4160-4190 and 4735-4820 A; smooth wings do not
        # matter for differences); ~190 pixels give a ~8 % estimate: 30 % tolerance
        diffs, level = [], []
        for lo, hi in ((4160, 4190), (4735, 4820)):
            win = (wave > lo) & (wave < hi)
            diffs.append(np.diff(flux[win].astype(float)))
            level.append(flux[win])
        snr = np.median(np.concatenate(level)) / (np.std(np.concatenate(diffs)) / math.sqrt(2))
        assert stars[h["OBJECT"]].snr >= 80
        assert snr == pytest.approx(stars[h["OBJECT"]].snr, rel=0.3)
    # the site: geodetic -> geocentric with astropy reproduces OBSGEO-X/Y/Z
    from astropy.coordinates import EarthLocation

    loc = EarthLocation.from_geodetic(SITE["lon"], SITE["lat"], SITE["height"])
    assert math.isclose(h["OBSGEO-X"], loc.x.value, abs_tol=0.01)


def test_corrupt_file_is_truncated(demo):
    from astropy.io import fits

    path = [f for f in os.listdir(demo / "night") if f.endswith("H7-26.fits")][0]
    with pytest.raises(Exception), fits.open(demo / "night" / path) as hdul:  # noqa: B017
        hdul[0].data.sum()


def test_demo_is_deterministic(tmp_path):
    stars = [s for s in demo_stars() if s.name in ("H7-01", "FLD-203")]
    a = write_demo_night(tmp_path / "a", stars=stars)
    b = write_demo_night(tmp_path / "b", stars=[s for s in demo_stars()
                                                if s.name in ("H7-01", "FLD-203")])
    for fa, fb in zip(a["files"], b["files"]):
        assert open(fa, "rb").read() == open(fb, "rb").read()


def _by_object(rows):
    return {r["object"]: r for r in rows if r["object"]}


#: Misses the triage cannot avoid today, each caused by an upstream stage (see the reason);
#: non-strict, so a fix upstream shows up as XPASS.
KNOWN_MISSES: dict[str, str] = {}
KNOWN_FALSE: dict[str, str] = {}
NORMAL = [s.name for s in demo_stars() if s.name not in PLANTED]


def _maybe_xfail(name, known):
    marks = [pytest.mark.xfail(reason=known[name], strict=False)] if name in known else []
    return pytest.param(name, marks=marks, id=name)


@pytest.mark.parametrize("name", [_maybe_xfail(n, KNOWN_MISSES) for n in PLANTED])
def test_planted_case_is_flagged(triaged, name):
    if name == "H7-26":  # the corrupt file has no OBJECT to show: it is the failed row
        failed = [r for r in triaged.rows if r["status"] == "failed"]
        assert [os.path.basename(r["file"]) for r in failed] == ["20240217_026_H7-26.fits"]
        assert failed[0]["flags"] == "failed" and failed[0]["error"]
        return
    row = _by_object(triaged.rows)[name]
    assert PLANTED[name] in split_flags(row["flags"]), row["flags"]


@pytest.mark.parametrize("name", [_maybe_xfail(n, KNOWN_FALSE) for n in NORMAL])
def test_normal_star_is_not_flagged(triaged, name):
    row = _by_object(triaged.rows)[name]
    assert row["status"] == "ok" and row["flags"] == "", row["flags"]


def test_precision_and_recall_summary(triaged):
    by = _by_object(triaged.rows)
    hits = [n for n in PLANTED if n == "H7-26" or PLANTED[n] in split_flags(by[n]["flags"])]
    clean = [n for n in NORMAL if by[n]["flags"] == ""]
    flagged = [n for n in by if by[n]["flags"]]
    planted_flagged = [n for n in flagged if n in PLANTED]
    print(f"recall {len(hits)}/{len(PLANTED)}; normal stars without flags "
          f"{len(clean)}/{len(NORMAL)}; precision (flagged stars that are planted) "
          f"{len(planted_flagged)}/{len(flagged)}")
    assert len(triaged.rows) == len(demo_stars())
    # every miss and false alarm is one of the known upstream limitations above
    assert set(PLANTED) - set(hits) <= set(KNOWN_MISSES)
    assert set(NORMAL) - set(clean) <= set(KNOWN_FALSE)


def test_velocities_and_types_of_normal_stars(triaged):
    by = _by_object(triaged.rows)
    stars = {s.name: s for s in demo_stars()}
    # the injected barycentric velocity is the reference
    errors = np.array([by[n]["rv"] - stars[n].rv for n in NORMAL])
    print(f"rv error of normal stars: median {np.median(errors):+.1f}, "
          f"max |error| {np.abs(errors).max():.1f} km/s")
    assert abs(np.median(errors)) < 3.0
    # 90 % within 10 km/s (~5x the typical quoted error at S/N > 80); mid-O giants are the
    # known exception of the velocity stage today
    assert np.mean(np.abs(errors) < 10.0) >= 0.9
    cluster = [by[n]["rv"] for n in NORMAL if n.startswith("H7-")]
    assert abs(np.median(cluster) - CLUSTER["rv"]) < 3.0
    subtype_err = [by[n]["subtype"] - parse_sptype(stars[n].sptype).subtype for n in NORMAL]
    # types: within 1.5 subtypes (digital vs photographic types differ by up to 1.5,
    # criteria.md C4, Markova et al. 2011 abstract)
    assert np.mean(np.abs(subtype_err) <= 1.5) >= 0.9


def test_vsini_limits_and_data_quality_of_the_demo(triaged):
    by = _by_object(triaged.rows)
    stars = {s.name: s for s in demo_stars()}
    # the planted fast rotator (340 km/s) is measured, not a limit: within 60 km/s
    # (the kernel fit ignores intrinsic line widths and reads high, starlines.vsini)
    fast = by["H7-17"]
    assert not fast["vsini_limit"] and fast["vsini"] == pytest.approx(340.0, abs=60.0)
    # the planted Be star (250 km/s) is measured within 20 % (narrow lines of the forward
    # model, tests/test_vsini.py); the helium-strong slow rotator (60 km/s) is an upper
    # limit: its He I 4471 alone reads ~230 km/s (Stark width not in the kernel fit)
    be = by["H7-11"]
    assert not be["vsini_limit"] and be["vsini"] == pytest.approx(250.0, rel=0.20)
    assert by["FLD-205"]["vsini_limit"]
    assert "fast-rotator" not in split_flags(by["FLD-205"]["flags"])
    # at 2.0-2.6 A FWHM the floor c FWHM / lambda at the v sin i lines (4089-5016 A) is
    # 119-191 km/s (common practice); the normal stars rotate at 30-120 km/s, so an upper
    # limit must lie above the injected value and never raise fast-rotator
    limits = [n for n in NORMAL if by[n]["vsini_limit"]]
    assert len(limits) >= len(NORMAL) // 2
    for n in limits:
        assert by[n]["vsini"] >= stars[n].vsini
        assert 115.0 <= by[n]["vsini_floor"] <= 195.0
    # the short exposure (injected S/N 22, white noise) is low-S/N but not suspect data:
    # DER_SNR is right for independent pixels (Stoehr et al. 2008) and its Balmer lines
    # are detected
    low = by["H7-23"]
    assert low["snr"] == pytest.approx(22.0, rel=0.3)
    assert "low-snr" in split_flags(low["flags"])
    assert "suspect-data" not in split_flags(low["flags"])
