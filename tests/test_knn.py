"""The nearest-neighbour classifier on toy inputs (injected models, recovered parameters).

The toy grid (tests/toygrid.py) is invented; the subtype labels come from the published
Teff scales in starlines.teffscale (Martins et al. 2005 Tables 4-6; Pecaut & Mamajek 2013
Table 5; Zorec et al. 2009; Markova & Puls 2008), so a toy model built at the Teff and
log g of a type must come back as that type.
"""

import numpy as np
import pytest
from sklearn.base import clone
from toygrid import toy_ews, toy_grid

from starlines.knn import (
    FEATURES,
    TARGETS,
    LineRatioNeighbors,
    feature_limits,
    feature_matrix,
    feature_vector,
    training_set,
)
from starlines.rules import LineValue
from starlines.teffscale import subtype_for_parameters, type_parameters


@pytest.fixture(scope="module")
def fitted():
    X, y, targets, groups = training_set(toy_grid(), copies=4)
    return LineRatioNeighbors(n_neighbors=20).fit(X, y, targets, groups)


def _features(subtype, lum, he=0.1, drop=()):
    teff, logg = type_parameters(subtype, lum)
    ews = toy_ews(teff, logg, he)
    vals = {k: LineValue(float(v), 0.01) for k, v in ews.items() if k not in drop}
    return feature_vector(vals), teff, logg, feature_limits(vals)


def test_estimator_conventions():
    est = LineRatioNeighbors(n_neighbors=7)
    assert est.get_params() == {"n_neighbors": 7, "feature_floor": 0.05}
    assert not hasattr(est, "X_")  # nothing learned in __init__
    X = np.array([[0.0, 1.0], [1.0, 0.0], [0.1, 0.9]])
    y = np.array([7.0, 9.0, 7.0])
    assert est.fit(X, y) is est  # fit returns self
    assert list(est.classes_) == [7.0, 9.0]
    c = clone(est)
    assert c.get_params() == est.get_params() and not hasattr(c, "X_")
    with pytest.raises(ValueError):
        LineRatioNeighbors().fit(np.array([[np.nan, 1.0]]), np.array([7.0]))


def test_teff_scale_round_trip():
    # inverse of the published tracks: O7 V (Martins et al. 2005 Table 4: 36872 K, 3.92)
    sub, lum = subtype_for_parameters(36872.0, 3.92)
    assert sub == pytest.approx(7.0, abs=0.01) and lum == pytest.approx(5.0, abs=0.01)
    # B1 I (Markova & Puls 2008 eq. 1: 22632 K)
    teff, logg = type_parameters(11.0, 1.0)
    assert teff == pytest.approx(22632.0, abs=1.0)
    sub, lum = subtype_for_parameters(teff, logg)
    assert sub == pytest.approx(11.0, abs=0.01) and lum == pytest.approx(1.0, abs=0.01)


@pytest.mark.parametrize("subtype, lum", [(6.0, 5.0), (8.0, 3.0), (9.5, 5.0), (11.0, 5.0),
                                          (12.0, 3.0), (12.5, 1.0)])
def test_recovers_injected_types(fitted, subtype, lum):
    x, teff, logg, lim = _features(subtype, lum)
    val, err = fitted.predict_parameters(x[None, :], lim[None, :])
    got = dict(zip(TARGETS, val[0]))
    assert got["subtype"] == pytest.approx(subtype, abs=0.75)
    assert got["teff"] == pytest.approx(teff, abs=2000.0)  # K
    # log g is weakly constrained by the noisy toy Balmer lines: the truth must lie within
    # twice the neighbours' spread (plus one 0.2 dex grid step)
    e_logg = err[0][TARGETS.index("logg")]
    assert abs(got["logg"] - logg) <= 2.0 * e_logg + 0.2
    assert np.all(err[0][np.isfinite(err[0])] >= 0)


def test_proba_is_a_distribution(fitted):
    x, _, _, lim = _features(9.0, 5.0)
    p = fitted.predict_proba(x[None, :], lim[None, :])[0]
    assert p.sum() == pytest.approx(1.0)
    best = fitted.predict(x[None, :])[0]
    assert best in fitted.classes_
    assert abs(best - 9.0) <= 1.0


def test_missing_lines_use_remaining_features(fitted):
    # drop the Si and Mg lines: the He ratios alone must still place a mid-O star
    x, _, _, lim = _features(7.0, 5.0, drop=("SiIII4553", "SiIV4089", "MgII4481", "CII4267"))
    assert np.isnan(x).sum() >= 4
    val, _ = fitted.predict_parameters(x[None, :], lim[None, :])
    assert val[0, 0] == pytest.approx(7.0, abs=1.0)


def test_no_features_gives_nan(fitted):
    x = np.full(len(FEATURES), np.nan)
    assert np.isnan(fitted.predict(x[None, :])[0])
    val, _ = fitted.predict_parameters(x[None, :])
    assert np.all(np.isnan(val))


def test_helium_abundance_ordering():
    # inject toy B1 V models at He/H = 0.07 and 0.15: with small training noise (1-2 %)
    # the estimates must keep that order
    X, y, targets, groups = training_set(toy_grid(), copies=2, abs_err=(0.002, 0.005),
                                         rel_err=(0.01, 0.02))
    fitted = LineRatioNeighbors(n_neighbors=10).fit(X, y, targets, groups)
    k = TARGETS.index("he")
    poor, _, _, lim_p = _features(11.0, 5.0, he=0.07)
    rich, _, _, lim_r = _features(11.0, 5.0, he=0.15)
    val, _ = fitted.predict_parameters(np.vstack([poor, rich]), np.vstack([lim_p, lim_r]))
    assert val[0, k] < val[1, k]


def test_feature_floor_and_limits():
    # an undetected denominator is replaced by its 3-sigma limit (0.03 A here)
    X = feature_matrix({"HeI4471": np.array([0.9]), "HeII4541": np.array([0.0])},
                       {"HeI4471": np.array([0.01]), "HeII4541": np.array([0.01])})
    assert X[0, 0] == pytest.approx(np.log10(0.9 / 0.03))
    assert np.isnan(X[0, 1])  # He I 4144 / He II 4200 absent


def test_censored_features():
    # He I 4471 detected, He II 4541 not (0 +- 0.01 A): log W' is a lower limit; both
    # undetected: no information (NaN); a lower limit adds no distance to training rows
    # above it (injected limits; the analytic distance is the reference)
    vals = {"HeI4471": LineValue(0.9, 0.01), "HeII4541": LineValue(0.0, 0.01),
            "HeI4144": LineValue(0.0, 0.01), "HeII4200": LineValue(0.0, 0.01)}
    lim = feature_limits(vals)
    assert lim[0] == 1.0 and np.isnan(lim[1])
    x = feature_vector(vals)
    assert x[0] == pytest.approx(np.log10(0.9 / 0.03)) and np.isnan(x[1])
    est = LineRatioNeighbors(n_neighbors=2, feature_floor=0.0).fit(
        np.array([[2.0], [1.0], [0.5]]), np.array([11.0, 10.0, 9.0]))
    est.scale_ = np.array([1.0])
    dist, idx = est.kneighbors(np.array([[1.5]]), np.array([[1.0]]))
    assert list(idx[0]) == [0, 1] and dist[0] == pytest.approx([0.0, 0.5])


def test_balmer_emission_drops_balmer_features():
    # The grid has no wind (grids/README.md "Limits"): with H-alpha in net emission the
    # Balmer-line features carry no temperature information for the model and are NaN;
    # the other features are unchanged (injected EWs; the feature definitions are the
    # reference).
    ews = {"HeI4471": 0.8, "HeII4541": 0.0, "SiIII4553": 0.4, "SiIV4089": 0.05,
           "HI4340": 1.5, "HI4102": 1.8}
    vals = {k: LineValue(v, 0.01) for k, v in ews.items()}
    balmer = [any(i.startswith("HI") for i in f.numerator + f.denominator) for f in FEATURES]
    quiet = feature_vector(vals)
    assert np.isfinite(quiet[balmer]).any()
    vals["HI6563"] = LineValue(-2.0, 0.05, "measured", True)
    windy = feature_vector(vals)
    assert np.isnan(windy[balmer]).all()
    other = ~np.array(balmer)
    np.testing.assert_array_equal(windy[other], quiet[other])
