"""Tests of the shipped Holtsmark table and its use in starlines.broadening."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import gamma

from starlines.broadening import (
    _holtsmark_direct,
    compute_holtsmark_table,
    holtsmark,
    read_holtsmark_table,
    write_holtsmark_table,
)


def test_shipped_table_regenerates():
    """The package-data table is what the documented generator computes.

    Same quadrature, so the numbers agree to rounding; with the project's OpenBLAS build
    they are identical bit for bit. Another BLAS may sum the dot products in another order
    (last-bit differences), hence the 1e-12 relative tolerance; the grid is built from the
    shipped numbers, so it does not depend on the local BLAS.
    """
    beta_s, h_s = read_holtsmark_table()
    beta_c, h_c = compute_holtsmark_table()
    assert np.array_equal(beta_s, beta_c)
    np.testing.assert_allclose(h_c, h_s, rtol=1e-12, atol=1e-17)


def test_write_read_round_trip_is_exact(tmp_path):
    path = write_holtsmark_table(tmp_path / "h.txt")
    beta, h = read_holtsmark_table(path)
    beta_c, h_c = compute_holtsmark_table()
    assert np.array_equal(beta, beta_c) and np.array_equal(h, h_c)  # 17 digits round-trip


def test_blocked_quadrature_matches_one_block():
    """Evaluating in blocks of rows changes nothing but memory (4-row multiples, OpenBLAS)."""
    beta = np.linspace(0.0, 12.0, 64)
    one = _holtsmark_direct(beta, block_rows=64)
    for rows in (4, 16, 32):
        np.testing.assert_allclose(_holtsmark_direct(beta, block_rows=rows), one,
                                   rtol=1e-12, atol=1e-17)
    assert _holtsmark_direct(beta.reshape(8, 8)).shape == (8, 8)


def test_small_field_series():
    """H(beta) = (4 beta^2 / 3 pi) (1 - Gamma(10/3) beta^2 / 6 + ...) for small beta.

    Expanding sin(beta x) in the Fourier integral: Int x^2 exp(-x^1.5) dx = (2/3) Gamma(2)
    and Int x^4 exp(-x^1.5) dx = (2/3) Gamma(10/3) (the analytic reference; the next term
    is < 1e-5 relative at beta = 0.1).
    """
    beta = np.array([0.02, 0.05, 0.08, 0.1])
    series = 4 * beta**2 / (3 * np.pi) * (1 - gamma(10 / 3) / 6 * beta**2)
    np.testing.assert_allclose(holtsmark(beta), series, rtol=2e-5)


def test_normalised_and_tail():
    """H is a probability density (Holtsmark 1919) with the analytic large-field series.

    For large beta only small x matter: exp(-x^1.5) ~ 1 - x^1.5 + x^3 / 2 gives
    H ~ (15/8) sqrt(2/pi) beta^-2.5 + (24/pi) beta^-4 (Fourier sine integrals of powers,
    derived here), i.e. 1.4960 beta^-2.5 (1 + 5.107 beta^-1.5). Area: trapezoid over the
    table (0-30) plus the analytic integral of that series beyond 30.
    """
    beta, h = read_holtsmark_table()
    c1 = 15 / 8 * np.sqrt(2 / np.pi)
    c2 = 24 / np.pi
    assert c1 == pytest.approx(1.496, abs=5e-4)  # the constant the module uses
    area = np.sum(0.5 * (h[1:] + h[:-1]) * np.diff(beta))
    b0 = beta[-1]
    tail = c1 * b0**-1.5 / 1.5 + c2 * b0**-3.0 / 3.0
    assert area + tail == pytest.approx(1.0, abs=1e-5)
    assert h[-1] == pytest.approx(c1 * b0**-2.5 + c2 * b0**-4.0, rel=2e-3)
    # the most probable reduced field is ~1.6 (Chandrasekhar 1943, Rev. Mod. Phys. 15, 1;
    # from memory)
    assert beta[np.argmax(h)] == pytest.approx(1.6, abs=0.05)
