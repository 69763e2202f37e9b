"""Per-star classification table on the real reference spectra (run by hand).

Reads /work/shared/reference-spectra (MILES v9.1 and Jacoby et al. 1984; never copied into
the repository), measures and classifies every star listed in
``tests/test_reference_accuracy.py`` (same star lists, same library types, same scoring),
and prints one row per star: library type, our type, rules and model subtypes, |delta|,
luminosity class agreement and the criteria the rules used, then the summary figures.

Usage::

    . .venv/bin/activate
    python bench/reference_accuracy.py                 # both libraries
    python bench/reference_accuracy.py --library miles
    python bench/reference_accuracy.py --cache /tmp/lt.pkl   # reuse measured line tables
    python bench/reference_accuracy.py --lines HeI4471,SiIII4553   # also print these EWs
    python bench/reference_accuracy.py --library miles --fwhm 5   # MILES smoothed to 5 A

``--cache`` stores the line tables after the first run so that later runs only re-classify
(use it while changing classification code, never while changing measurement code).
"""

from __future__ import annotations

import argparse
import importlib.util
import math
import pickle
import sys
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
TESTS = HERE.parent / "tests" / "test_reference_accuracy.py"


def _test_module():
    """The accuracy test module: star lists, library paths and scoring live there only."""
    spec = importlib.util.spec_from_file_location("reference_accuracy_lists", TESTS)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _items(mod, library: str):
    if library == "miles":
        return [(mod.MILES / f"MILES_res2.50_star_m{num}V.fits", name, t)
                for num, (name, t, _) in mod.MILES_STARS.items()]
    return [(mod.JACOBY / f"{stem}_jacoby_regridded.txt", stem, t)
            for stem, (t, _) in mod.JACOBY_STARS.items()]


def degrade(spec, fwhm: float):
    """The spectrum convolved with a Gaussian to a total FWHM of ``fwhm`` Angstrom.

    The kernel FWHM is sqrt(fwhm^2 - old^2) (Gaussians add in quadrature); the stated
    resolution in the metadata becomes ``fwhm``. Needs a uniform wavelength step (MILES).
    """
    import dataclasses

    import numpy as np
    from scipy.ndimage import gaussian_filter1d

    old = spec.meta.resolution_fwhm or 0.0
    if fwhm <= old:
        return spec
    step = float(np.median(np.diff(spec.wavelength)))
    sigma_pix = math.sqrt(fwhm**2 - old**2) / (2.0 * math.sqrt(2.0 * math.log(2.0))) / step
    flux = gaussian_filter1d(np.asarray(spec.flux, float), sigma_pix, mode="nearest")
    meta = dataclasses.replace(spec.meta, resolution_fwhm=fwhm)
    return dataclasses.replace(spec, flux=flux, meta=meta)


def _tables(items, cache: Path | None, fwhm: float | None = None):
    from starlines.measure import measure_spectrum
    from starlines.readers import read_spectrum

    store = {}
    if cache is not None and cache.exists():
        store = pickle.loads(cache.read_bytes())
    changed = False
    for path, _, _ in items:
        key = str(path) if fwhm is None else f"{path}@{fwhm:g}"
        if key not in store:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                spec = read_spectrum(path)
                if fwhm is not None:
                    spec = degrade(spec, fwhm)
                store[key] = measure_spectrum(spec).table
            changed = True
    if cache is not None and changed:
        cache.write_bytes(pickle.dumps(store))
    return store


def _printed_subtype(sptype: str) -> float:
    """Subtype number of the printed type (e.g. "B2.5 V" -> 12.5); NaN when none."""
    from starlines.errors import ClassificationError
    from starlines.sptype import parse_sptype

    try:
        return float(parse_sptype(sptype).subtype_range[0])
    except (ClassificationError, ValueError):  # no type printed (wr-like, not-hot-star)
        return math.nan


def _criteria(notes: str) -> str:
    """The rule values and the luminosity source from a classification's notes."""
    keep = [n for n in notes.split("; ") if "=" in n or n.startswith("luminosity from")]
    return "; ".join(k.replace("luminosity from ", "L:") for k in keep)


def run(library: str, mod, cache: Path | None, extra_lines: list[str],
        fwhm: float | None = None) -> list[dict]:
    """Classify every star of one library; print and return the per-star rows."""
    from starlines.classify import classify

    items = _items(mod, library)
    if not all(Path(p).exists() for p, _, _ in items):
        print(f"{library}: reference spectra not found under {mod.ROOT}")
        return []
    tables = _tables(items, cache, fwhm)
    rows = []
    head = f"{'star':10s} {'library':10s} {'ours':14s} {'rules':>5s} {'model':>5s} " \
           f"{'final':>5s} {'|d|':>4s} lum"
    if extra_lines:
        head += " " + " ".join(f"{i:>9s}" for i in extra_lines)
    label = library if fwhm is None else f"{library} smoothed to {fwhm:g} A FWHM"
    print(f"\n== {label} ==\n{head}  criteria")
    for path, name, lib in items:
        table = tables[str(path) if fwhm is None else f"{path}@{fwhm:g}"]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            c = classify(table)
        lum = c.sptype.split(" ")[1] if " " in c.sptype else ""
        lum = lum.rstrip(":").rstrip("efp()").rstrip(":").split("(")[0]
        d = mod._delta(c.subtype, lib)
        ok = mod._lum_agrees(lum, lib)
        row = dict(delta=d, lum_ok=ok, delta_printed=mod._delta(_printed_subtype(c.sptype), lib))
        rows.append(row)
        line = (f"{name:10s} {lib:10s} {c.sptype:14s} {c.rules_subtype:5.2f} "
                f"{c.model_subtype:5.2f} {c.subtype:5.2f} {d:4.2f} {'ok ' if ok else 'NO '}")
        if extra_lines:
            ews = {str(r['line']): float(getattr(r['ew'], 'value', r['ew'])) for r in table}
            line += " " + " ".join(f"{ews.get(i, math.nan):9.3f}" for i in extra_lines)
        print(f"{line}  {_criteria(c.notes)}")
    s = mod.summary(rows)
    print(f"{label}: n={s['n']} median |d| {s['median']:.2f}, within 1 "
          f"{100 * s['within_one']:.0f} %, within 1/2 {100 * s['within_half']:.0f} %, "
          f"lumclass {100 * s['lum']:.0f} %")
    p = mod.summary([dict(delta=r["delta_printed"], lum_ok=r["lum_ok"]) for r in rows])
    print(f"{label}, scored on the printed MK types (standard subtypes) instead: median |d| "
          f"{p['median']:.2f}, within 1 {100 * p['within_one']:.0f} %, within 1/2 "
          f"{100 * p['within_half']:.0f} %")
    return rows


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--library", choices=("miles", "jacoby", "both"), default="both")
    p.add_argument("--cache", type=Path, default=None,
                   help="pickle of measured line tables (created if absent)")
    p.add_argument("--lines", default="", help="comma-separated line ids whose EWs to print")
    p.add_argument("--fwhm", type=float, default=None,
                   help="smooth the spectra to this FWHM (Angstrom) first (MILES only)")
    a = p.parse_args(argv)
    mod = _test_module()
    extra = [s for s in a.lines.split(",") if s]
    libs = ("miles", "jacoby") if a.library == "both" else (a.library,)
    for lib in libs:
        run(lib, mod, a.cache, extra, a.fwhm if lib == "miles" else None)
    return 0


if __name__ == "__main__":
    sys.exit(main())
