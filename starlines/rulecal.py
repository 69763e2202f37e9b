"""Calibrate the unpublished late-O / early-B ratio curves on the synthetic grid.

Our sources give no numbers for He I 4144/He II 4200, He I 4388/He II 4541, Si III 4553/He II
4541, Si IV 4089/Si III 4553, Si II 4128-31/Si III 4553, Mg II 4481/He I 4471 or C II
4267/He I 4471 (criteria.md, "Not pinned down"). For each such
:class:`~starlines.rules.RatioCurveRule`, :func:`calibrate_rule` labels the grid models with
subtypes through the published Teff scales (:func:`starlines.teffscale.subtype_for_parameters`),
takes the median log ratio in bins of subtype at normal helium, forces it monotonic
(isotonic regression) and, when the rule has a remembered equality point (``anchor``),
shifts the curve through log ratio 0 there. The result is "calibrated on our grid, not
published", and every calibrated rule says so in its ``notes``.
"""

from __future__ import annotations

import dataclasses
import math
from functools import lru_cache

import numpy as np

from starlines.rules import EW_FLOOR, SECONDARY, RatioCurveRule
from starlines.teffscale import subtype_for_parameters

__all__ = ["calibrate_rule", "calibrate_rules", "calibrated_rules", "grid_labels", "BIN_WIDTH",
           "rules_to_json", "rules_from_json"]

#: Width (subtypes) of the bins in which the grid's median ratio is taken.
BIN_WIDTH = 0.25
#: Helium abundance (He/H by number) regarded as normal when choosing grid models
#: (hot-star model grids use 0.1, common practice; starlines.flags.HE_NORMAL).
HE_NORMAL = 0.1


def grid_labels(grid) -> tuple[np.ndarray, np.ndarray]:
    """Subtype and luminosity numbers of every grid model (from its Teff and log g)."""
    return subtype_for_parameters(np.asarray(grid["teff"], float),
                                  np.asarray(grid["logg"], float))


def _ew(grid, ids) -> np.ndarray:
    total = np.zeros(len(grid))
    for i in ids:
        total = total + np.asarray(grid[f"ew_{i}"], float)
    return total


def _normal_helium(grid) -> np.ndarray:
    if "he" not in grid.colnames:
        return np.ones(len(grid), bool)
    he = np.asarray(grid["he"], float)
    nearest = he[np.argmin(np.abs(he - HE_NORMAL))]
    return np.isclose(he, nearest)


def calibrate_rule(rule: RatioCurveRule, grid, labels=None) -> RatioCurveRule:
    """Fill ``rule.knots`` and ``rule.scatter`` from the grid.

    Parameters
    ----------
    rule : RatioCurveRule
        The uncalibrated rule.
    grid : astropy.table.Table
        Columns ``teff``, ``logg``, optionally ``he``, and ``ew_<line id>`` (Angstrom).
    labels : tuple of ndarray, optional
        Precomputed :func:`grid_labels`.

    Returns
    -------
    RatioCurveRule
        A copy with knots, or the rule unchanged (knots None) when the grid lacks a line,
        covers too few subtypes, or shows no trend.
    """
    from sklearn.isotonic import IsotonicRegression

    needed = [f"ew_{i}" for i in rule.numerator + rule.denominator]
    if any(c not in grid.colnames for c in needed):
        return dataclasses.replace(rule, notes="not calibrated: line missing from the grid")
    sub, _ = grid_labels(grid) if labels is None else labels
    lo, hi = rule.valid_range
    keep = _normal_helium(grid) & (sub >= lo - BIN_WIDTH) & (sub <= hi + BIN_WIDTH)
    num = np.maximum(_ew(grid, rule.numerator)[keep], EW_FLOOR)
    den = np.maximum(_ew(grid, rule.denominator)[keep], EW_FLOOR)
    ratio, s = np.log10(num / den), sub[keep]
    edges = np.arange(lo - BIN_WIDTH, hi + 1.5 * BIN_WIDTH, BIN_WIDTH)
    idx = np.digitize(s, edges)
    centres, medians, counts = [], [], []
    for k in np.unique(idx):
        if 0 < k < len(edges):
            centres.append(0.5 * (edges[k - 1] + edges[k]))
            medians.append(float(np.median(ratio[idx == k])))
            counts.append(int(np.sum(idx == k)))
    if len(centres) < 3:
        return dataclasses.replace(rule, notes="not calibrated: too few grid subtypes")
    centres, medians = np.array(centres), np.array(medians)
    rising = bool(np.polyfit(centres, medians, 1, w=np.sqrt(counts))[0] >= 0)
    iso = IsotonicRegression(increasing=rising).fit(centres, medians, sample_weight=counts)
    curve = iso.predict(centres)
    if np.ptp(curve) < 0.05:  # no usable trend (dex)
        return dataclasses.replace(rule, notes="not calibrated: no trend on the grid")
    # spread of the grid models about the curve, in subtypes (1.4826 MAD, floor 0.25)
    raw = dataclasses.replace(rule, knots=(tuple(centres), tuple(curve)))
    inv = np.array([raw.subtype_of(r)[0] for r in ratio])
    resid = inv - np.clip(s, centres[0], centres[-1])
    mad = 1.4826 * float(np.median(np.abs(resid - np.median(resid))))
    scatter = max(0.25, mad) if math.isfinite(mad) else 0.5
    note = "curve calibrated on our grid, not published"
    if rule.anchor is not None:
        curve = curve - float(np.interp(rule.anchor, centres, curve))
        note += f"; zero point pinned at subtype {rule.anchor:g} (remembered equality)"
    return dataclasses.replace(rule, knots=(tuple(centres), tuple(curve)), scatter=scatter,
                               notes=note)


def calibrate_rules(grid, rules=SECONDARY) -> tuple[RatioCurveRule, ...]:
    """Calibrate every rule on ``grid`` (see :func:`calibrate_rule`)."""
    labels = grid_labels(grid)
    return tuple(calibrate_rule(r, grid, labels) for r in rules)


#: Name of the calibrated rules' entries in the user cache (:mod:`starlines.cache`).
RULES_CACHE_NAME = "rulecal"


def _plain(value):
    """JSON-ready copy of a rule field (tuples -> lists, numpy floats -> float)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    raise TypeError(f"rule field of type {type(value)} cannot be cached")


def _tupled(value):
    return tuple(_tupled(v) for v in value) if isinstance(value, list) else value


def rules_to_json(calibrated, rules=SECONDARY) -> list[dict]:
    """The fields calibration changed, per rule (for the cache)."""
    out = []
    for cal, raw in zip(calibrated, rules):
        changed = {f.name: _plain(getattr(cal, f.name)) for f in dataclasses.fields(cal)
                   if getattr(cal, f.name) != getattr(raw, f.name)}
        out.append({"name": raw.name, "changed": changed})
    return out


def rules_from_json(doc, rules=SECONDARY) -> tuple[RatioCurveRule, ...]:
    """Inverse of :func:`rules_to_json` (ValueError when the entry does not match ``rules``)."""
    if [d["name"] for d in doc] != [r.name for r in rules]:
        raise ValueError("cached rules do not match the rule list")
    return tuple(dataclasses.replace(r, **{k: _tupled(v) for k, v in d["changed"].items()})
                 for r, d in zip(rules, doc))


@lru_cache(maxsize=1)
def calibrated_rules() -> tuple[RatioCurveRule, ...]:
    """:data:`~starlines.rules.SECONDARY` calibrated on the shipped grid (cached).

    Cached in memory for the process and in the user cache (:mod:`starlines.cache`, keyed
    by the grid file's checksum and the code) for later processes; equal to a fresh
    :func:`calibrate_rules` either way.
    """
    from starlines.cache import (
        cache_key,
        code_digest,
        file_digest,
        from_json_array,
        json_array,
        load_arrays,
        save_arrays,
    )
    from starlines.grid import load_grid, shipped_grid_path

    try:
        key = cache_key(RULES_CACHE_NAME, file_digest(shipped_grid_path()), code_digest())
    except OSError:  # grid file unreadable: let load_grid report it
        return calibrate_rules(load_grid())
    cached = load_arrays(RULES_CACHE_NAME, key)
    if cached is not None:
        try:
            return rules_from_json(from_json_array(cached["rules"]))
        except (KeyError, ValueError, TypeError):
            pass  # entry of another layout: recalibrate and overwrite
    rules = calibrate_rules(load_grid())
    try:
        save_arrays(RULES_CACHE_NAME, key, {"rules": json_array(rules_to_json(rules))})
    except TypeError:
        pass
    return rules
