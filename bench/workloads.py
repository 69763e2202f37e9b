"""The workloads the benchmark times, each run as a whole process by ``run_bench.py``.

Usage (normally called by run_bench.py): ``python bench/workloads.py MODE LISTFILE OUTJSON
[--workers N] [--lines]``. MODE is one of:

``io``                the I/O floor: open the FITS file, read data and header, close;
``starlines``         :func:`starlines.pipeline.analyse_file` per file, in this process
                      (read, continuum, every catalogue line, classification, velocity with
                      barycentric correction; no figures);
``specutils``         the straightforward specutils + astropy pipeline below;
``specutils-tuned``   the same pipeline tuned: explicit format, a linear fitter, one region
                      extraction per line;
``engine``            analyse_file through :func:`starlines.engines.map_files` with
                      ``--workers N`` (N = 1 is the serial engine);
``memory``            ``engine`` without keeping results, sampling this process's RSS;
``flat-check``        specutils EWs with the true flat continuum (the EW cross-check);
``profile``           cProfile of analyse_file (first file is a warm-up, not profiled).

The child reports, as JSON: import time, loop time, per-file times and (with ``--lines``)
the equivalent widths of the 16 benchmark lines, so the parent can compare methods.
"""

from __future__ import annotations

import json
import os
import sys
import time
import warnings

T0 = time.perf_counter()

#: The 16 lines of the specutils pipelines: starlines id -> half-width of the window (A).
#: Balmer windows are wide for the Stark wings; the rest hold a rotating He/metal line.
LINES = {
    "HeI4009": 8.0, "HeI4026": 8.0, "HI4102": 20.0, "HeI4121": 6.0, "HeI4144": 8.0,
    "HeII4200": 8.0, "HI4340": 20.0, "HeI4388": 8.0, "HeI4471": 8.0, "HeII4541": 8.0,
    "SiIII4553": 5.0, "HeII4686": 8.0, "HeI4713": 8.0, "HI4861": 20.0, "HeI4922": 8.0,
    "HeI5016": 8.0,
}


def make_io():
    """The I/O floor: open, read data and header, close."""
    import numpy as np
    from astropy.io import fits

    def work(path):
        with fits.open(path, memmap=False) as hdul:
            data = np.asarray(hdul[0].data, dtype=float)
            header = hdul[0].header
            assert data.size and "CRVAL1" in header
        return {}

    return work


def make_starlines():
    """starlines' full per-file analysis without figures."""
    from starlines.pipeline import analyse_file

    def work(path):
        res = analyse_file(path)
        return {ln["line"]: ln["ew"] for ln in res.lines
                if (ln["line"] in LINES or ln["line"] in CHECK_LINES)
                and ln.get("status") == "measured"}

    return work


def make_specutils(tuned: bool):
    """16 lines with specutils: continuum with line exclusions, EW and centroid per line."""
    import astropy.units as u
    import numpy as np
    from astropy.modeling import fitting, models
    from specutils import SpectralRegion, Spectrum
    from specutils.analysis import centroid, equivalent_width
    from specutils.fitting import fit_generic_continuum
    from specutils.manipulation import extract_region

    from starlines.lines import line  # the same catalogue wavelengths

    windows = [(ident, line(ident).wavelength("air"), hw) for ident, hw in LINES.items()]
    regions = [SpectralRegion((w - hw) * u.AA, (w + hw) * u.AA) for _, w, hw in windows]

    warnings.simplefilter("ignore")  # astropy's per-file FITS/fitter notices cost print time

    def naive(path):
        spec = Spectrum.read(path)
        fit = fit_generic_continuum(spec, exclude_regions=regions)
        norm = spec / fit(spec.spectral_axis)
        row = {}
        for (ident, _w, _hw), region in zip(windows, regions):
            ew = equivalent_width(norm, regions=region)
            cen = centroid(norm - 1 * norm.flux.unit, regions=region)
            assert np.isfinite(cen.value)
            row[ident] = float(ew.to_value(u.AA))
        return row

    def fast(path):
        spec = Spectrum.read(path, format="wcs1d-fits")
        fit = fit_generic_continuum(spec, exclude_regions=regions, model=models.Chebyshev1D(3),
                                    fitter=fitting.LinearLSQFitter())
        norm = spec / fit(spec.spectral_axis)
        row = {}
        for (ident, _w, _hw), region in zip(windows, regions):
            sub = extract_region(norm, region)
            ew = equivalent_width(sub)
            cen = centroid(sub - 1 * sub.flux.unit)
            assert np.isfinite(cen.value)
            row[ident] = float(ew.to_value(u.AA))
        return row

    return fast if tuned else naive


#: Isolated lines for the EW cross-check with the known flat continuum (no neighbour within
#: the +-12 A window in the benchmark spectra).
CHECK_LINES = ("HeI4144", "HeI4388", "HeII4686", "HeI4713", "HeI4922", "HeI5016", "HeII5411")
CHECK_HALF_WIDTH = 12.0
#: Continuum level of the benchmark spectra (bench/make_spectra.py).
CONTINUUM = 1000.0


def make_flat_check():
    """specutils EWs where specutils is right: the true (flat) continuum, wide windows."""
    import astropy.units as u
    from specutils import SpectralRegion, Spectrum
    from specutils.analysis import equivalent_width

    from starlines.lines import line

    warnings.simplefilter("ignore")
    regions = {}
    for ident in CHECK_LINES:
        w = line(ident).wavelength("air")
        regions[ident] = SpectralRegion((w - CHECK_HALF_WIDTH) * u.AA,
                                        (w + CHECK_HALF_WIDTH) * u.AA)

    def work(path):
        spec = Spectrum.read(path, format="wcs1d-fits")
        norm = spec / (CONTINUUM * spec.flux.unit)
        return {ident: float(equivalent_width(norm, regions=r).to_value(u.AA))
                for ident, r in regions.items()}

    return work


def run_engine(paths, workers, keep: bool):
    from starlines.engines import map_files
    from starlines.pipeline import analyse_file

    t_import = time.perf_counter() - T0
    start = time.perf_counter()
    first, n, samples, stamps = None, 0, [], []
    step = max(1, len(paths) // 10)
    for _path, result in map_files(analyse_file, paths, workers=workers, progress=False):
        n += 1
        stamps.append(time.perf_counter() - start)
        if first is None:
            first = stamps[0]
        if not keep:
            del result
        if n % step == 0:
            samples.append((n, _rss_mb()))
    if not keep:
        stamps = stamps[:: max(1, n // 1000)]
    return t_import, {"first_result": first, "n_done": n, "rss_samples": samples,
                      "stamps": stamps}


def run_profile(paths):
    """cProfile of analyse_file over ``paths[1:]`` (the first call warms up)."""
    import cProfile
    import io
    import pstats

    from starlines.pipeline import analyse_file

    t_import = time.perf_counter() - T0
    analyse_file(paths[0])
    prof = cProfile.Profile()
    prof.enable()
    for path in paths[1:]:
        analyse_file(path)
    prof.disable()
    buf = io.StringIO()
    stats = pstats.Stats(prof, stream=buf)
    stats.sort_stats("cumulative").print_stats(r"starlines", 35)
    stats.sort_stats("tottime").print_stats(25)
    return t_import, {"text": buf.getvalue()}


def _rss_mb() -> float:
    with open("/proc/self/status") as fh:
        for text in fh:
            if text.startswith("VmRSS:"):
                return int(text.split()[1]) / 1024.0
    return float("nan")


def main(argv: list[str]) -> int:
    mode, listfile, outfile = argv[:3]
    workers = int(argv[argv.index("--workers") + 1]) if "--workers" in argv else 1
    want_lines = "--lines" in argv
    with open(listfile) as fh:
        paths = [p.strip() for p in fh if p.strip()]
    makers = {"io": make_io, "starlines": make_starlines,
              "specutils": lambda: make_specutils(False),
              "specutils-tuned": lambda: make_specutils(True), "flat-check": make_flat_check}
    extra, ews, times = {}, {}, []
    if mode in makers:
        work = makers[mode]()
        t_import = time.perf_counter() - T0
        for path in paths:
            t = time.perf_counter()
            row = work(path)
            times.append(time.perf_counter() - t)
            if want_lines:
                ews[os.path.basename(path)] = row
    elif mode in ("engine", "memory"):
        t_import, extra = run_engine(paths, workers, keep=mode == "engine")
    elif mode == "profile":
        t_import, extra = run_profile(paths)
    else:
        print(f"unknown mode {mode!r}", file=sys.stderr)
        return 2
    loop = time.perf_counter() - T0 - t_import
    with open(outfile, "w") as fh:
        json.dump({"mode": mode, "n": len(paths), "t_import": t_import, "t_loop": loop,
                   "times": times, "ews": ews, **extra}, fh)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
