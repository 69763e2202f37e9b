"""The ``starlines lines`` command, run in-process."""

from astropy.table import Table

from starlines.cli import main


def test_lines_prints_catalogue(capsys):
    assert main(["lines", "--medium", "vacuum"]) == 0
    out = capsys.readouterr().out
    assert "HeII4686" in out and "HI4340" in out


def test_lines_writes_ecsv_with_units(tmp_path):
    out = tmp_path / "lines.ecsv"
    assert main(["lines", "--out", str(out)]) == 0
    tab = Table.read(out, format="ascii.ecsv")
    assert str(tab["wavelength_air"].unit) == "Angstrom"
    row = tab[tab["id"] == "HeII4686"][0]
    # He II 4686 air 4685.70 A (criteria.md §5c, several published lists)
    assert abs(row["wavelength"] - 4685.70) < 0.01
    assert row["origin"] == "computed"


def test_bad_output_extension_is_a_clean_error(tmp_path, capsys):
    assert main(["lines", "--out", str(tmp_path / "lines.xyz")]) == 2
    err = capsys.readouterr().err
    assert "lines.xyz" in err and "format" in err
