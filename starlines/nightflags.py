"""Night-scope flags: velocity outliers within one frame, target list, archive variables.

Decided by :func:`night_flags` once every file of a night is analysed (the spectrum-scope
flags are in :mod:`starlines.flags`, which re-exports the functions here). Velocities are
compared only within one frame (:data:`VELOCITY_FRAMES`): barycentric and
heliocentric together, topocentric ones among themselves, and only barycentric ones with
the target list's systemic velocities; :func:`night_notes` says so in the row's notes.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence

from starlines.numeric import is_finite as _finite

__all__ = ["velocity_outliers", "night_flags", "night_notes", "OUTLIER_NSIGMA",
           "OUTLIER_FLOOR_KMS", "SYSTEMIC_TOLERANCE_KMS", "SUBTYPE_TOLERANCE",
           "VELOCITY_FRAMES"]

#: Robust velocity outlier: |rv - median| > OUTLIER_NSIGMA x 1.4826 x MAD of the night's
#: velocities, and more than OUTLIER_FLOOR_KMS and 3 rv_err. 1.4826 MAD estimates sigma
#: for a normal sample (common practice); 4 sigma keeps false alarms below 1 in 10^4 stars.
OUTLIER_NSIGMA = 4.0
OUTLIER_FLOOR_KMS = 20.0
#: Departure (km/s) from the target list's expected systemic velocity that flags an
#: outlier: runaway OB stars are defined by peculiar velocities above ~30-40 km/s
#: (Blaauw 1961, [memory]).
SYSTEMIC_TOLERANCE_KMS = 30.0
#: Velocity frames compared with each other by the night's outlier test. Barycentric and
#: heliocentric velocities differ by < 0.02 km/s (the Sun's reflex motion about the
#: barycentre, ~13 m/s; [memory]) and form one sample; topocentric velocities carry the
#: Earth's motion (up to +-30 km/s, common practice) and form a sample of their own; they
#: are never compared with the target list's systemic velocities.
VELOCITY_FRAMES = {"barycentric": "barycentric", "heliocentric": "barycentric",
                   "topocentric": "topocentric"}
#: Subtypes (1.0 = one step O5 -> O6, B0 -> B1) beyond which two types "disagree".
#: Digital types differ from photographic ones by up to 1.5 subtypes (criteria.md C4),
#: so one full subtype is the smallest difference worth a look; against the target list
#: the difference must also exceed 3 x the measured subtype error (as for helium), so a
#: noisy spectrum's uncertain type does not contradict its catalogue.
SUBTYPE_TOLERANCE = 1.0


def split_flags(text: str) -> list[str]:
    """Flag names of a comma-separated cell (as :func:`starlines.flags.split_flags`)."""
    return [s for s in (text or "").split(",") if s]


def join_flags(names) -> str:
    """Display-ordered flags (:func:`starlines.flags.join_flags`; imported when called,
    since :mod:`starlines.flags` imports this module)."""
    from starlines.flags import join_flags as join

    return join(names)



def velocity_outliers(
    rv: Sequence[float], rv_err: Sequence[float] | None = None
) -> list[bool]:
    """Robust outliers of a velocity sample (median and MAD; see :data:`OUTLIER_NSIGMA`).

    Non-finite velocities are never outliers and do not enter the statistics. Fewer than
    five finite velocities give no outliers (the MAD means little).
    """
    vals = [float(v) if _finite(v) else math.nan for v in rv]
    errs = [float(e) if rv_err is not None and _finite(e) else 0.0
            for e in (rv_err if rv_err is not None else [None] * len(vals))]
    good = sorted(v for v in vals if not math.isnan(v))
    if len(good) < 5:
        return [False] * len(vals)
    med = _median(good)
    sigma = 1.4826 * _median(sorted(abs(v - med) for v in good))
    out = []
    for v, e in zip(vals, errs):
        limit = max(OUTLIER_NSIGMA * sigma, OUTLIER_FLOOR_KMS, 3 * e)
        out.append(not math.isnan(v) and abs(v - med) > limit)
    return out


def _median(sorted_vals: Sequence[float]) -> float:
    n = len(sorted_vals)
    mid = n // 2
    return sorted_vals[mid] if n % 2 else 0.5 * (sorted_vals[mid - 1] + sorted_vals[mid])


def night_flags(
    rows: Sequence[Mapping],
    *,
    expected: Sequence[Mapping | None] | None = None,
    variable: Iterable[str] = (),
) -> list[list[str]]:
    """Decide the night-scope flags for every row.

    Parameters
    ----------
    rows : sequence of mapping
        All result rows of the night (failed ones included; they get no night flags).
    expected : sequence of mapping or None, optional
        Per row, the matched target-list entry with optional ``subtype`` (catalogue subtype
        number) and ``rv`` (expected systemic velocity, km/s); None when unmatched.
    variable : iterable of str
        Object names the archive found velocity-variable.

    Returns
    -------
    list of list of str
        Night flags per row, same order as ``rows``.
    """
    expected = expected if expected is not None else [None] * len(rows)
    variable = set(variable)
    outlier = _frame_outliers(rows)
    result = []
    for row, exp, out in zip(rows, expected, outlier):
        found: set[str] = set()
        if row.get("status") != "ok":
            result.append([])
            continue
        rv = row.get("rv")
        if out:
            found.add("velocity-outlier")
        if (exp and _finite(exp.get("rv")) and _finite(rv)
                and _frame_group(row) == "barycentric"):
            err = float(row.get("rv_err")) if _finite(row.get("rv_err")) else 0.0
            if abs(float(rv) - float(exp["rv"])) > max(SYSTEMIC_TOLERANCE_KMS, 3 * err):
                found.add("velocity-outlier")
        sub = row.get("subtype")
        if exp and _finite(exp.get("subtype")) and _finite(sub):
            err = float(row.get("subtype_err")) if _finite(row.get("subtype_err")) else 0.0
            if abs(float(sub) - float(exp["subtype"])) > max(SUBTYPE_TOLERANCE, 3 * err):
                found.add("catalogue-type-differs")
        if row.get("object") and row["object"] in variable:
            found.add("velocity-variable")
        result.append(split_flags(join_flags(found)))
    return result


def _frame_group(row: Mapping) -> str:
    """Sample a row's velocity belongs to (:data:`VELOCITY_FRAMES`; unknown frames alone)."""
    frame = str(row.get("rv_frame") or "")
    return VELOCITY_FRAMES.get(frame, frame or "unknown")


def _frame_outliers(rows: Sequence[Mapping]) -> list[bool]:
    """Velocity outliers decided within each frame group separately."""
    groups: dict[str, list[int]] = {}
    for i, r in enumerate(rows):
        if r.get("status") == "ok" and "double-lined" not in split_flags(r.get("flags", "")):
            groups.setdefault(_frame_group(r), []).append(i)
    out = [False] * len(rows)
    for idx in groups.values():
        found = velocity_outliers([rows[i].get("rv") for i in idx],
                                  [rows[i].get("rv_err") for i in idx])
        for i, hit in zip(idx, found):
            out[i] = hit
    return out


def night_notes(rows: Sequence[Mapping], *,
                expected: Sequence[Mapping | None] | None = None) -> list[str]:
    """Per row, a note on how its velocity was compared in the night ('' when as usual).

    Rows whose velocity is not barycentric/heliocentric are compared only with the night's
    other velocities of the same frame, and never with the target list's systemic
    velocity; the note says so (see :data:`VELOCITY_FRAMES`).
    """
    expected = expected if expected is not None else [None] * len(rows)
    counts: dict[str, int] = {}
    for r in rows:
        if r.get("status") == "ok" and _finite(r.get("rv")):
            counts[_frame_group(r)] = counts.get(_frame_group(r), 0) + 1
    notes = []
    for row, exp in zip(rows, expected):
        group = _frame_group(row)
        if row.get("status") != "ok" or not _finite(row.get("rv")) or group == "barycentric":
            notes.append("")
            continue
        n = counts.get(group, 0) - 1
        text = (f"velocity {group}: compared only with the night's {n} other {group} "
                "velocities" if n >= 4 else
                f"velocity {group}: too few {group} velocities ({n} others) to compare")
        if exp and _finite(exp.get("rv")):
            text += ", not with the target list's systemic velocity"
        notes.append(text)
    return notes
