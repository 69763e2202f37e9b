"""Which lines are measured, which are fitted together, and which parameters they share.

Planning only: no fitting happens here. For a spectrum and a line width this module
decides, for every catalogue line,

* its status when it cannot be measured: ``"outside range"`` (its core leaves the
  spectrum), ``"masked"`` (bad pixels in its core) or ``"blended"`` (it lies closer to a
  stronger-kind neighbour than the lines can be told apart; that neighbour's row carries
  the combined equivalent width and lists it in ``blended_with``);
* its fit group: lines whose windows reach each other's centres are fitted simultaneously
  (He II 4541 + Si III 4553, He I 4471 + Mg II 4481, a Balmer line with the He/Si lines on
  its wings, the N III/C III 4634-4651 complex and, for broad lines, He II 4686);
* tied parameters: lines closer than ~1.2 FWHM share a Doppler velocity and a width;
  a resolved He II n->4 line shares the velocity of its Balmer neighbour.

Resolvability: two lines are separated when their distance is at least
:data:`SEPARATION_FACTOR` times the expected FWHM of the narrower one; for a Balmer line
and its He II neighbour (whose core sits inside the broad Balmer core) the stricter
:data:`BALMER_SEPARATION_FACTOR` applies. Both are common practice choices.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from starlines.continuum import BALMER_HALFWIDTH, expected_fwhm
from starlines.lines import Line

__all__ = ["PlannedLine", "FitGroup", "plan_lines", "SEPARATION_FACTOR"]

#: Minimum separation, in expected FWHM of the narrower line, for two lines to be fitted as
#: separate components.
SEPARATION_FACTOR = 0.5
#: Same for a Balmer line and its He II n->4 neighbour.
BALMER_SEPARATION_FACTOR = 0.75
#: Lines closer than this many FWHM share velocity and width.
TIE_FACTOR = 1.2
#: Fraction of bad pixels in a line core above which the line is "masked".
MASKED_FRACTION = 0.3
_PRIORITY = {"balmer": 0, "hei": 1, "heii": 2, "metal": 3}


@dataclass
class PlannedLine:
    """One catalogue line as planned for measurement (wavelengths in Angstrom)."""

    line: Line
    rest: float
    obs: float
    fwhm: float
    halfwidth: float
    core: float
    status: str = ""
    blended_with: list[str] = field(default_factory=list)


@dataclass
class FitGroup:
    """Lines fitted together on [lo, hi], with their velocity and width group indices."""

    members: list[PlannedLine]
    lo: float
    hi: float
    vgroup: list[int]
    wgroup: list[int]


def _plan_one(ln: Line, medium: str, fwhm: float, shift: float) -> PlannedLine:
    rest = ln.wavelength(medium)
    f = expected_fwhm(ln, fwhm)
    if ln.kind == "balmer":
        hw = float(np.hypot(BALMER_HALFWIDTH.get(ln.upper, 10.0), 2.5 * fwhm))
        core = max(12.0, 2.0 * f) if ln.upper <= 7 else max(6.0, 2.0 * f)
    else:
        hw, core = 2.5 * f, 1.5 * f
    return PlannedLine(ln, rest, rest * shift, f, hw, core)


def _mark_range_and_mask(pl: PlannedLine, w: np.ndarray, good: np.ndarray) -> None:
    if pl.obs - pl.core < w[0] or pl.obs + pl.core > w[-1]:
        pl.status = "outside range"
        return
    i0, i1 = np.searchsorted(w, [pl.obs - pl.fwhm, pl.obs + pl.fwhm])
    i1 = max(i1, i0 + 1)
    if 1.0 - good[i0:i1].mean() > MASKED_FRACTION or not good[min(np.searchsorted(w, pl.obs),
                                                                  w.size - 1)]:
        pl.status = "masked"


def _resolvable(a: PlannedLine, b: PlannedLine, fwhm: float) -> bool:
    sep = abs(a.rest - b.rest)
    kinds = {a.line.kind, b.line.kind}
    if kinds == {"balmer", "heii"}:  # judged on instrument + rotation ("resolution allows")
        return sep >= BALMER_SEPARATION_FACTOR * fwhm
    if "balmer" in kinds:
        return sep >= SEPARATION_FACTOR * min(a.fwhm, b.fwhm)
    return sep >= SEPARATION_FACTOR * min(a.fwhm, b.fwhm)


def _merge_unresolved(active: list[PlannedLine], fwhm: float) -> list[PlannedLine]:
    """Fold unresolved neighbours into the primary line; return the lines left to fit."""
    keep: list[PlannedLine] = []
    for pl in sorted(active, key=lambda p: p.rest):
        partner = next((k for k in keep[-4:] if not _resolvable(k, pl, fwhm)), None)
        if partner is None:
            keep.append(pl)
            continue
        if _PRIORITY[pl.line.kind] < _PRIORITY[partner.line.kind]:
            keep[keep.index(partner)] = pl
            primary, secondaries = pl, [partner] + [
                p for p in active if p.line.id in partner.blended_with]
            partner.blended_with = []
        else:
            primary, secondaries = partner, [pl]
        for sec in secondaries:
            sec.status = "blended"
            sec.blended_with = [primary.line.id]
            if sec.line.id not in primary.blended_with:
                primary.blended_with.append(sec.line.id)
    return keep


def _groups(fit: list[PlannedLine]) -> list[list[PlannedLine]]:
    fit = sorted(fit, key=lambda p: p.rest)
    groups: list[list[PlannedLine]] = []
    for pl in fit:
        joined = None
        for g in groups:
            for q in g:
                sep = abs(q.obs - pl.obs)
                reach = max(q.halfwidth, pl.halfwidth) + 2.0 * min(q.fwhm, pl.fwhm)
                if q.line.kind == "balmer" or pl.line.kind == "balmer":
                    # a neighbour must reach into the Balmer window to join it
                    reach = max(q.halfwidth, pl.halfwidth) + 0.5 * min(q.fwhm, pl.fwhm)
                if sep < reach:
                    joined = g
                    break
            if joined is not None:
                break
        if joined is None:
            groups.append([pl])
        else:
            joined.append(pl)
    return groups


def _ties(members: list[PlannedLine]) -> tuple[list[int], list[int]]:
    n = len(members)
    vg, wg = list(range(n)), list(range(n))
    for i, a in enumerate(members):
        for j in range(i):
            b = members[j]
            kinds = {a.line.kind, b.line.kind}
            sep = abs(a.rest - b.rest)
            if kinds == {"balmer", "heii"} and sep < 3.0:
                vg[i] = vg[j]
            elif "balmer" not in kinds and sep < TIE_FACTOR * min(a.fwhm, b.fwhm):
                vg[i], wg[i] = vg[j], wg[j]

    def relabel(g):
        order = {v: k for k, v in enumerate(dict.fromkeys(g))}
        return [order[v] for v in g]

    return relabel(vg), relabel(wg)


def plan_lines(
    lines: list[Line],
    w: np.ndarray,
    good: np.ndarray,
    medium: str,
    fwhm: float,
    velocity: float = 0.0,
) -> tuple[list[PlannedLine], list[FitGroup]]:
    """Plan the measurement of ``lines`` on wavelength grid ``w``.

    Parameters
    ----------
    lines : list of Line
    w, good : numpy.ndarray
        Wavelength grid and usable-pixel mask.
    medium : {"air", "vacuum"}
    fwhm : float
        FWHM of the narrow (He/metal) lines in Angstrom.
    velocity : float
        Expected Doppler velocity (km/s) of the lines.

    Returns
    -------
    planned : list of PlannedLine
        Every line, in the order given, with its status preset where it cannot be fitted.
    groups : list of FitGroup
    """
    shift = 1.0 + velocity / 299792.458
    planned = [_plan_one(ln, medium, fwhm, shift) for ln in lines]
    for pl in planned:
        _mark_range_and_mask(pl, w, good)
    active = [p for p in planned if not p.status]
    fit = _merge_unresolved(active, fwhm)
    groups = []
    for members in _groups(fit):
        lo = max(min(p.obs - p.halfwidth for p in members), float(w[0]))
        hi = min(max(p.obs + p.halfwidth for p in members), float(w[-1]))
        vg, wg = _ties(members)
        groups.append(FitGroup(members, lo, hi, vg, wg))
    return planned, groups
