"""Astropy settings for a machine without internet.

The pipeline runs at the telescope or on a laptop with no network. Astropy would otherwise
try to download the IERS Earth-orientation table (and the leap-second list) the first time a
:class:`~astropy.time.Time` needs UT1 or polar motion, and, for dates past the predictions of
its bundled table, raise an error. :func:`configure_astropy_offline` switches all of that
off explicitly; every code path doing time or coordinate work calls it first, in every
process (worker processes of a pool or of dask call it too: it is cheap and idempotent).

Past the end of the bundled predictions astropy falls back to zero UT1-UTC drift and mean
polar motion. For barycentric velocity corrections that costs far less than 1 m/s (the
diurnal term changes by 0.46 km/s * 2 pi * dUT1 / 1 day, i.e. ~3 mm/s per second of UT1
error), so "warn" is the honest setting; :func:`iers_table_vintage` says which table was used.
"""

from __future__ import annotations

import logging
import os
import threading
from functools import lru_cache

__all__ = ["configure_astropy_offline", "iers_table_vintage", "iers_prediction_end_mjd"]

log = logging.getLogger("starlines.offline")

_lock = threading.Lock()
_configured_pid: int | None = None


def configure_astropy_offline(*, remote_timeout: float = 0.1) -> None:
    """Stop astropy from using the network; accept the bundled IERS table for any date.

    Sets, explicitly:

    - ``astropy.utils.iers.conf.auto_download = False`` (use the bundled table);
    - ``astropy.utils.iers.conf.auto_max_age = None`` (do not complain about its age);
    - ``astropy.utils.iers.conf.iers_degraded_accuracy = "warn"`` (dates past the table
      give an ``AstropyWarning`` instead of an error);
    - ``astropy.utils.data.conf.allow_internet = False`` and a short ``remote_timeout``.

    Idempotent and cheap; safe to call in every worker process.

    Parameters
    ----------
    remote_timeout : float
        Seconds astropy may wait for a remote file if anything still tries (it should not).
    """
    global _configured_pid
    pid = os.getpid()
    if _configured_pid == pid:
        return
    with _lock:
        from astropy.utils import iers
        from astropy.utils.data import conf as data_conf

        iers.conf.auto_download = False
        iers.conf.auto_max_age = None
        iers.conf.iers_degraded_accuracy = "warn"
        data_conf.allow_internet = False
        data_conf.remote_timeout = remote_timeout
        _configured_pid = pid
        if log.isEnabledFor(logging.DEBUG):  # reading the table costs ~1 s: only when asked
            log.debug("astropy configured offline (IERS table: %s)", iers_table_vintage())


@lru_cache(maxsize=1)
def iers_prediction_end_mjd() -> float:
    """Last MJD covered (with predictions) by the IERS-A table astropy uses offline (cached)."""
    configure_astropy_offline()
    from astropy.utils import iers

    table = iers.IERS_Auto.open()
    return float(table["MJD"][-1].value)


def iers_table_vintage() -> str:
    """Describe the IERS table in use: package version, measured-data end, prediction end.

    Returns
    -------
    str
        For example ``"astropy-iers-data 0.2026.11.16; measured to 2026-11-13,
        predictions to 2027-11-06"``.
    """
    configure_astropy_offline()
    from astropy.time import Time
    from astropy.utils import iers

    try:
        from importlib.metadata import version

        pkg = f"astropy-iers-data {version('astropy-iers-data')}"
    except Exception:  # noqa: BLE001 - metadata missing in odd installs: say so
        pkg = "astropy-iers-data (version unknown)"
    table = iers.IERS_Auto.open()
    end = Time(float(table["MJD"][-1].value), format="mjd").iso[:10]
    measured = table.meta.get("predictive_mjd")
    if measured is None:
        return f"{pkg}; table ends {end}"
    measured_iso = Time(float(measured), format="mjd").iso[:10]
    return f"{pkg}; measured to {measured_iso}, predictions to {end}"
