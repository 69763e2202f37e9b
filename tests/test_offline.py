"""Offline astropy: no downloads, no failure for dates past the bundled IERS table."""

import math
import socket

import pytest

from starlines.offline import configure_astropy_offline, iers_table_vintage


@pytest.fixture
def no_network(monkeypatch):
    """Any attempt to open a socket fails the test."""

    def refuse(*args, **kwargs):
        raise AssertionError("network access attempted")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)


def test_settings_are_explicit_and_idempotent():
    from astropy.utils import iers
    from astropy.utils.data import conf as data_conf

    configure_astropy_offline()
    configure_astropy_offline()
    assert iers.conf.auto_download is False
    assert iers.conf.iers_degraded_accuracy == "warn"
    assert data_conf.allow_internet is False


def test_vintage_names_the_table():
    text = iers_table_vintage()
    assert "astropy-iers-data" in text and "predictions to" in text


@pytest.mark.parametrize("mjd", [61500.0, 62000.5, 63000.0, 64000.0])  # 2027-2030
def test_future_dates_work_offline(no_network, mjd):
    import warnings

    from starlines.barycentric import barycentric_correction
    from starlines.sites import find_site

    loc = find_site("La Silla").location()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # our code must not leak warnings either
        corr = barycentric_correction(83.82, -5.39, mjd, loc)
    # Earth's orbital speed 29.8 km/s plus rotation 0.47 km/s (common practice)
    assert math.isfinite(corr) and abs(corr) < 30.3 + 0.5


def test_worker_process_configures_itself():
    from concurrent.futures import ProcessPoolExecutor

    from starlines.barycentric import barycentric_correction
    from starlines.sites import find_site

    loc = find_site("paranal").location()
    with ProcessPoolExecutor(1) as pool:
        corr = pool.submit(barycentric_correction, 10.0, -30.0, 62500.0, loc).result()
    assert abs(corr) < 30.8
