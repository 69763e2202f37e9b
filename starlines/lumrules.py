"""Luminosity class, Of qualifiers and emission diagnostics for O and early-B stars.

Rules read a mapping ``line id -> LineValue`` (:func:`starlines.rules.line_values`); EWs
in Angstrom, absorption positive, net emission negative. Each rule keeps its thresholds and
valid range as data and cites its source; "transcribed" means the numbers come from a
third-party script quoting the paper (criteria.md section 3b, caveat C8), not from the
paper itself.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

from starlines.rules import LineValue, log_ratio

__all__ = [
    "LumResult",
    "HeII4686LuminosityRule",
    "SiIVLuminosityRule",
    "LUMINOSITY_RULES",
    "of_qualifier",
    "emission_lines",
    "balmer_emission",
    "wr_like",
    "N_III_IDS",
    "BALMER_IDS",
]

#: N III 4634-4640-4642 complex (Of emission lines).
N_III_IDS = ("NIII4634", "NIII4641", "NIII4642")
#: Balmer lines whose emission marks an "e" star (Halpha first).
BALMER_IDS = ("HI6563", "HI4861", "HI4340", "HI4102")


@dataclass(frozen=True)
class LumResult:
    """Luminosity class from one rule: ``lumclass`` is "V", "III" or "I"."""

    rule: str
    lumclass: str
    value: float
    value_err: float
    uncertain: bool = False


def _class_from_edges(value: float, edges: tuple[float, float], classes) -> str:
    if value <= edges[0]:
        return classes[0]
    if value <= edges[1]:
        return classes[1]
    return classes[2]


@dataclass(frozen=True)
class HeII4686LuminosityRule:
    """Luminosity from the strength of He II 4686 in O stars earlier than O7.

    Mathys (1988) and Markova et al. (2011), thresholds transcribed from a public script
    (criteria.md section 3b): for log W' < -0.10, log10 EW(He II 4686) > -0.25 (EW > 0.562
    Angstrom) is class V, net emission (EW < 0) class I, anything between class III. The
    EW unit is not stated in the source; Angstrom is assumed. Physically this is the Of
    sequence ((f)) -> (f) -> f of Walborn (1971, 1973).
    """

    name: str = "HeII4686"
    max_log_wprime: float = -0.10  # applies to log W' below this (earlier than O7)
    log_ew_dwarf: float = -0.25
    reference: str = "Mathys (1988); Markova et al. (2011) [transcribed]"

    def applies(self, log_wprime: float) -> bool:
        """True for log W' below :attr:`max_log_wprime`."""
        return math.isfinite(log_wprime) and log_wprime < self.max_log_wprime

    def evaluate(self, values: Mapping[str, LineValue]) -> LumResult | None:
        """Class from He II 4686; None when the line is missing."""
        v = values.get("HeII4686")
        if v is None or not v.usable:
            return None
        if v.in_emission:
            return LumResult(self.name, "I", v.ew, v.err)
        dwarf_ew = 10.0**self.log_ew_dwarf
        if v.ew > dwarf_ew:
            # within one sigma of the threshold: mark uncertain
            return LumResult(self.name, "V", v.ew, v.err, v.ew - v.err < dwarf_ew)
        return LumResult(self.name, "III", v.ew, v.err, v.ew + v.err > dwarf_ew)


@dataclass(frozen=True)
class SiIVLuminosityRule:
    """Luminosity from log W'' = log10[EW(Si IV 4089) / EW(He I 4144)], O7 and later.

    Conti & Alschuler (1971), thresholds transcribed (criteria.md section 3b): log W''
    -0.20 .. 0.10 class V, 0.10 .. 0.30 class III, > 0.30 class I. Below -0.20 (outside the
    table) class V, marked uncertain. Applied from O7 to B0: the Si IV luminosity effect
    is stated for O9-B0 (Walborn, IAU Symp. paper, abstract; criteria.md section 3a) and
    the thresholds come from O stars. At B0.5 He I 4144 has strengthened while Si IV 4089
    is still strong in supergiants (MILES HD 185859, B0.5 Iae: log W'' = 0.07, class V by
    these thresholds), so later types take the class from the model instead.
    """

    name: str = "SiIV4089/HeI4144"
    min_log_wprime: float = -0.10
    edges: tuple[float, float] = (0.10, 0.30)
    lowest: float = -0.20
    valid_range: tuple[float, float] = (7.0, 10.0)
    reference: str = "Conti & Alschuler (1971) [transcribed]"

    def applies(self, log_wprime: float, subtype: float) -> bool:
        """True from O7 (log W' >= -0.10) to the end of :attr:`valid_range`."""
        late = not math.isfinite(log_wprime) or log_wprime >= self.min_log_wprime
        return late and self.valid_range[0] <= subtype <= self.valid_range[1]

    def evaluate(self, values: Mapping[str, LineValue]) -> LumResult | None:
        """Class from the Si IV / He I ratio; None unless both lines are detected."""
        num, den = values.get("SiIV4089"), values.get("HeI4144")
        if num is None or den is None or not (num.detected and den.detected):
            return None
        val, err, _ = log_ratio(num, den)
        cls = _class_from_edges(val, self.edges, ("V", "III", "I"))
        near = any(abs(val - e) < err for e in self.edges)
        return LumResult(self.name, cls, val, err, near or val < self.lowest)


LUMINOSITY_RULES = (HeII4686LuminosityRule(), SiIVLuminosityRule())


def emission_lines(values: Mapping[str, LineValue]) -> list[str]:
    """Ids of the lines seen in net emission."""
    return [k for k, v in values.items() if v.in_emission]


def of_qualifier(values: Mapping[str, LineValue]) -> str:
    """Of notation from He II 4686 and N III 4634-4642 (O stars only).

    Walborn (IAU Symposium paper, abstract; criteria.md section 3a): ((f)) strong He II
    4686 absorption with weak N III emission; (f) weak or neutralised 4686 absorption with
    stronger N III emission; f both in emission. "Strong" 4686 absorption uses the class V
    threshold of :class:`HeII4686LuminosityRule` (0.562 Angstrom). Without N III emission
    the qualifier is empty, except that He II 4686 emission alone gives "f".
    """
    he = values.get("HeII4686")
    n3 = any(values[i].in_emission for i in N_III_IDS if i in values)
    if he is None or not he.usable:
        return ""
    if he.in_emission:
        return "f"
    if not n3:
        return ""
    strong = 10.0 ** HeII4686LuminosityRule().log_ew_dwarf
    return "((f))" if he.ew > strong else "(f)"


def balmer_emission(values: Mapping[str, LineValue]) -> list[str]:
    """Balmer lines in net emission (an "e" star: Oe, Be, or a supergiant's wind)."""
    return [i for i in BALMER_IDS if i in values and values[i].in_emission]


def wr_like(values: Mapping[str, LineValue], *, ew_limit: float = -10.0) -> bool:
    """Emission-dominated (Wolf-Rayet-like): no MK type should be forced.

    True when He II 4686 emission is stronger than ``ew_limit`` (Angstrom; WR emission
    lines have EWs of tens of Angstrom, Of-star 4686 a few, [memory]; the same number as
    ``starlines.flags.BROAD_EMISSION_EW``) or when most detected helium lines are in
    emission.
    """
    he2 = values.get("HeII4686")
    if he2 is not None and he2.usable and he2.ew < ew_limit:
        return True
    he = [v for k, v in values.items() if k.startswith(("HeI4", "HeII4")) and v.usable]
    n_em = sum(v.in_emission for v in he)
    n_abs = sum(v.detected for v in he)
    return n_em >= 3 and n_em > n_abs
