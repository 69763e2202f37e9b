"""Parsing and writing MK types.

Expected subtype numbers follow the project convention (DEVELOPERS.md: O3 -> 3.0 ...
O9.7 -> 9.7, B0 -> 10.0, B0.5 -> 10.5, B1 -> 11.0 ... B3 -> 13.0). The odd strings are
the libraries' own, quoted from /work/shared/reference-spectra/README.md (MILES v9.1
parameter table; Pickles 1998 UVILIB index).
"""

import math

import pytest

from starlines.errors import ClassificationError, StarlinesError
from starlines.sptype import (
    format_sptype,
    lumclass_group,
    lumclass_number,
    parse_sptype,
    round_subtype,
    subtype_label,
    subtype_number,
)

# (string, subtype number, range, luminosity class, qualifiers, luminosity group)
CASES = [
    ("O7.5 III((f))", 7.5, (7.5, 7.5), "III", "((f))", "III"),
    ("B1 V", 11.0, (11.0, 11.0), "V", "", "V"),
    ("O3 V", 3.0, (3.0, 3.0), "V", "", "V"),
    ("O9.7 Ib", 9.7, (9.7, 9.7), "Ib", "", "I"),
    ("B0 V", 10.0, (10.0, 10.0), "V", "", "V"),
    ("B3 III", 13.0, (13.0, 13.0), "III", "", "III"),
    # MILES v9.1 writes a zero for the letter O (reference-spectra README, section 1)
    ("07Ia", 7.0, (7.0, 7.0), "Ia", "", "I"),
    ("09Ib", 9.0, (9.0, 9.0), "Ib", "", "I"),
    ("08 Ib", 8.0, (8.0, 8.0), "Ib", "", "I"),
    # Pickles (1998) "B12III" = B1-2 III (reference-spectra README, section 3, from memory)
    ("B12III", 11.5, (11.0, 12.0), "III", "", "III"),
    ("B1/B2Ib", 11.5, (11.0, 12.0), "Ib", "", "I"),
    ("B2IIIvar", 12.0, (12.0, 12.0), "III", "var", "III"),
    ("B0.5 Iae", 10.5, (10.5, 10.5), "Ia", "e", "I"),
    ("B2.5IV", 12.5, (12.5, 12.5), "IV", "", "IV"),
    ("O9.5 II-III", 9.5, (9.5, 9.5), "II-III", "", "III"),
    ("O4 If", 4.0, (4.0, 4.0), "I", "f", "I"),
]


@pytest.mark.parametrize("text, number, rng, lum, qual, group", CASES)
def test_parse_library_strings(text, number, rng, lum, qual, group):
    st = parse_sptype(text)
    assert st.subtype == pytest.approx(number, abs=1e-9)
    assert st.subtype_range == pytest.approx(rng, abs=1e-9)
    assert st.lumclass == lum
    assert st.qualifiers == qual
    assert lumclass_group(st.lumclass) == group


def test_emission_qualifiers():
    assert parse_sptype("B0.5 Iae").emission
    assert parse_sptype("O4 If").emission
    assert not parse_sptype("B2IIIvar").emission  # "var" is variability, not emission


def test_uncertainty_mark():
    assert parse_sptype("B1: V").uncertain
    assert parse_sptype("O9.5 V:").uncertain
    assert not parse_sptype("O9.5 V").uncertain


def test_letter_only_has_nan_subtype():
    st = parse_sptype("B")
    assert math.isnan(st.subtype)


@pytest.mark.parametrize("bad", ["G2 V", "", "hello", "B13 V", "O9.5.5"])
def test_bad_strings_raise_package_error(bad):
    with pytest.raises(StarlinesError, match="spectral type|subtype"):
        parse_sptype(bad)


def test_subtype_numbers_and_labels():
    assert subtype_number("O", 9.7) == pytest.approx(9.7)
    assert subtype_number("B", 0.5) == pytest.approx(10.5)
    assert subtype_number("0", 8) == pytest.approx(8.0)  # zero for O
    with pytest.raises(ClassificationError):
        subtype_number("K", 2)
    assert subtype_label(10.5) == "B0.5"
    assert subtype_label(9.7) == "O9.7"
    assert subtype_label(13.0) == "B3"


def test_lumclass_numbers():
    assert lumclass_number("V") == 5.0
    assert lumclass_number("III") == 3.0
    assert lumclass_number("Ia") < lumclass_number("Ib") < lumclass_number("II")
    assert math.isnan(lumclass_number(None))


def test_format_round_trip():
    # common practice: type strings written "O7.5 III((f))", "B0.5 Iae"
    assert format_sptype(7.5, "III", "((f))") == "O7.5 III((f))"
    assert format_sptype(10.5, "Ia", "e") == "B0.5 Iae"
    assert format_sptype(9.68, "V") == "O9.7 V"
    assert format_sptype(11.1, "V", subtype_uncertain=True) == "B1: V"
    assert format_sptype(float("nan"), "V") == ""
    for text, *_ in CASES:
        st = parse_sptype(text)
        if st.subtype_range[0] == st.subtype_range[1]:
            again = parse_sptype(format_sptype(st.subtype, st.lumclass, st.qualifiers))
            assert again.subtype == pytest.approx(st.subtype)
            assert again.lumclass == st.lumclass


def test_round_subtype_grid():
    assert round_subtype(9.6) in (9.5, 9.7)
    assert round_subtype(10.1) in (10.0, 10.2)
    assert round_subtype(12.3) == 12.5
