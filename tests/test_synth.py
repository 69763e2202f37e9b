"""Tests of the synthetic forward model against published scales and analytic references.

Sources are those of /work/shared/reference/criteria.md (section numbers given).
"""

from __future__ import annotations

import numpy as np
import pytest

from starlines.errors import ConfigError
from starlines.lines import line
from starlines.synth import (
    add_emission,
    doppler_factor,
    line_profile,
    parameters_for_type,
    synthetic_ews,
    synthetic_spectrum,
)

#: log W' subtype boundaries, Mathys (1988) as transcribed in criteria.md section 1:
#: (hotter subtype, cooler subtype, boundary value of log EW(He I 4471)/EW(He II 4541)).
BOUNDARIES = [
    (3.0, 4.0, -0.90), (4.0, 5.0, -0.60), (5.0, 5.5, -0.45), (5.5, 6.0, -0.30),
    (6.0, 6.5, -0.20), (6.5, 7.0, -0.10), (7.0, 7.5, 0.00), (7.5, 8.0, 0.10),
    (8.0, 8.5, 0.20), (8.5, 9.0, 0.30), (9.0, 9.5, 0.45), (9.5, 9.7, 0.65),
]

#: Tolerance on the Teff at which log W' crosses a boundary. One subtype is ~1000-2000 K on
#: the Martins et al. (2005) scale (criteria.md 4a: -1995 K per subtype for V), and
#: digital types scatter by up to 1.5 subtypes (Markova et al. 2011, criteria.md C4), so
#: +-1500 K (under one subtype) is the accuracy we claim.
TEFF_TOL = 1500.0


def log_w(teff, logg, he=0.1):
    ews = synthetic_ews(teff, logg, he)
    return np.log10(ews["HeI4471"] / ews["HeII4541"])


def crossing_teff(value, logg, t_lo, t_hi):
    """Teff (K) where log W' = value, by bisection (log W' falls with Teff)."""
    for _ in range(18):
        mid = 0.5 * (t_lo + t_hi)
        if log_w(mid, logg) > value:
            t_lo = mid
        else:
            t_hi = mid
    return 0.5 * (t_lo + t_hi)


@pytest.mark.parametrize("lumclass", ["V", "III", "I"])
@pytest.mark.parametrize("hot,cool,value", BOUNDARIES[::2] + [BOUNDARIES[-1]])
def test_log_w_crosses_boundaries_on_martins_scale(lumclass, hot, cool, value):
    # Expected: midpoint of the two subtypes on the Martins et al. (2005) observational
    # scale (Tables 4, 5 and 6 via parameters_for_type), criteria.md 4a. The calibration
    # knots are fitted on the V and I tracks; class III (log g between them) is not fitted
    # and checks the interpolation (measured: within 1250 K).
    (t1, g1), (t2, g2) = parameters_for_type(hot, lumclass), parameters_for_type(cool, lumclass)
    expected = 0.5 * (t1 + t2)
    logg = 0.5 * (g1 + g2)
    found = crossing_teff(value, logg, expected - 6000.0, expected + 6000.0)
    assert abs(found - expected) < TEFF_TOL


def test_heii4541_vanishes_in_early_b_dwarfs():
    # He II absent in B stars beyond ~B0.5 (Jaschek & Jaschek 1987 ch. 8: "B = He II
    # absent"; Walborn 1971 from memory, criteria.md 2). B1 V = 26000 K (Pecaut & Mamajek
    # 2013, Table 5); we require EW < 0.05 A from 27000 K down.
    for teff in (27000.0, 26000.0, 24000.0):
        assert synthetic_ews(teff, 4.0, 0.1)["HeII4541"] < 0.05
    assert synthetic_ews(36000.0, 4.0, 0.1)["HeII4541"] > 0.4  # and present in O stars


def test_hei4471_near_jaschek_and_peaks_near_b2():
    # Jaschek & Jaschek (1995) via criteria.md 6a: He I 4471 EW = 1.12 A at B0 V and
    # 1.47 A at B2 V; we require 30 %.
    ew_b0 = synthetic_ews(*parameters_for_type(10.0, "V"), 0.1)["HeI4471"]
    ew_b2 = synthetic_ews(*parameters_for_type(12.0, "V"), 0.1)["HeI4471"]
    assert ew_b0 == pytest.approx(1.12, rel=0.30)
    assert ew_b2 == pytest.approx(1.47, rel=0.30)
    # the maximum of He I 4471 along the dwarf sequence lies at B1.5-B2.5 (J&J 1995: B2
    # stronger than both B0 and B5)
    subtypes = np.arange(10.0, 13.01, 0.5)
    ews = [synthetic_ews(*parameters_for_type(s, "V"), 0.1)["HeI4471"] for s in subtypes]
    assert 11.5 <= subtypes[int(np.argmax(ews))] <= 12.5


def test_hgamma_dwarf_strength():
    # From memory / common practice: H-gamma EW of dwarfs ~2-3 A at O types, 5-7 A at
    # B2-B3. Tolerances: O types 1.4-3.5 A, B2-B3 4.5-8 A.
    for sub in (4.0, 6.0, 8.0, 9.5):
        assert 1.4 < synthetic_ews(*parameters_for_type(sub, "V"), 0.1)["HI4340"] < 3.5
    for sub in (12.0, 13.0):
        assert 4.5 < synthetic_ews(*parameters_for_type(sub, "V"), 0.1)["HI4340"] < 8.0
    # Balmer lines are weaker at low gravity at fixed Teff (pressure broadening; common
    # practice, MKK 1943 "H-wing width" luminosity criterion, criteria.md 2)
    assert synthetic_ews(25000.0, 3.0, 0.1)["HI4340"] < synthetic_ews(25000.0, 4.0, 0.1)["HI4340"]


def test_metal_line_sequences():
    # From memory (Walborn 1971; Walborn & Fitzpatrick 1990; criteria.md 2): Si III 4552
    # rises from late O to B1 then falls; Si IV 4089 is strongest near O9-B0; Mg II 4481
    # strengthens toward B3.
    ew = {s: synthetic_ews(*parameters_for_type(s, "V"), 0.1) for s in (6.0, 9.0, 10.0, 11.0,
                                                                         12.0, 13.0)}
    si3 = [ew[s]["SiIII4553"] for s in (6.0, 9.0, 11.0, 13.0)]
    assert si3[0] < si3[1] < si3[2] > si3[3]
    si4_peak = max(ew[9.0]["SiIV4089"], ew[10.0]["SiIV4089"])
    assert si4_peak > ew[6.0]["SiIV4089"] and si4_peak > ew[12.0]["SiIV4089"]
    assert ew[13.0]["MgII4481"] > ew[11.0]["MgII4481"] > ew[9.0]["MgII4481"]


def test_heii4686_stronger_than_4541_in_o_stars():
    # He II 4686 is the strongest He II line in absorption in O dwarfs (common practice).
    for sub in (4.0, 6.0, 8.0):
        ews = synthetic_ews(*parameters_for_type(sub, "V"), 0.1)
        assert ews["HeII4686"] > ews["HeII4541"]


def test_helium_abundance_strengthens_helium_lines():
    lo, hi = synthetic_ews(35000.0, 4.0, 0.06), synthetic_ews(35000.0, 4.0, 0.25)
    for ident in ("HeI4471", "HeII4541", "HeI4026"):
        assert hi[ident] > lo[ident] * 1.3


def test_spectrum_ew_matches_synthetic_ews():
    # Analytic reference: rotation and a Gaussian instrument conserve the EW of an isolated
    # line; integrate 1 - F over the line's window.
    teff, logg, he = 30000.0, 4.0, 0.1
    ews = synthetic_ews(teff, logg, he)
    wl = np.arange(4380.0, 4640.0, 0.05)
    flux = synthetic_spectrum(wl, teff=teff, logg=logg, he=he, vsini=100.0, rv=0.0,
                              resolution_fwhm=1.5)
    for ident, half in (("HeI4471", 8.0), ("HeII4541", 6.0), ("SiIII4553", 1.8)):
        c = line(ident).wavelength_air
        sel = np.abs(wl - c) < half
        measured = np.trapezoid(1.0 - flux[sel], wl[sel])
        # tolerance: the window cuts the far wings (~3 %) and Si III 4553 overlaps the
        # wing of He II 4541; 0.03 A absolute or 8 %
        assert measured == pytest.approx(ews[ident], rel=0.08, abs=0.03), ident


def test_spectrum_radial_velocity_shift():
    # Injected shift: the He I 4471 line minimum moves by lambda (sqrt((1+b)/(1-b)) - 1).
    wl = np.arange(4440.0, 4500.0, 0.01)
    kw = dict(teff=22000.0, logg=4.0, he=0.1, vsini=20.0, resolution_fwhm=0.5)
    f0 = synthetic_spectrum(wl, rv=0.0, **kw)
    f1 = synthetic_spectrum(wl, rv=150.0, **kw)
    shift = wl[np.argmin(f1)] - wl[np.argmin(f0)]
    expected = line("HeI4471").wavelength_air * (doppler_factor(150.0) - 1.0)
    assert shift == pytest.approx(expected, abs=0.03)  # 0.03 A ~ 2 km/s (3 pixels)
    assert doppler_factor(150.0) == pytest.approx(1 + 150.0 / 299792.458, abs=1e-6)


def test_spectrum_medium_vacuum_shifts_lines():
    wl = np.arange(4460.0, 4485.0, 0.01)
    kw = dict(teff=22000.0, logg=4.0, he=0.1, resolution_fwhm=0.3)
    f_air = synthetic_spectrum(wl, medium="air", **kw)
    f_vac = synthetic_spectrum(wl, medium="vacuum", **kw)
    # He I 4471: air 4471.4802 (NIST ASD), vacuum 4472.735 (Morton 2000 conversion),
    # criteria.md 5d; the minimum of the profile is the line centre to a pixel or two
    assert wl[np.argmin(f_air)] == pytest.approx(4471.48, abs=0.03)
    assert wl[np.argmin(f_vac)] == pytest.approx(4472.735, abs=0.03)


def test_rotation_broadens_but_keeps_depth_order():
    wl = np.arange(4540.0, 4570.0, 0.02)
    kw = dict(teff=27000.0, logg=4.0, he=0.1, resolution_fwhm=0.2)
    slow = synthetic_spectrum(wl, vsini=10.0, **kw)
    fast = synthetic_spectrum(wl, vsini=250.0, **kw)
    assert slow.min() < fast.min()  # same EW spread over a wider profile is shallower
    sel = np.abs(wl - line("SiIII4553").wavelength_air) < 1.0
    assert np.trapezoid(1 - fast[sel], wl[sel]) < np.trapezoid(1 - slow[sel], wl[sel])


def test_emission_components_have_requested_ew():
    wl = np.arange(4650.0, 4720.0, 0.02)
    flat = np.ones_like(wl)
    out = add_emission(flat, wl, "HeII4686", -1.5, fwhm_kms=100.0, peak_separation_kms=300.0)
    assert np.trapezoid(1.0 - out, wl) == pytest.approx(-1.5, abs=0.01)  # injected EW
    assert np.all(flat == 1.0)  # input untouched
    # double peak: a central dip between two maxima
    core = np.abs(wl - line("HeII4686").wavelength_air) < 5
    assert out[core].max() > out[np.argmin(np.abs(wl - line("HeII4686").wavelength_air))]
    kw = dict(teff=40000.0, logg=3.6, he=0.1, resolution_fwhm=1.0)
    plain = synthetic_spectrum(wl, **kw)
    spec = synthetic_spectrum(wl, emission_lines={"HeII4686": {"ew": -1.0, "fwhm_kms": 250.0}},
                              **kw)
    # the instrument conserves flux: the added emission integrates to the injected 1.0 A
    assert np.trapezoid(spec - plain, wl) == pytest.approx(1.0, abs=0.01)


def test_spectrum_speed_path_and_values():
    wl = np.linspace(3900.0, 4900.0, 3000)
    flux = synthetic_spectrum(wl, teff=33000.0, logg=3.8, he=0.1, vsini=120.0)
    assert flux.shape == wl.shape and np.all(np.isfinite(flux))
    assert 0.4 < flux.min() < 1.0 and flux.max() == pytest.approx(1.0, abs=0.01)


def test_line_profile_is_half_profile():
    dl, r = line_profile("HI4340", teff=30000.0, logg=4.0, he=0.1)
    assert dl[0] == 0 and np.all(np.diff(dl) > 0) and np.all((r > 0) & (r <= 1))


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(teff=9000.0, logg=4.0, he=0.1), "teff"),
        (dict(teff=30000.0, logg=6.0, he=0.1), "logg"),
        (dict(teff=30000.0, logg=4.0, he=-1.0), "he"),
    ],
)
def test_bad_parameters_raise(kwargs, match):
    with pytest.raises(ConfigError, match=match):
        synthetic_ews(**kwargs)


def test_bad_spectrum_inputs_raise():
    wl = np.linspace(4000, 4100, 10)
    with pytest.raises(ConfigError, match="medium"):
        synthetic_spectrum(wl, teff=30000.0, logg=4.0, he=0.1, medium="glass")
    with pytest.raises(ConfigError, match="increasing"):
        synthetic_spectrum(wl[::-1], teff=30000.0, logg=4.0, he=0.1)
    with pytest.raises(ConfigError, match="vsini"):
        synthetic_spectrum(wl, teff=30000.0, logg=4.0, he=0.1, vsini=-5.0)


def test_parameters_for_type_published_values():
    # Martins et al. (2005) Table 4, O5.5 V = 39865 K (transcribed, criteria.md 4a);
    # Table 6, O9 I = 31368 K; Pecaut & Mamajek (2013) Table 5 v2024.05.15, B1 V = 26000 K.
    assert parameters_for_type(5.5, "V")[0] == pytest.approx(39865.0, abs=1.0)
    assert parameters_for_type(9.0, "Ia")[0] == pytest.approx(31368.0, abs=1.0)
    assert parameters_for_type(11.0, "V")[0] == pytest.approx(26000.0, abs=1.0)
    assert parameters_for_type(9.0, "I")[1] == pytest.approx(3.23, abs=0.01)
    with pytest.raises(ConfigError, match="luminosity class"):
        parameters_for_type(7.0, "VII")


# --- comparison with observed spectra (MILES v9.1, /work/shared/reference-spectra) -------

MILES_DIR = "/work/shared/reference-spectra/miles"

#: MILES B dwarfs/subgiants without emission, with the library's own Teff / log g
#: (paramsMILES_v9.1.txt as quoted in the folder README).
MILES_B_STARS = [
    ("m0011", 21581.0, 3.86), ("m0021", 21170.0, 3.92), ("m0548", 18667.0, 4.30),
    ("m0638", 19136.0, 3.75), ("m0656", 21311.0, 3.65), ("m0715", 17360.0, 3.38),
    ("m0817", 18351.0, 3.49),
]

#: line -> (centre, half width of the EW window, continuum windows), Angstrom (air).
_WINDOWS = {
    "HeI4471": (4471.48, 9.0, ((4452.0, 4462.0), (4490.0, 4500.0))),
    "HI4340": (4340.47, 25.0, ((4290.0, 4300.0), (4375.0, 4380.0), (4405.0, 4415.0))),
}


def _window_ew(wl, flux, centre, half, cont):
    sel = np.zeros(wl.size, bool)
    for a, b in cont:
        sel |= (wl > a) & (wl < b)
    norm = flux / np.polyval(np.polyfit(wl[sel], flux[sel], 1), wl)
    inside = np.abs(wl - centre) < half
    return np.trapezoid(1.0 - norm[inside], wl[inside])


@pytest.mark.parametrize("name,teff,logg", MILES_B_STARS)
def test_ews_against_miles_b_stars(name, teff, logg):
    import os

    path = f"{MILES_DIR}/MILES_res2.50_star_{name}V.fits"
    if not os.path.exists(path):
        pytest.skip(f"reference spectra folder absent ({MILES_DIR})")
    from astropy.io import fits

    with fits.open(path) as hdul:
        flux = np.asarray(hdul[0].data, dtype=float)
    wl = 3540.5 + 0.9 * np.arange(flux.size)  # linear WCS of the MILES files (README)
    model_wl = np.arange(4200.0, 4600.0, 0.9)
    model = synthetic_spectrum(model_wl, teff=teff, logg=logg, he=0.1, vsini=100.0,
                               resolution_fwhm=2.5)
    for ident, (centre, half, cont) in _WINDOWS.items():
        observed = _window_ew(wl, flux, centre, half, cont)
        synthetic = _window_ew(model_wl, model, centre, half, cont)
        # Observed EW in the same window and pseudo-continuum as the model (data); 30 %
        # covers the model's stated accuracy plus the library's Teff/log g errors.
        assert synthetic == pytest.approx(observed, rel=0.30), ident
