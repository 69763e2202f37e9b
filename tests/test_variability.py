"""Radial-velocity variability test (starlines.variability).

Criterion: chi-square p < 0.001 (common practice) and one pair of epochs with
|dv| / sqrt(s_i^2 + s_j^2) > 4.0 and |dv| > 20 km/s (Sana et al. 2013, A&A 550, A107;
thresholds from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from starlines.variability import velocity_variability


def test_two_epoch_chi_square_matches_the_table_value():
    # For two epochs the chi-square about the weighted mean is dv^2 / (s1^2 + s2^2)
    # (analytic). chi2 = 10.828 with 1 dof has p = 0.001 (chi-square table, e.g.
    # Abramowitz & Stegun 1964, Table 26.8; from memory).
    dv = math.sqrt(2 * 10.828)
    res = velocity_variability([0.0, dv], [1.0, 1.0])
    assert res.chi2 == pytest.approx(10.828, abs=1e-9)
    assert res.dof == 1
    assert res.p_value == pytest.approx(1.0e-3, abs=2e-6)
    assert res.peak_to_peak == pytest.approx(dv, abs=1e-12)


def test_weighted_mean_and_error():
    # weights 1/s^2: (10/1 + 40/4) / (1 + 1/4) = 16 km/s, error 1/sqrt(1.25) (analytic)
    res = velocity_variability([10.0, 40.0], [1.0, 2.0])
    assert res.mean_rv == pytest.approx(16.0, abs=1e-12)
    assert res.mean_rv_err == pytest.approx(1 / math.sqrt(1.25), abs=1e-12)


@pytest.mark.parametrize(
    "rv, err, variable",
    [
        ([0.0, 80.0], [5.0, 5.0], True),  # 80 km/s at 11.3 sigma: a binary
        ([0.0, 25.0], [1.0, 1.0], True),  # 25 km/s at 17.7 sigma
        ([0.0, 15.0], [0.5, 0.5], False),  # 21 sigma but below 20 km/s: line-profile noise
        ([0.0, 30.0], [10.0, 10.0], False),  # 30 km/s but only 2.1 sigma
        ([0.0, 21.0, 10.0], [3.0, 3.0, 3.0], True),  # pair 1-2: 21 km/s at 4.95 sigma
        ([0.0, 19.0, 38.0], [1.0, 1.0, 1.0], True),  # only the 1-3 pair passes (38 km/s)
    ],
)
def test_pair_criterion(rv, err, variable):
    assert velocity_variability(rv, err).variable is variable


def test_planted_binary_among_single_stars():
    rng = np.random.default_rng(20130101)
    err = 5.0  # km/s
    flagged = []
    for star in range(40):
        n = 2 + star % 3
        true = rng.uniform(-30, 30)
        rv = true + rng.normal(0.0, err, n)
        if star == 17:  # the binary: +80 km/s on the second epoch
            rv[1] += 80.0
        res = velocity_variability(rv, np.full(n, err))
        if res.variable:
            flagged.append(star)
    assert flagged == [17]


def test_topocentric_epochs_are_skipped_with_a_reason():
    res = velocity_variability([0.0, 80.0, 2.0], [5.0, 5.0, 5.0],
                               ["barycentric", "topocentric", "barycentric"])
    assert res.n_epochs == 3 and res.n_used == 2
    assert not res.variable
    assert "topocentric" in res.skipped[0] and "epoch 2" in res.skipped[0]


def test_heliocentric_counts_as_comparable():
    res = velocity_variability([0.0, 80.0], [5.0, 5.0], ["heliocentric", "barycentric"])
    assert res.n_used == 2 and res.variable


def test_missing_values_are_skipped():
    res = velocity_variability([1.0, math.nan, 2.0, 3.0], [1.0, 1.0, 0.0, math.nan])
    assert res.n_used == 1
    assert math.isnan(res.p_value) and not res.variable
    assert "one barycentric epoch" in res.reason
    assert any("no velocity" in s for s in res.skipped)
    assert sum("no usable velocity error" in s for s in res.skipped) == 2
