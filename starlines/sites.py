"""Observatory sites: the shipped table, user TOML files, and sites from file metadata.

Sites are never looked up on the internet (``EarthLocation.of_site`` needs the network and
is never called). A site comes, in this order of precedence, from

1. a site the user names explicitly (``--site NAME``), looked up in the user's TOML file
   (``--site-config FILE``) and then in the shipped ``data/sites.toml``;
2. geocentric coordinates in the header (``OBSGEO-X/Y/Z``, metres, ITRS);
3. geodetic latitude / longitude (east positive, as the readers store it) / height in the
   observation metadata;
4. the site name written in the file, looked up as in 1.

A user TOML file has the layout of ``data/sites.toml``::

    [sites.mysite]
    name = "My observatory"
    lat_deg = 50.0
    lon_east_deg = 10.0      # or lon_west_deg = -10.0 for west-positive values
    height_m = 300
    aliases = ["my obs"]
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

from starlines.errors import ConfigError

__all__ = ["Site", "load_sites", "find_site", "earth_location", "location_from_meta"]


@dataclass(frozen=True)
class Site:
    """An observatory site (geodetic WGS84, longitude east positive).

    Attributes
    ----------
    key : str
        Table key, e.g. ``"lasilla"``.
    name : str
        Display name.
    lat_deg, lon_east_deg, height_m : float
        Geodetic latitude, east longitude (degrees) and height (metres).
    aliases : tuple of str
        Other names that match this site.
    source : str
        Where the entry came from (shipped table or the user's file).
    """

    key: str
    name: str
    lat_deg: float
    lon_east_deg: float
    height_m: float
    aliases: tuple[str, ...] = ()
    source: str = ""

    def location(self):
        """The site as an :class:`astropy.coordinates.EarthLocation` (cached)."""
        return earth_location(self.lat_deg, self.lon_east_deg, self.height_m)


def _norm(name: str) -> str:
    return re.sub(r"[\s_\-.()]+", "", name.lower())


def _parse_sites(data: dict, source: str) -> dict[str, Site]:
    sites = data.get("sites")
    if not isinstance(sites, dict):
        raise ConfigError("no [sites.<name>] tables found", path=source)
    out = {}
    for key, entry in sites.items():
        if not isinstance(entry, dict):
            raise ConfigError(f"[sites.{key}] is not a table", path=source)
        try:
            lat = float(entry["lat_deg"])
            if ("lon_east_deg" in entry) == ("lon_west_deg" in entry):
                raise ConfigError(
                    f"[sites.{key}] needs exactly one of lon_east_deg or lon_west_deg",
                    path=source,
                )
            lon = (float(entry["lon_east_deg"]) if "lon_east_deg" in entry
                   else -float(entry["lon_west_deg"]))
            height = float(entry.get("height_m", 0.0))
        except KeyError as exc:
            raise ConfigError(f"[sites.{key}] lacks {exc.args[0]}", path=source) from None
        except (TypeError, ValueError) as exc:
            raise ConfigError(f"[sites.{key}] has a non-numeric value: {exc}",
                              path=source) from None
        if not (-90.0 <= lat <= 90.0 and -360.0 <= lon <= 360.0 and -500 < height < 9000):
            raise ConfigError(f"[sites.{key}] coordinates out of range", path=source)
        aliases = tuple(str(a) for a in entry.get("aliases", ()))
        out[_norm(key)] = Site(key=key, name=str(entry.get("name", key)), lat_deg=lat,
                               lon_east_deg=((lon + 180.0) % 360.0) - 180.0, height_m=height,
                               aliases=aliases, source=source)
    return out


def _read_toml(path: str) -> dict:
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError("site configuration file not found", path=path) from None
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise ConfigError(f"cannot read site configuration: {exc}", path=path) from None


@lru_cache(maxsize=1)
def _shipped_sites() -> dict[str, Site]:
    ref = resources.files("starlines") / "data" / "sites.toml"
    with resources.as_file(ref) as p:
        return _parse_sites(_read_toml(str(p)), "starlines/data/sites.toml (from memory)")


@lru_cache(maxsize=16)
def _user_sites(path: str) -> dict[str, Site]:
    return _parse_sites(_read_toml(path), path)


def load_sites(config: str | os.PathLike | None = None) -> dict[str, Site]:
    """All known sites: the shipped table, overridden by the user's TOML file if given.

    Parameters
    ----------
    config : path, optional
        User TOML file with ``[sites.<key>]`` tables.

    Returns
    -------
    dict
        Normalized key -> :class:`Site`.
    """
    sites = dict(_shipped_sites())
    if config is not None:
        sites.update(_user_sites(os.fspath(config)))
    return sites


def find_site(name: str, *, config: str | os.PathLike | None = None) -> Site:
    """Look a site up by key, name or alias (case, spaces and dashes ignored).

    Raises
    ------
    ConfigError
        If no site matches; the message lists the known keys.
    """
    sites = load_sites(config)
    want = _norm(name)
    user_first = sorted(sites.values(), key=lambda s: s.source.startswith("starlines/"))
    for site in user_first:
        if want in {_norm(site.key), _norm(site.name), *(_norm(a) for a in site.aliases)}:
            return site
    known = ", ".join(sorted(s.key for s in sites.values()))
    raise ConfigError(f"unknown site {name!r}; known sites: {known} (add one with --site-config)")


@lru_cache(maxsize=64)
def earth_location(lat_deg: float, lon_east_deg: float, height_m: float):
    """A cached :class:`~astropy.coordinates.EarthLocation` from geodetic coordinates."""
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    return EarthLocation.from_geodetic(lon_east_deg * u.deg, lat_deg * u.deg, height_m * u.m)


@lru_cache(maxsize=64)
def _geocentric_location(x_m: float, y_m: float, z_m: float):
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    return EarthLocation.from_geocentric(x_m * u.m, y_m * u.m, z_m * u.m)


def _finite(*values) -> bool:
    try:
        return all(v is not None and float(v) == float(v) for v in values)
    except (TypeError, ValueError):
        return False


def location_from_meta(meta, *, site: str | None = None,
                       config: str | os.PathLike | None = None):
    """Find the observatory location for one observation.

    Parameters
    ----------
    meta : ObservationMeta
        Observation metadata (``header`` may hold ``OBSGEO-X/Y/Z``).
    site : str, optional
        Site named by the user; takes precedence over the file.
    config : path, optional
        User site TOML file.

    Returns
    -------
    (EarthLocation or None, str)
        The location and a short description of where it came from (or why there is none).

    Raises
    ------
    ConfigError
        If ``site`` is given but unknown.
    """
    if site:
        s = find_site(site, config=config)
        return s.location(), f"site {s.key} ({s.source})"
    header = getattr(meta, "header", None) or {}
    xyz = [header.get(k) for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")]
    if _finite(*xyz) and sum(float(v) ** 2 for v in xyz) > 6.0e6**2:
        return _geocentric_location(*(float(v) for v in xyz)), "header OBSGEO-X/Y/Z"
    if _finite(meta.site_lat_deg, meta.site_lon_deg):
        h = float(meta.site_height_m) if _finite(meta.site_height_m) else 0.0
        note = "" if _finite(meta.site_height_m) else ", height unknown: 0 m"
        return (earth_location(float(meta.site_lat_deg), float(meta.site_lon_deg), h),
                f"header latitude/longitude{note}")
    if meta.site_name:
        try:
            s = find_site(meta.site_name, config=config)
        except ConfigError:
            return None, f"site {meta.site_name!r} in the file is not in the site table"
        return s.location(), f"site {s.key} named in the file ({s.source})"
    return None, "no observatory site in the file"
