"""Ranked follow-up list: which stars deserve telescope time first, and why.

The score of a spectrum is

    score = interest x confidence

- **interest** is the sum of the interest weights of its flags (:attr:`Flag.interest` in
  :mod:`starlines.flags`; e.g. Wolf-Rayet-like 5, double-lined 4, velocity outlier 4,
  Of-like or Balmer emission 3, fast rotator 2). A star with no interesting flag scores 0
  and is not on the list.
- **confidence** in [0, 1] is how far the measurements behind the flags can be trusted:
  ``min(1, S/N / 100)`` (S/N 100 per pixel makes every line of the type criteria a
  > 10 sigma detection, so better data adds little; common practice), times 0.5 when the
  classifier itself was unsure (probability < 0.5), times 0.5 when the star is not a hot
  star at all, times 0.5 when the data look bad (``suspect-data``). Failed spectra have
  confidence 0.

The rank is 1 for the highest score; ties are broken by S/N (higher first) and then by
file name, so the list is reproducible.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

from starlines.flags import flag, split_flags

__all__ = ["interest", "confidence", "score", "reason", "rank_rows", "SNR_FULL_CONFIDENCE"]

#: S/N per pixel at which confidence reaches 1.
SNR_FULL_CONFIDENCE = 100.0


def _num(x, default: float = math.nan) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return default
    return v if math.isfinite(v) else default


def interest(flags: Sequence[str]) -> float:
    """Sum of the interest weights of ``flags`` (unknown names weigh 0)."""
    total = 0.0
    for name in flags:
        try:
            total += flag(name).interest
        except KeyError:
            continue
    return total


def confidence(row: Mapping) -> float:
    """Confidence in [0, 1] of a result row's flags (see the module docstring)."""
    if row.get("status") != "ok":
        return 0.0
    snr = _num(row.get("snr"), 0.0)
    conf = min(1.0, max(snr, 0.0) / SNR_FULL_CONFIDENCE)
    if _num(row.get("probability"), 1.0) < 0.5:
        conf *= 0.5
    flags = split_flags(row.get("flags", ""))
    for doubt in ("not-hot-star", "suspect-data"):
        if doubt in flags:
            conf *= 0.5
    return conf


def score(row: Mapping) -> float:
    """Follow-up score: interest x confidence, rounded to 3 decimals."""
    return round(interest(split_flags(row.get("flags", ""))) * confidence(row), 3)


def reason(row: Mapping) -> str:
    """The score in words: what was found and how sure we are."""
    flags = [f for f in split_flags(row.get("flags", "")) if _weight(f) > 0]
    if not flags:
        return ""
    found = "; ".join(flag(f).description for f in sorted(flags, key=lambda f: -_weight(f)))
    snr = _num(row.get("snr"))
    sure = f"S/N {snr:.0f}" if math.isfinite(snr) else "S/N unknown"
    if _num(row.get("probability"), 1.0) < 0.5:
        sure += ", uncertain type"
    if "suspect-data" in split_flags(row.get("flags", "")):
        sure += ", suspect data"
    return f"{found} ({sure})"


def _weight(name: str) -> float:
    try:
        return flag(name).interest
    except KeyError:
        return 0.0


def rank_rows(rows: Sequence[dict]) -> list[dict]:
    """Score and rank rows in place; return the follow-up list, best first.

    Each row gets ``followup_score`` (float), ``followup_rank`` (int, 0 when not on the
    list) and ``followup_reason`` (str).

    Parameters
    ----------
    rows : sequence of dict
        Result rows with their final ``flags``.

    Returns
    -------
    list of dict
        The rows with a positive score, ordered by rank.
    """
    for row in rows:
        row["followup_score"] = score(row)
        row["followup_reason"] = reason(row) if row["followup_score"] > 0 else ""
        row["followup_rank"] = 0
    chosen = [r for r in rows if r["followup_score"] > 0]
    chosen.sort(key=lambda r: (-r["followup_score"], -_num(r.get("snr"), 0.0),
                               str(r.get("file", "")), str(r.get("label", ""))))
    for i, row in enumerate(chosen, start=1):
        row["followup_rank"] = i
    return chosen
