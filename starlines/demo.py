"""An invented night for demonstrations and tests.

Everything here is made up: the young cluster **Halvard 7** and its stars (``H7-01`` ...),
the field stars (``FLD-...``), the **Corrig Ridge Observatory** (an invented site at the
coordinates in :data:`SITE`), and the night of 2024-02-17. The spectra are synthetic
(:func:`starlines.synth.synthetic_spectrum`), written as FITS images with a linear WCS in
air (``CTYPE1 = 'AWAV'``), at 2.0-2.6 A FWHM and S/N 80-300, with a deterministic seed.

Planted cases (what the triage must find):

=============  =============================================================  ===============
star           what is planted                                                expected flag
=============  =============================================================  ===============
H7-03          O5 If: He II 4686 and N III 4634-42 in emission                of-emission
H7-11          B1 Ve: double-peaked Balmer emission (H-alpha covered)         balmer-emission
H7-14          O8 V + O9.5 V, +-120 km/s                                      double-lined
H7-17          O9.5 V with v sin i = 340 km/s                                 fast-rotator
H7-20          B0 V moving 85 km/s faster than the cluster                    velocity-outlier
FLD-205        B2 V with He/H = 0.30 by number (normal 0.10)                  helium-strong
H7-23          an O9 V exposed far too briefly: S/N 22                        low-snr
H7-26          a FITS file cut short by a failed transfer                     failed
H7-08          catalogue (target list) gives O7 V; the star is a B1 V         catalogue-type-differs
=============  =============================================================  ===============

:func:`write_demo_night` writes the FITS files, the target list and a README; the
``starlines demo`` command then triages them.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np

__all__ = ["DemoStar", "demo_stars", "write_demo_night", "SITE", "NIGHT", "CLUSTER",
           "PLANTED"]

#: The invented cluster: name, ICRS centre (deg), systemic velocity (km/s).
CLUSTER = {"name": "Halvard 7", "ra": 132.75, "dec": -46.35, "rv": 24.0}
#: The invented observatory (geodetic WGS84, longitude east positive).
SITE = {"name": "Corrig Ridge Observatory", "lat": -27.6312, "lon": -68.2145,
        "height": 2875.0}
#: The invented night: evening date and start of the first exposure (UTC).
NIGHT = {"date": "2024-02-17", "start": "2024-02-18T00:40:00"}
#: Seed of every random number of the demo.
SEED = 20240217

#: Planted cases: star name -> the flag the triage must raise.
PLANTED = {
    "H7-03": "of-emission",
    "H7-11": "balmer-emission",
    "H7-14": "double-lined",
    "H7-17": "fast-rotator",
    "H7-20": "velocity-outlier",
    "FLD-205": "helium-strong",
    "H7-23": "low-snr",
    "H7-26": "failed",
    "H7-08": "catalogue-type-differs",
}


@dataclass
class DemoStar:
    """One invented star and how its spectrum is made.

    Attributes
    ----------
    name : str
        Object name.
    sptype : str
        True type (what the synthetic spectrum is made from).
    catalogue_type : str
        Type written in the target list (differs from ``sptype`` once, on purpose).
    rv : float
        True barycentric radial velocity (km/s); the file's topocentric wavelengths carry
        ``rv`` minus the barycentric correction of the exposure.
    expected_rv : float
        Systemic velocity in the target list (km/s).
    vsini : float
        Projected rotation (km/s).
    snr : float
        S/N per pixel of the continuum.
    he : float
        Helium abundance by number, He/H.
    halpha : bool
        Extend the spectrum to 6700 A.
    tilt : float
        Fractional continuum slope across 1000 A (0 = flat).
    companion : dict or None
        Second star of a double-lined binary (``sptype, rv, vsini, light``).
    emission : dict
        Emission components for :func:`starlines.synth.synthetic_spectrum`: line id ->
        ``{"ew": A (negative), "fwhm_kms": ..., "peak_separation_kms": ...}``; a
        separation > 0 gives a double peak.
    corrupt : bool
        Write a truncated file.
    ra, dec : float
        ICRS position (deg).
    """

    name: str
    sptype: str
    catalogue_type: str = ""
    rv: float = 0.0
    expected_rv: float = math.nan
    vsini: float = 80.0
    snr: float = 150.0
    he: float = 0.1
    halpha: bool = False
    tilt: float = 0.0
    companion: dict | None = None
    emission: dict = field(default_factory=dict)
    corrupt: bool = False
    ra: float = 0.0
    dec: float = 0.0


_CLUSTER_TYPES = ("O6 V", "O7 V", "O7.5 V", "O8 V", "O8.5 V", "O9 V", "O9 III", "O9.5 V",
                  "B0 V", "B0.5 V", "B1 V", "B1 III", "B1.5 V", "B2 V", "O6.5 III", "B0 III",
                  "O9.7 V", "B0.5 III", "B2 III", "O8 III")
_FIELD_TYPES = ("O7 V", "O9.5 III", "B0 V", "B1 V", "B0.5 III", "O8.5 V", "B1.5 III",
                "B2 V")


def demo_stars(seed: int = SEED) -> list[DemoStar]:
    """The invented stars of the night, planted cases included (deterministic)."""
    rng = np.random.default_rng(seed)
    stars: list[DemoStar] = []
    for i in range(1, 27):
        name = f"H7-{i:02d}"
        sptype = _CLUSTER_TYPES[(i * 7) % len(_CLUSTER_TYPES)]
        stars.append(DemoStar(
            name=name, sptype=sptype, catalogue_type=sptype,
            rv=CLUSTER["rv"] + rng.normal(0.0, 3.0), expected_rv=CLUSTER["rv"],
            vsini=float(rng.uniform(30, 120)), snr=float(rng.uniform(80, 300)),
            halpha=i % 6 == 0, tilt=float(rng.choice([0.0, 0.0, 0.25, -0.3])),
            ra=CLUSTER["ra"] + rng.normal(0, 0.05), dec=CLUSTER["dec"] + rng.normal(0, 0.05),
        ))
    for j, sptype in enumerate(_FIELD_TYPES):
        rv = CLUSTER["rv"] + rng.uniform(-12.0, 12.0)
        stars.append(DemoStar(
            name=f"FLD-{201 + j}", sptype=sptype, catalogue_type=sptype, rv=rv,
            expected_rv=round(rv + rng.normal(0, 2.0), 1), vsini=float(rng.uniform(30, 120)),
            snr=float(rng.uniform(80, 300)), halpha=j % 3 == 0,
            tilt=float(rng.choice([0.0, 0.3])),
            ra=CLUSTER["ra"] + rng.uniform(-1.5, 1.5), dec=CLUSTER["dec"] + rng.uniform(-1, 1),
        ))
    by_name = {s.name: s for s in stars}
    _plant(by_name)
    return stars


def _plant(by_name: dict[str, DemoStar]) -> None:
    """Turn some of the stars into the planted cases of :data:`PLANTED`."""
    s = by_name["H7-03"]
    s.sptype = s.catalogue_type = "O5 If"
    s.emission = {"HeII4686": {"ew": -1.6, "fwhm_kms": 450.0},
                  "NIII4634": {"ew": -0.25, "fwhm_kms": 150.0},
                  "NIII4641": {"ew": -0.45, "fwhm_kms": 150.0},
                  "NIII4642": {"ew": -0.25, "fwhm_kms": 150.0}}
    s = by_name["H7-11"]
    s.sptype = s.catalogue_type = "B1 V"
    s.catalogue_type = "B1 Ve"
    s.vsini, s.halpha = 250.0, True
    s.emission = {
        "HI6563": {"ew": -14.0, "fwhm_kms": 220.0, "peak_separation_kms": 260.0},
        "HI4861": {"ew": -5.5, "fwhm_kms": 200.0, "peak_separation_kms": 260.0},
        "HI4340": {"ew": -1.5, "fwhm_kms": 200.0, "peak_separation_kms": 260.0},
    }
    s = by_name["H7-14"]
    s.sptype = s.catalogue_type = "O8 V"
    s.vsini = 60.0
    s.rv = CLUSTER["rv"] + 120.0
    s.companion = {"sptype": "O9.5 V", "rv": CLUSTER["rv"] - 120.0, "vsini": 60.0,
                   "light": 0.6}
    s = by_name["H7-17"]
    s.sptype = s.catalogue_type = "O9.5 V"
    s.vsini = 340.0
    s = by_name["H7-20"]
    s.sptype = s.catalogue_type = "B0 V"
    s.rv = CLUSTER["rv"] + 85.0
    s = by_name["FLD-205"]
    s.sptype = s.catalogue_type = "B2 V"
    s.he, s.snr, s.vsini = 0.30, 250.0, 60.0
    s = by_name["H7-23"]
    s.sptype = s.catalogue_type = "O9 V"
    s.snr = 22.0
    by_name["H7-26"].corrupt = True
    s = by_name["H7-08"]
    s.sptype = "B1 V"
    s.catalogue_type = "O7 V"


def _parameters(sptype: str) -> tuple[float, float]:
    from starlines.sptype import parse_sptype
    from starlines.synth import parameters_for_type

    st = parse_sptype(sptype)
    return parameters_for_type(st.subtype, st.lumclass or "V")


def barycentric_correction(star: DemoStar, index: int) -> float:
    """Barycentric correction (km/s) of the star's exposure at mid-exposure (astropy)."""
    import astropy.units as u
    from astropy.coordinates import EarthLocation, SkyCoord
    from astropy.time import Time, TimeDelta

    from starlines.offline import configure_astropy_offline

    configure_astropy_offline()
    start, exptime = _timing(star, index)
    mid = Time(start, scale="utc") + TimeDelta(exptime / 2, format="sec")
    loc = EarthLocation.from_geodetic(SITE["lon"] * u.deg, SITE["lat"] * u.deg,
                                      SITE["height"] * u.m)
    coord = SkyCoord(star.ra * u.deg, star.dec * u.deg, frame="icrs")
    corr = coord.radial_velocity_correction(kind="barycentric", obstime=mid, location=loc)
    return float(corr.to_value(u.km / u.s))


def _timing(star: DemoStar, index: int) -> tuple[str, float]:
    """Start (ISO UTC) and length (s) of the star's exposure."""
    from astropy.time import Time, TimeDelta

    exptime = 30.0 if star.snr < 50 else float(np.clip(6e5 / star.snr**1.2, 120, 1800))
    start = Time(NIGHT["start"], scale="utc") + TimeDelta(index * 660.0, format="sec")
    return start.isot[:19], round(exptime, 1)


def _normalized_flux(star: DemoStar, wave: np.ndarray, fwhm: float,
                     shift: float = 0.0) -> np.ndarray:
    """Normalized flux with every velocity moved by ``shift`` (km/s; topocentric frame)."""
    from starlines.synth import synthetic_spectrum

    def one(sptype, rv, vsini, he, emission=None):
        teff, logg = _parameters(sptype)
        return synthetic_spectrum(wave, teff=teff, logg=logg, he=he, vsini=vsini, rv=rv,
                                  resolution_fwhm=fwhm, medium="air",
                                  emission_lines=emission or None)

    flux = one(star.sptype, star.rv + shift, star.vsini, star.he, star.emission)
    if star.companion:
        comp = star.companion
        flux = (flux + comp["light"] * one(comp["sptype"], comp["rv"] + shift, comp["vsini"],
                                           0.1)) / (1 + comp["light"])
    return np.asarray(flux, dtype=float)


def _header(star: DemoStar, index: int, wave0: float, step: float, fwhm: float):
    from astropy.coordinates import EarthLocation
    from astropy.io import fits

    start, exptime = _timing(star, index)
    loc = EarthLocation.from_geodetic(SITE["lon"], SITE["lat"], SITE["height"])
    h = fits.Header()
    cards = [
        ("OBJECT", star.name, "target name"),
        ("RA", round(star.ra, 6), "[deg] ICRS right ascension"),
        ("DEC", round(star.dec, 6), "[deg] ICRS declination"),
        ("RADESYS", "ICRS", ""), ("EQUINOX", 2000.0, ""),
        ("DATE-OBS", start, "UTC start of exposure"),
        ("EXPTIME", exptime, "[s] exposure time"),
        ("OBSERVAT", SITE["name"], "invented site of the demo night"),
        ("SITELAT", SITE["lat"], "[deg] geodetic latitude"),
        ("SITELONG", SITE["lon"], "[deg] east longitude"),
        ("SITEELEV", SITE["height"], "[m] height above WGS84 ellipsoid"),
        ("OBSGEO-X", round(float(loc.x.value), 2), "[m]"),
        ("OBSGEO-Y", round(float(loc.y.value), 2), "[m]"),
        ("OBSGEO-Z", round(float(loc.z.value), 2), "[m]"),
        ("TELESCOP", "CRO 1.6m", "invented"), ("INSTRUME", "demo long-slit", "invented"),
        ("CTYPE1", "AWAV", "air wavelength"), ("CUNIT1", "Angstrom", ""),
        ("CRPIX1", 1.0, ""), ("CRVAL1", wave0, ""), ("CDELT1", step, ""),
        ("SPECSYS", "TOPOCENT", "wavelengths not corrected for Earth motion"),
        ("RESOLUTN", round(fwhm, 3), "instrumental FWHM [Angstrom]"),
        ("BUNIT", "adu", ""),
        ("ORIGIN", "starlines demo", "invented data: for demonstrations only"),
    ]
    for key, value, comment in cards:
        h[key] = (value, comment)
    return h


def _write_star(star: DemoStar, index: int, folder: str, rng) -> str:
    from astropy.io import fits

    step = 0.6
    wave0, wave1 = 3850.0, 6700.0 if star.halpha else 5050.0
    wave = wave0 + step * np.arange(int((wave1 - wave0) / step) + 1)
    fwhm = float(rng.uniform(2.0, 2.6))
    norm = _normalized_flux(star, wave, fwhm, shift=-barycentric_correction(star, index))
    level = 1200.0 * (1 + star.tilt * (wave - 4450.0) / 1000.0)
    flux = norm * level
    flux = flux + rng.normal(0.0, 1.0, wave.size) * level / star.snr
    hdu = fits.PrimaryHDU(flux.astype(np.float32), header=_header(star, index, wave0, step,
                                                                   fwhm))
    path = os.path.join(folder, f"{NIGHT['date'].replace('-', '')}_{index + 1:03d}_"
                                f"{star.name}.fits")
    hdu.writeto(path, overwrite=True)
    if star.corrupt:  # a transfer that died: header and a third of the data
        size = os.path.getsize(path)
        with open(path, "r+b") as fh:
            fh.truncate(2880 + (size - 2880) // 3)
    return path


def _write_targets(stars: list[DemoStar], path: str) -> None:
    from astropy.table import Table

    tab = Table(
        {"name": [s.name for s in stars], "ra": [round(s.ra, 6) for s in stars],
         "dec": [round(s.dec, 6) for s in stars],
         "sptype": [s.catalogue_type or s.sptype for s in stars],
         "rv": [s.expected_rv for s in stars]},
    )
    tab["ra"].unit = tab["dec"].unit = "deg"
    tab["rv"].unit = "km / s"
    tab.meta["comments"] = [
        f"Target list of the invented demo night ({CLUSTER['name']} and field); "
        "rv = expected systemic velocity. Invented data: for demonstrations only."]
    tab.write(path, format="ascii.ecsv", overwrite=True)


_README = """Demo night: invented data, for demonstrations only
=================================================

Cluster {cluster} and field stars, observed on {date} at the {site}
(lat {lat}, lon {lon}, {height:.0f} m). None of these exist: the spectra are synthetic
(starlines.synth), with Gaussian noise from seed {seed}.

night/        the spectra (FITS, linear WCS, air wavelengths)
targets.ecsv  target list: catalogue types (one deliberately wrong) and expected velocities
triage/       what `starlines triage night --targets targets.ecsv` made of it

Planted cases: {planted}.
"""


def write_demo_night(out_dir: str | os.PathLike, *, seed: int = SEED,
                     stars: list[DemoStar] | None = None) -> dict:
    """Write the demo night: ``night/*.fits``, ``targets.ecsv`` and ``README.txt``.

    Parameters
    ----------
    out_dir : str or path-like
        Folder to write into (created).
    seed : int
        Seed of the noise and of the star properties.
    stars : list of DemoStar, optional
        Stars to write; :func:`demo_stars` by default.

    Returns
    -------
    dict
        ``night`` (folder of spectra), ``targets`` (target list), ``files`` (list).
    """
    out_dir = os.fspath(out_dir)
    night = os.path.join(out_dir, "night")
    os.makedirs(night, exist_ok=True)
    stars = demo_stars(seed) if stars is None else stars
    rng = np.random.default_rng(seed + 1)
    files = [_write_star(s, i, night, rng) for i, s in enumerate(stars)]
    targets = os.path.join(out_dir, "targets.ecsv")
    _write_targets(stars, targets)
    with open(os.path.join(out_dir, "README.txt"), "w", encoding="utf-8") as fh:
        fh.write(_README.format(
            cluster=CLUSTER["name"], date=NIGHT["date"], site=SITE["name"], lat=SITE["lat"],
            lon=SITE["lon"], height=SITE["height"], seed=seed,
            planted=", ".join(f"{k} ({v})" for k, v in PLANTED.items())))
    return {"night": night, "targets": targets, "files": files}
