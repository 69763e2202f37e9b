"""Write N seeded synthetic hot-star spectra as FITS files for the benchmark.

Every spectrum covers 3900-5500 Angstrom (air) at 0.5 Angstrom per pixel (3201 pixels) in
the primary HDU with a linear WCS (``CTYPE1 = 'AWAV'``), a *flat* continuum of 1000 counts
and Gaussian noise at S/N 100-300. Line profiles come from
:func:`starlines.synth.synthetic_spectrum` (O4-B2, luminosity class V or III,
v sin i 0-250 km/s, RV -100..+100 km/s, instrumental FWHM 2.0-2.6 Angstrom). The header
carries the start of the exposure (all on one night, as in a real night's folder),
coordinates and a site so that the velocity stage does its full barycentric work.
Invented data, for benchmarking only.

The true equivalent widths of each spectrum (:func:`starlines.synth.synthetic_ews` of its
model parameters, before rotation and instrument, which preserve EW) are written to
``truth.json`` beside the files.
"""

from __future__ import annotations

import json
import os
import shutil

import numpy as np

#: Seed of every random number in the benchmark data.
SEED = 20260101
WAVE0, STEP, NPIX = 3900.0, 0.5, 3201
#: Invented site (geodetic, degrees east / metres): any site would do.
SITE = (-70.40, -24.60, 2400.0)
TYPES = [(s, lc) for s in (4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 9.5, 10.0, 10.5, 11.0, 12.0)
         for lc in ("V", "III")]


def wavelength() -> np.ndarray:
    """Air wavelength grid of every benchmark spectrum (Angstrom)."""
    return WAVE0 + STEP * np.arange(NPIX)


def _site_xyz() -> tuple[float, float, float]:
    from astropy import units as u
    from astropy.coordinates import EarthLocation

    lon, lat, h = SITE
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, h * u.m)
    return tuple(round(float(c.to_value(u.m)), 2) for c in (loc.x, loc.y, loc.z))


def _header(i: int, params: dict, xyz):
    from astropy.io import fits

    h = fits.Header()
    h["OBJECT"] = (f"BENCH-{i:05d}", "invented benchmark star")
    h["RA"], h["DEC"] = (params["ra"], "[deg] ICRS"), (params["dec"], "[deg] ICRS")
    h["RADESYS"] = "ICRS"
    h["DATE-OBS"] = (params["date_obs"], "UTC start of exposure")
    h["EXPTIME"] = (600.0, "[s]")
    for key, value in zip(("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z"), xyz):
        h[key] = (value, "[m] invented site")
    h["CTYPE1"], h["CUNIT1"] = ("AWAV", "air wavelength"), "Angstrom"
    h["CRPIX1"], h["CRVAL1"], h["CDELT1"] = 1.0, WAVE0, STEP
    h["SPECSYS"] = "TOPOCENT"
    h["RESOLUTN"] = (round(params["fwhm"], 3), "instrumental FWHM [Angstrom]")
    h["BUNIT"] = "adu"
    h["ORIGIN"] = ("starlines bench", "invented data: for benchmarking only")
    return h


def _night_time(i: int) -> str:
    minutes = 30 + 3 * (i % 160)
    return f"2025-03-14T{minutes // 60:02d}:{minutes % 60:02d}:{(7 * i) % 60:02d}"


def draw_parameters(n: int, seed: int = SEED) -> list[dict]:
    """Model parameters of ``n`` benchmark spectra (deterministic for a seed)."""
    from starlines.synth import parameters_for_type

    rng = np.random.default_rng(seed)
    out = []
    for i in range(n):
        subtype, lc = TYPES[rng.integers(len(TYPES))]
        teff, logg = parameters_for_type(subtype, lc)
        out.append({
            "subtype": subtype, "lumclass": lc, "teff": teff, "logg": logg, "he": 0.1,
            "vsini": float(rng.uniform(0, 250)), "rv": float(rng.uniform(-100, 100)),
            "fwhm": float(rng.uniform(2.0, 2.6)), "snr": float(rng.uniform(100, 300)),
            "ra": float(rng.uniform(0, 360)), "dec": float(rng.uniform(-80, 20)),
            # one night, an exposure every 3 minutes from 00:30 UT (wraps after 8 h)
            "date_obs": _night_time(i),
            "noise_seed": int(rng.integers(2**31)),
        })
    return out


def write_spectra(folder: str | os.PathLike, n: int, *, distinct: int | None = None,
                  seed: int = SEED) -> list[str]:
    """Write ``n`` benchmark spectra into ``folder``; return their paths.

    Parameters
    ----------
    folder : str or path-like
        Output folder (created).
    n : int
        Number of files.
    distinct : int, optional
        Compute only this many different spectra and copy them round-robin to the other
        names (for the memory check with 10^4 files, where only the count matters).
    seed : int
        Seed of the parameters and the noise.
    """
    from astropy.io import fits

    from starlines.synth import synthetic_ews, synthetic_spectrum

    os.makedirs(folder, exist_ok=True)
    m = n if distinct is None else min(n, distinct)
    params = draw_parameters(m, seed)
    xyz = _site_xyz()
    wave = wavelength()
    paths, truth = [], {}
    for i, p in enumerate(params):
        norm = synthetic_spectrum(wave, teff=p["teff"], logg=p["logg"], he=p["he"],
                                  vsini=p["vsini"], rv=p["rv"], resolution_fwhm=p["fwhm"],
                                  medium="air")
        rng = np.random.default_rng(p["noise_seed"])
        flux = 1000.0 * norm + rng.normal(0.0, 1000.0 / p["snr"], NPIX)
        path = os.path.join(folder, f"bench_{i:05d}.fits")
        fits.PrimaryHDU(flux.astype(np.float32), header=_header(i, p, xyz)).writeto(
            path, overwrite=True)
        paths.append(path)
        truth[os.path.basename(path)] = dict(
            p, ews=synthetic_ews(p["teff"], p["logg"], p["he"]))
    for i in range(m, n):
        path = os.path.join(folder, f"bench_{i:05d}.fits")
        shutil.copyfile(paths[i % m], path)
        paths.append(path)
    with open(os.path.join(folder, "truth.json"), "w") as fh:
        json.dump(truth, fh)
    return paths


if __name__ == "__main__":  # python bench/make_spectra.py FOLDER N [DISTINCT]
    import sys

    argv = sys.argv[1:]
    made = write_spectra(argv[0], int(argv[1]),
                         distinct=int(argv[2]) if len(argv) > 2 else None)
    with open(os.path.join(argv[0], "paths.txt"), "w") as fh:
        fh.write("\n".join(made))
