"""Double-lined detection on injected binaries and singles."""

import math

import numpy as np
import pytest

from starlines.binary import CCF_LINES, detect_sb2
from starlines.ccf import line_template
from starlines.lines import line

REST = {k: line(k).wavelength("air") for k in CCF_LINES}
# B0-like injected lines (NIST He I air wavelengths from the catalogue; invented strengths)
IDS = ["HI4102", "HI4340", "HI4861", "HeI4471", "HeI4026", "HeI4922", "HeI4388", "HeI4713",
       "HeII4541", "HeII4200", "HeII4686", "HeI4144", "HeI4121", "SiIII4553"]
CEN = [line(i).wavelength("air") for i in IDS]
DEP = [0.35, 0.35, 0.35, 0.2, 0.15, 0.12, 0.1, 0.06, 0.05, 0.04, 0.06, 0.06, 0.04, 0.05]
FWHM = [12, 12, 12, 2, 1.5, 1.5, 1.5, 1, 1, 1, 1, 1, 1, 0.5]
SHAPE = ["lorentzian"] * 3 + ["gaussian"] * 11


def star(w, rv, vsini, res):
    return line_template(w, CEN, DEP, FWHM, shapes=SHAPE, rv=rv, vsini=vsini,
                         resolution_fwhm=res)


@pytest.mark.parametrize("gate", [True, False])
def test_singles_no_false_positives(gate):
    """Single stars, with the cheap gate and with the profile fit forced on every star."""
    rng = np.random.default_rng(11)
    found, fitted = [], 0
    for _ in range(20):
        res = 4500.0 / rng.uniform(3000, 6000)
        vsini, snr = rng.uniform(0, 300), rng.uniform(50, 300)
        w = np.arange(3950.0, 4950.0, res / 2.5)
        f = star(w, rng.uniform(-200, 200), vsini, res) + rng.normal(0, 1 / snr, w.size)
        r = detect_sb2(w, f, np.ones(w.size, bool), noise=1 / snr, rest=REST,
                       resolution_fwhm=res, vsini=vsini, gate=gate)
        found.append(r.sb2)
        fitted += math.isfinite(r.delta_bic)
    assert sum(found) == 0
    if gate:  # the point of the gate: most single stars skip the profile fit
        assert fitted <= 10


def test_one_asymmetric_line_is_not_a_companion():
    """A single star whose He I 4471 alone has a weak blue satellite (as the forbidden
    He I 4470 component of dwarfs, wavelength from memory) must stay single: a companion
    shows in every He I line (profile fit forced, gate off)."""
    rng = np.random.default_rng(3)
    for _ in range(4):
        res, vsini, v = 4500.0 / rng.uniform(3000, 6000), rng.uniform(20, 120), 30.0
        w = np.arange(3950.0, 4950.0, res / 2.5)
        f = star(w, v, vsini, res) + rng.normal(0, 1 / 250, w.size)
        f -= 1 - line_template(w, [4469.9], [0.08], [1.5], rv=v, vsini=vsini,
                               resolution_fwhm=res)
        r = detect_sb2(w, f, np.ones(w.size, bool), noise=1 / 250, rest=REST,
                       resolution_fwhm=res, gate=False)
        assert not r.sb2, r.notes


def test_injected_binaries_found():
    rng = np.random.default_rng(5)
    hits, errors = 0, []
    for _ in range(10):
        res = 4500.0 / rng.uniform(3000, 6000)
        snr = rng.uniform(100, 300)
        sep = rng.uniform(150, 250)
        v1 = rng.uniform(-100, 100)
        v2 = v1 + sep * rng.choice([-1, 1])
        light = rng.uniform(0.55, 0.7)
        w = np.arange(3950.0, 4950.0, res / 2.5)
        f = (light * star(w, v1, rng.uniform(20, 80), res)
             + (1 - light) * star(w, v2, rng.uniform(20, 80), res)
             + rng.normal(0, 1 / snr, w.size))
        r = detect_sb2(w, f, np.ones(w.size, bool), noise=1 / snr, rest=REST,
                       resolution_fwhm=res)
        if r.sb2:
            hits += 1
            a, b = r.velocities
            # which star is "stronger" depends on light ratio and widths: match as a pair
            errors += min([abs(a - v1), abs(b - v2)], [abs(a - v2), abs(b - v1)], key=sum)
    assert hits >= 8  # 150-250 km/s apart at R 3000-6000: most are resolved
    # component velocities: coarse grid step <= 40 km/s refined 4x; blending pulls them
    # together (measured during development: 10/10 found, median 8 km/s, max 29 km/s)
    assert np.median(errors) < 15.0 and max(errors) < 45.0


def test_too_few_lines_no_profile_test():
    w = np.arange(5000.0, 5500.0, 0.5)
    r = detect_sb2(w, np.ones(w.size), np.ones(w.size, bool), noise=0.01, rest=REST,
                   resolution_fwhm=1.0)
    assert not r.sb2 and "fewer than 2" in " ".join(r.notes)
