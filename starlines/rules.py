"""Published line-ratio rules of MK classification for O and early-B stars.

Each rule is a small frozen object that cites its source in its docstring and keeps its
valid range and its numbers as data (``valid_range`` in subtype numbers, O3 = 3.0 ...
B0 = 10.0 ... B3 = 13.0). Rules read equivalent widths (Angstrom, absorption positive) from
a mapping ``line id -> LineValue`` (see :func:`line_values`) and return a
:class:`RuleResult`, or None when the lines they need are missing.

* :class:`LogWPrimeRule`: subtype from log W' = log10 EW(He I 4471)/EW(He II 4541),
  Conti & Alschuler (1971) as extended by Mathys (1988).
* :class:`RatioCurveRule`: late-O / early-B criteria whose numbers are not published in
  our sources; their ratio-versus-subtype curves are calibrated on the synthetic grid
  (:mod:`starlines.rulecal`), some pinned at a remembered equality point.
* Luminosity class and Of qualifiers live in :mod:`starlines.lumrules`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "LineValue",
    "RuleResult",
    "LogWPrimeRule",
    "RatioCurveRule",
    "line_values",
    "log_ratio",
    "PRIMARY",
    "SECONDARY",
    "DETECTION_SIGMA",
    "EW_FLOOR",
    "EMISSION_PRONE",
    "SIIV_DOUBLET_RATIO",
    "remove_oii_4089",
]

#: A line counts as detected when its EW exceeds this many standard errors (common practice).
DETECTION_SIGMA = 3.0
#: Smallest EW (Angstrom) used in a log ratio: weaker lines are treated as at most this
#: strong (about the detection limit at S/N ~ 100 and R ~ 2000; common practice).
EW_FLOOR = 0.02
#: Lines that go into emission in O, Of, Oe and Be stars (common practice): Balmer lines,
#: He II 4686, N III 4634-42, C III 4647-51, Si IV 4089/4116 (Of), He I 5876/6678 (Be).
#: A negative EW of any other line is read as a non-detection, not as emission.
EMISSION_PRONE = frozenset({
    "HI6563", "HI4861", "HI4340", "HI4102", "HI3970", "HeII4686", "NIII4634", "NIII4641",
    "NIII4642", "CIII4647", "CIII4650", "CIII4651", "SiIV4089", "SiIV4116", "HeI5876",
    "HeI6678",
})
#: Largest EW(Si IV 4089) / EW(Si IV 4116): the ratio of the doublet's gf values (4s 2S -
#: 4p 2P3/2 : 2P1/2 = 2 : 1 in LS coupling; log gf +0.20 and -0.11 in ``starlines.atomic``,
#: from memory), reached for optically thin lines; saturation only lowers it (our grid:
#: 1.1-1.4 at 24-34 kK). Not tuned on any spectrum.
SIIV_DOUBLET_RATIO = 2.0
#: Line statuses whose EW is a usable number (see DEVELOPERS.md, measure contract).
USABLE_STATUS = ("measured", "not detected", "blended")


@dataclass(frozen=True)
class LineValue:
    """EW of one line: ``ew`` and ``err`` in Angstrom (absorption positive)."""

    ew: float
    err: float
    status: str = "measured"
    emission: bool = False

    @property
    def usable(self) -> bool:
        """The EW is a number we may use (measured, not detected, or blended)."""
        return self.status in USABLE_STATUS and math.isfinite(self.ew)

    @property
    def detected(self) -> bool:
        """Absorption detected at :data:`DETECTION_SIGMA`."""
        err = self.err if math.isfinite(self.err) else 0.0
        return self.usable and not self.emission and self.ew > max(DETECTION_SIGMA * err, 0.0)

    @property
    def in_emission(self) -> bool:
        """Net emission flagged by the measurement and detected at :data:`DETECTION_SIGMA`."""
        err = self.err if math.isfinite(self.err) else 0.0
        return self.usable and self.emission and self.ew < -DETECTION_SIGMA * err

    @property
    def upper_limit(self) -> float:
        """Largest EW the line can have (3 sigma, at least :data:`EW_FLOOR`)."""
        err = self.err if math.isfinite(self.err) else 0.0
        return max(self.ew + DETECTION_SIGMA * err if self.ew > 0 else DETECTION_SIGMA * err,
                   EW_FLOOR)


def line_values(table) -> dict[str, LineValue]:
    """Read a line table (columns ``line, ew, ew_err, status, emission``) into a dict.

    Quantity columns are converted to Angstrom; ``status`` and ``emission`` are optional.
    """
    import astropy.units as u

    def col(name):
        c = table[name]
        if hasattr(c, "unit") and c.unit is not None:
            return np.asarray(u.Quantity(c).to_value(u.AA), float)
        return np.asarray(c, float)

    ew, err = col("ew"), col("ew_err")
    names = table.colnames
    status = table["status"] if "status" in names else ["measured"] * len(table)
    emission = table["emission"] if "emission" in names else ew < 0
    out = {}
    for i in range(len(table)):
        ident = str(table["line"][i])
        em = bool(emission[i])
        if em and ident not in EMISSION_PRONE:
            em = False  # a negative EW of a line that is never in emission: not detected
        out[ident] = LineValue(float(ew[i]), float(err[i]), str(status[i]), em)
    return remove_oii_4089(out)


def remove_oii_4089(values: dict[str, LineValue]) -> dict[str, LineValue]:
    """Si IV 4089 without its unresolved O II 4089.29 blend, bounded by Si IV 4116.

    O II 4089.29 lies 0.4 A from Si IV 4088.86 (common practice: O II is strong in B1-B2
    giants and supergiants), so the fitted "Si IV 4089" of a B star can be mostly O II;
    this made B supergiants one to one and a half subtypes too early through the Si IV /
    Si III criterion (MILES v9.1: HD 41117, HD 214080 had EW(4089) 0.19-0.25 A with Si IV
    4116 undetected). Si IV 4116 has no such blend and 4089 can be at most
    :data:`SIIV_DOUBLET_RATIO` times as strong, so when the measured 4089 exceeds that
    bound, the bound (with 4116's error scaled likewise) replaces it. Without a usable
    4116 (blended with He I 4121 at low resolution) 4089 is left as measured.
    """
    a, b = values.get("SiIV4089"), values.get("SiIV4116")
    if (a is None or b is None or not (a.usable and b.usable) or b.status == "blended"
            or a.emission or b.emission):
        return values
    # clipping to the physical bound (constrained estimate); the bound keeps 4116's
    # scaled error, so an undetected 4116 leaves 4089 undetected, with that upper limit
    bound = SIIV_DOUBLET_RATIO * max(b.ew, 0.0)
    if a.ew <= bound:
        return values
    err = SIIV_DOUBLET_RATIO * (b.err if math.isfinite(b.err) else 0.0)
    out = dict(values)
    out["SiIV4089"] = LineValue(bound, err, a.status, False)
    return out


def _sum(values: Mapping[str, LineValue], ids: tuple[str, ...]) -> LineValue | None:
    got = [values[i] for i in ids if i in values and values[i].usable]
    if not got:
        return None
    return LineValue(sum(v.ew for v in got), math.sqrt(sum(v.err**2 for v in got)),
                     "measured", any(v.emission for v in got))


def log_ratio(num: LineValue, den: LineValue) -> tuple[float, float, str]:
    """log10(num/den) with its error and a limit kind.

    Returns
    -------
    value, error, limit : float, float, str
        ``limit`` is ``""`` when both lines are detected, ``"lower"`` when only the
        numerator is (the denominator replaced by its upper limit), ``"upper"`` when only
        the denominator is, and ``"none"`` when neither is (value NaN).
    """
    a, b = num.detected, den.detected
    if a and b:
        val = math.log10(num.ew / den.ew)
        err = math.hypot(num.err / num.ew, den.err / den.ew) / math.log(10)
        return val, err, ""
    if a:
        return math.log10(num.ew / den.upper_limit), 0.0, "lower"
    if b:
        return math.log10(num.upper_limit / den.ew), 0.0, "upper"
    return math.nan, math.nan, "none"



def _rule_ratio(values: Mapping[str, LineValue], numerator, denominator):
    """:func:`log_ratio` of the summed lines; None when a line is missing or neither is detected."""
    num, den = _sum(values, numerator), _sum(values, denominator)
    if num is None or den is None:
        return None
    val, err, limit = log_ratio(num, den)
    return None if limit == "none" else (val, err, limit)

@dataclass(frozen=True)
class RuleResult:
    """What one rule says: a subtype (or a limit on it) and its error."""

    rule: str
    subtype: float
    subtype_err: float
    value: float
    value_err: float
    limit: str = ""  # "", "lower" (subtype at least this), "upper" (at most this)


@dataclass(frozen=True)
class LogWPrimeRule:
    """Subtype from log W' = log10[EW(He I 4471) / EW(He II 4541)].

    Conti & Alschuler (1971), ApJ 170, 325, extended by Mathys (1988), A&AS 76, 427 and
    Mathys (1989), A&AS 81, 237 (O3, O9.7, refined O4). Bin edges transcribed from a public
    analysis script quoting Mathys (1988) (criteria.md section 1, label "transcribed");
    the O5-O9.5 edges agree with memory. Which side of an edge belongs to which subtype is
    unspecified (criteria.md C1): an exact edge value goes to the later subtype here.
    Above log W' = 1.00 the type is O9.7 or later (a lower limit).
    """

    name: str = "logW'"
    numerator: tuple[str, ...] = ("HeI4471",)
    denominator: tuple[str, ...] = ("HeII4541",)
    valid_range: tuple[float, float] = (3.0, 9.7)
    edges: tuple[float, ...] = (
        -0.90, -0.60, -0.45, -0.30, -0.20, -0.10, 0.00, 0.10, 0.20, 0.30, 0.45, 0.65, 1.00,
    )
    subtypes: tuple[float, ...] = (
        3.0, 4.0, 5.0, 5.5, 6.0, 6.5, 7.0, 7.5, 8.0, 8.5, 9.0, 9.5, 9.7, 9.7,
    )
    reference: str = "Conti & Alschuler (1971); Mathys (1988, 1989) [transcribed]"

    def subtype_of(self, value: float) -> float:
        """Subtype whose log W' bin holds ``value`` (O9.7 above the last edge)."""
        if not math.isfinite(value):
            return math.nan
        return self.subtypes[int(np.searchsorted(self.edges, value, side="right"))]

    def evaluate(self, values: Mapping[str, LineValue]) -> RuleResult | None:
        """Apply the rule; None when either line is missing or neither is detected."""
        ratio = _rule_ratio(values, self.numerator, self.denominator)
        if ratio is None:
            return None
        val, err, limit = ratio
        sub = self.subtype_of(val)
        if limit == "lower" or val > self.edges[-1]:
            # He II weak or absent: at least this subtype
            return RuleResult(self.name, sub, 0.5, val, err, "lower")
        if limit == "upper":
            return RuleResult(self.name, sub, 0.5, val, err, "upper")
        lo, hi = self.subtype_of(val - err), self.subtype_of(val + err)
        sub_err = max(0.25, 0.5 * (hi - lo))
        return RuleResult(self.name, sub, sub_err, val, err, "")


@dataclass(frozen=True)
class RatioCurveRule:
    """A monotonic log-ratio-versus-subtype relation, inverted to give a subtype.

    ``knots`` holds the relation as (subtype numbers, log ratios); it is filled by
    :func:`starlines.rulecal.calibrate_rules` from the synthetic grid ("calibrated on our
    grid, not published"). When ``anchor`` is set, the curve is shifted so that the log
    ratio is 0 (equal lines) at that subtype: the published (or remembered) criterion fixes
    the zero point, the grid only the slope. ``scatter`` (subtypes) is the spread of the
    grid models around the curve, added to the measurement error.
    """

    name: str
    numerator: tuple[str, ...]
    denominator: tuple[str, ...]
    valid_range: tuple[float, float]
    reference: str
    anchor: float | None = None
    knots: tuple[tuple[float, ...], tuple[float, ...]] | None = None
    scatter: float = 0.5
    notes: str = field(default="", compare=False)

    def subtype_of(self, value: float) -> tuple[float, str]:
        """Subtype for a log ratio, and ``"lower"``/``"upper"`` if beyond the curve's ends."""
        sub, ratio = (np.asarray(k, float) for k in self.knots)
        if ratio[-1] < ratio[0]:  # make the ratio increasing for np.interp
            sub, ratio = sub[::-1], ratio[::-1]
        s = float(np.interp(value, ratio, sub))
        if value <= ratio[0] or value >= ratio[-1]:
            end = s
            return end, "lower" if end >= max(sub[0], sub[-1]) - 1e-9 else "upper"
        return s, ""

    def evaluate(self, values: Mapping[str, LineValue]) -> RuleResult | None:
        """Apply the rule; None when uncalibrated, lines missing or undetected."""
        if self.knots is None:
            return None
        ratio = _rule_ratio(values, self.numerator, self.denominator)
        if ratio is None:
            return None
        val, err, limit = ratio
        sub, end = self.subtype_of(val)
        if limit:
            # a limit on the ratio is a limit on the subtype in the curve's direction
            sub_ratio = np.asarray(self.knots[1], float)
            rising = sub_ratio[-1] > sub_ratio[0]
            later = (limit == "lower") == rising
            return RuleResult(self.name, sub, self.scatter, val, err,
                              "lower" if later else "upper")
        lo, _ = self.subtype_of(val - err)
        hi, _ = self.subtype_of(val + err)
        sub_err = math.hypot(0.5 * abs(hi - lo), self.scatter)
        return RuleResult(self.name, sub, sub_err, val, err, end)


_SOTA = "Sota et al. (2011), ApJS 193, 24 [memory]"
_WALBORN = "Walborn (1971); Walborn & Fitzpatrick (1990) [memory]"
_GRID = "calibrated on our grid, not published"

#: The primary O-star rule.
PRIMARY = LogWPrimeRule()

#: Secondary criteria for late O and early B (uncalibrated until rulecal fills the knots).
SECONDARY: tuple[RatioCurveRule, ...] = (
    RatioCurveRule("HeI4144/HeII4200", ("HeI4144",), ("HeII4200",), (8.0, 10.0),
                   f"O9 where equal: {_SOTA}; slope {_GRID}", anchor=9.0),
    RatioCurveRule("HeI4388/HeII4541", ("HeI4388",), ("HeII4541",), (8.5, 10.2),
                   f"O9.5 where equal: {_SOTA}; slope {_GRID}", anchor=9.5),
    RatioCurveRule("SiIII4553/HeII4541", ("SiIII4553",), ("HeII4541",), (9.0, 10.2),
                   f"O9.7 where equal: Walborn (1971), {_SOTA}; slope {_GRID}", anchor=9.7),
    RatioCurveRule("SiIV4089/SiIII4553", ("SiIV4089",), ("SiIII4553",), (9.5, 11.5),
                   f"rises to later types B0-B1: {_WALBORN}; curve {_GRID}"),
    RatioCurveRule("SiII4128+4131/SiIII4553", ("SiII4128", "SiII4131"), ("SiIII4553",),
                   (11.0, 13.5),
                   "B2.5 where equal: Walborn & Fitzpatrick (1990) atlas sequence [memory, "
                   f"not checked]; slope {_GRID}", anchor=12.5),
    RatioCurveRule("MgII4481/HeI4471", ("MgII4481",), ("HeI4471",), (11.0, 14.0),
                   f"B1-B3, Mg II strengthens to later types; curve {_GRID}"),
    RatioCurveRule("CII4267/HeI4471", ("CII4267",), ("HeI4471",), (10.5, 13.5),
                   f"B0.5-B3, C II strengthens to later types; curve {_GRID}"),
)
