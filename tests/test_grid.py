"""Tests of the shipped synthetic grid: it loads, it is complete, and it is reproducible."""

from __future__ import annotations

import numpy as np
import pytest

from starlines.errors import ConfigError
from starlines.grid import (
    HE_AXIS,
    LOGG_AXIS,
    TEFF_AXIS,
    build_grid,
    eddington_gamma,
    grid_points,
    load_grid,
    shipped_grid_path,
)
from starlines.lines import all_lines
from starlines.synthcal import MODEL_VERSION


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def test_shipped_grid_is_package_data_and_small():
    path = shipped_grid_path()
    assert path.is_file()
    assert path.stat().st_size < 5_000_000  # the file must stay small enough to ship


def test_grid_covers_axes_and_catalogue(grid):
    assert len(grid) == len(TEFF_AXIS) * len(LOGG_AXIS) * len(HE_AXIS)
    assert min(grid["teff"]) == 15000 and max(grid["teff"]) == 55000
    assert min(grid["logg"]) == 2.5 and max(grid["logg"]) == 4.5
    assert sorted(set(grid["he"])) == list(HE_AXIS)
    for ln in all_lines():
        col = grid[f"ew_{ln.id}"]
        assert np.all(np.isfinite(col)), ln.id
        assert np.all(np.asarray(col) >= 0), ln.id  # absorption only (emission not modelled)
    assert grid.meta["model_version"] == MODEL_VERSION
    assert "Martins" in grid.meta["calibration"]


def test_shipped_rows_rebuild_bit_for_bit(grid):
    """A deterministic subset (every 131st model) recomputed with the build code path."""
    points = grid_points()
    idx = list(range(0, len(points), 131)) + [len(points) - 1]
    fresh = build_grid([points[i] for i in idx])
    assert dict(fresh.meta) == dict(grid.meta)  # model version, calibration numbers, axes
    for k, i in enumerate(idx):
        for name in fresh.colnames:
            assert fresh[name][k] == grid[name][i], (points[i], name)


def test_eddington_gamma_known_value():
    # Thomson opacity of ionized H+He (He/H = 0.1): kappa_es = sigma_T / m_H * 1.2 / 1.4
    # = 0.3407 cm^2/g; Teff 40 kK, log g 4: sigma T^4 / (c g) = 5.6704e-5 * 2.56e18 /
    # (2.9979e10 * 1e4) = 0.4842; product 0.1650 [computed, CODATA constants]
    assert eddington_gamma(40000.0, 4.0, 0.1) == pytest.approx(0.1650, abs=0.0005)


def test_load_grid_errors(tmp_path):
    with pytest.raises(ConfigError, match="not found"):
        load_grid(tmp_path / "none.ecsv")
    bad = tmp_path / "bad.ecsv"
    bad.write_text("this is not ECSV\n")
    with pytest.raises(ConfigError, match="bad.ecsv"):
        load_grid(bad)


def test_cli_grid_build_rejects_bad_output_before_building(tmp_path, capsys):
    from starlines.cli import main

    assert main(["grid", "build", "--out", str(tmp_path / "grid.txt")]) == 2
    assert "ECSV" in capsys.readouterr().err


def test_cli_grid_show(capsys):
    from starlines.cli import main

    assert main(["grid", "show", "--teff", "30000", "--logg", "4"]) == 0
    out = capsys.readouterr().out
    assert "model version" in out and "HeI4471" in out and "Teff 30000 K" in out
