"""Classification accuracy on real O/B spectra from open stellar libraries.

The spectra live outside the repository in /work/shared/reference-spectra (README there);
the tests skip when it is absent. Types are the libraries' own, written exactly as in
their tables (MILES v9.1 ``paramsMILES_v9.1.txt``; Jacoby, Hunter & Christian 1984
``jacoby-list.dat``), except HD 209975, whose modern type O9 Ib is from memory (the
library's "08 Ib" is the old type). HD 149382 (library "B5", a hot subdwarf from memory)
is skipped: it is not a normal star of that type.

Digital types come out later than photographic ones by up to 1.5 subtypes (Markova et al.
2011, abstract; criteria.md C4), so these figures measure agreement with old library
types, not absolute truth. The thresholds below are what this version achieves (see the
module constants); the test fails if accuracy drops below them.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pytest

from starlines.sptype import lumclass_group, parse_sptype

ROOT = Path(__file__).resolve().parents[2] / "shared" / "reference-spectra"
if not ROOT.exists():
    ROOT = Path("/work/shared/reference-spectra")
MILES = ROOT / "miles"
JACOBY = ROOT / "jacoby1984" / "regridded"

# MILES number -> (star, type string as in paramsMILES_v9.1.txt, emission star?)
# Emission: Halpha/He II 4686 emission noted in the reference-spectra README ("data").
MILES_STARS = {
    "0011": ("HD 886", "B2IV", False),
    "0021": ("HD 3360", "B2IV", False),
    "0204": ("HD 41117", "B2Iave", True),
    "0251": ("HD 57060", "07Ia", True),
    "0252": ("HD 57061", "09Ib", False),
    "0548": ("HD 135485", "B3V", False),
    "0638": ("HD 160762", "B3IV", False),
    "0656": ("HD 164432", "B2IV", False),
    "0715": ("HD 180163", "B2.5IV", False),
    "0732": ("HD 185859", "B0.5 Iae", False),
    "0737": ("HD 187879", "B1III", False),
    "0751": ("HD 190603", "B1.5 Iae", True),
    "0778": ("HD 198478", "B3 Iae", True),
    "0800": ("HD 205021", "B2IIIvar", False),
    "0809": ("HD 206165", "B2 Ib", False),
    "0817": ("HD 207330", "B3III", False),
    "0824": ("HD 209975", "O9 Ib", False),  # library "08 Ib"; modern O9 Ib from memory
    "0837": ("HD 214080", "B1/B2Ib", False),
    "0853": ("HD 216916", "B2IV", False),
}

# file stem -> (type in jacoby-list.dat, emission star per the README "data" notes)
JACOBY_STARS = {
    "HD242908": ("O5 V", False), "HD215835": ("O5.5 V", False), "HD12993": ("O6.5 V", False),
    "HD35619": ("O7 V", False), "HD44811": ("O7.5 V", False), "HD242935": ("O8 V", False),
    "HD236894": ("O8 V", False), "HD17520": ("O9 V", False), "HD12323": ("O9 V", False),
    "BD+62249": ("O9.5 V", False), "HD158659": ("B0 V", False), "HD237007": ("B0 V", False),
    "HD35215": ("B1.5 V", False), "HD37767": ("B3 V", False), "HD13494": ("B1 III", False),
    "HD12727": ("B2 III", False), "O2311": ("B2 III", False), "HD166125": ("B3 III", False),
    "HD39136": ("B4 III", False), "HD14357": ("B2 II", False), "BD-144956": ("B2 II", False),
    "BD-114586": ("O8 I", False), "HD225160": ("O8 I", True), "HD16808": ("B0.5 I", False),
    "HD167451": ("B0.5 I", False), "BD-145030": ("B1.5 I", False), "HD209678": ("B2 I", False),
    "SAO20899": ("B3 I", False), "HD16691": ("O5 I", True), "HD108": ("O6 I", True),
    "BD+404220": ("O7 I", True), "HD13256": ("B1 I", True), "HD50064": ("B1 I", True),
}

#: Achieved on MILES (2.5 A FWHM); the test fails below these. Goals: median <= 0.5,
#: >= 90 % within one subtype, >= 80 % within half a subtype.
#: Achieved (19 stars, library types): median 0.22, 84 % within one, 68 % within half,
#: luminosity 84 % (68 % before B-star classes were read from the joint EW fit's log g,
#: starlines.ewfit, which skips stars with Balmer emission; bench/reference_accuracy.py
#: prints the per-star table). The misses
#: beyond one subtype are the composite HD 57060 and HD 187879 and HD 216916, whose blue
#: spectrum is mostly noise (S/N ~ 5-10 below 4400 A, data). The previous version scored
#: 0.52 / 74 % / 47 % / 68 % on the same line tables.
MILES_MAX_MEDIAN = 0.30
MILES_MIN_WITHIN_ONE = 0.80
MILES_MIN_WITHIN_HALF = 0.65
MILES_MIN_LUM_AGREE = 0.80
#: Jacoby (~15 A FWHM): looser, reported separately. Achieved (33 stars): median 0.64,
#: 64 % within one subtype, 39 % within half, luminosity 73 % (previous version 0.73 / 61 %
#: / 36 % / 73 %).
JACOBY_MAX_MEDIAN = 0.70
JACOBY_MIN_WITHIN_ONE = 0.60


def _delta(subtype: float, library: str) -> float:
    """Distance (subtypes) from a library type; 0 inside a range such as B1/B2."""
    lo, hi = parse_sptype(library).subtype_range
    if not math.isfinite(subtype):
        return math.nan
    return 0.0 if lo <= subtype <= hi else min(abs(subtype - lo), abs(subtype - hi))


def _lum_agrees(lum: str, library: str) -> bool:
    """Same group, with II-IV counted with III (Martins 2018 groups V / IV-III-II / I)."""
    def group(g):
        return {"II": "III", "IV": "III"}.get(g, g)

    ours = group(lumclass_group(lum.rstrip(":")) if lum else "")
    theirs = group(lumclass_group(parse_sptype(library).lumclass))
    if parse_sptype(library).lumclass == "IV":
        return ours in ("III", "V")
    return ours == theirs


def classify_files(items):
    """Read, measure and classify (path, type, emission) items; one dict per star."""
    from starlines.classify import classify
    from starlines.measure import measure_spectrum
    from starlines.readers import read_spectrum

    out = []
    for path, library, emission in items:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            spec = read_spectrum(path)
            c = classify(measure_spectrum(spec))
        lum = c.sptype.split(" ")[1] if " " in c.sptype else ""
        lum = lum.rstrip(":").rstrip("efp()").rstrip(":") if lum else ""
        lum = lum.split("(")[0]
        out.append(dict(file=Path(path).name, library=library, sptype=c.sptype,
                        subtype=c.subtype, delta=_delta(c.subtype, library), lum=lum,
                        lum_ok=_lum_agrees(lum, library), emission=emission, flags=c.flags,
                        rules=c.rules_subtype, model=c.model_subtype))
    return out


def summary(results) -> dict:
    """Median |delta|, fractions within 1 and 0.5 subtype, luminosity agreement."""
    d = np.array([r["delta"] for r in results], float)
    d = np.where(np.isfinite(d), d, 99.0)  # an unclassified star counts as a miss
    return dict(n=len(d), median=float(np.median(d)), within_one=float(np.mean(d <= 1.0)),
                within_half=float(np.mean(d <= 0.5)),
                lum=float(np.mean([r["lum_ok"] for r in results])))


@pytest.fixture(scope="module")
def miles_results():
    if not MILES.is_dir():
        pytest.skip(f"reference spectra not found at {MILES}")
    items = [(MILES / f"MILES_res2.50_star_m{num}V.fits", t, em)
             for num, (_, t, em) in MILES_STARS.items()]
    return classify_files(items)


@pytest.fixture(scope="module")
def jacoby_results():
    if not JACOBY.is_dir():
        pytest.skip(f"reference spectra not found at {JACOBY}")
    items = [(JACOBY / f"{stem}_jacoby_regridded.txt", t, em)
             for stem, (t, em) in JACOBY_STARS.items()]
    return classify_files(items)


def test_miles_accuracy(miles_results):
    s = summary(miles_results)
    print("MILES", s)
    assert s["median"] <= MILES_MAX_MEDIAN
    assert s["within_one"] >= MILES_MIN_WITHIN_ONE
    assert s["within_half"] >= MILES_MIN_WITHIN_HALF
    assert s["lum"] >= MILES_MIN_LUM_AGREE


def test_miles_emission_stars_are_flagged(miles_results):
    emission_flags = {"balmer-emission", "of-emission", "wr-like"}
    for r in miles_results:
        if r["emission"]:
            assert emission_flags & set(r["flags"]), r["file"]


def test_jacoby_low_resolution_accuracy(jacoby_results):
    s = summary(jacoby_results)
    print("Jacoby", s)
    assert s["median"] <= JACOBY_MAX_MEDIAN
    assert s["within_one"] >= JACOBY_MIN_WITHIN_ONE
