"""The shipped grid of synthetic equivalent widths: build it, load it, describe it.

One row per model (Teff, log g, He/H) with the calibrated equivalent width of every
catalogue line in columns ``ew_<line id>`` (Angstrom, absorption positive), plus
``eddington_gamma`` (Thomson-scattering Eddington factor of the parameters, to spot
unphysical corners: gamma >= 1 cannot be a hydrostatic star). The grid ships as
``grids/ob_grid.ecsv`` (package ``starlines.grids``); :func:`build_grid` recomputes it bit for
bit (EWs are rounded to :data:`EW_DECIMALS` decimals so the file is the same on every run).
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import numpy as np

from starlines.errors import ConfigError, StarlinesWarning

__all__ = [
    "GRID_FILENAME",
    "TEFF_AXIS",
    "LOGG_AXIS",
    "HE_AXIS",
    "EW_DECIMALS",
    "grid_points",
    "compute_row",
    "build_grid",
    "load_grid",
    "write_grid",
    "grid_output_path",
    "nearest_model",
    "line_ids",
    "shipped_grid_path",
    "eddington_gamma",
]

GRID_FILENAME = "ob_grid.ecsv"

#: Grid axes: Teff 15-55 kK in 1 kK steps, log g 2.5-4.5 in 0.25 dex, He/H 0.06-0.25.
TEFF_AXIS = tuple(float(t) for t in range(15000, 55001, 1000))
LOGG_AXIS = tuple(round(2.5 + 0.25 * i, 2) for i in range(9))
HE_AXIS = (0.06, 0.10, 0.15, 0.20, 0.25)

#: Decimals (Angstrom) kept for the equivalent widths in the file.
EW_DECIMALS = 5

_SIGMA_SB = 5.670374419e-5
_C_CGS = 2.99792458e10
_SIGMA_T = 6.6524587e-25
_M_H = 1.6735575e-24


def eddington_gamma(teff: float, logg: float, he: float) -> float:
    """Thomson-scattering Eddington factor kappa_es sigma Teff^4 / (c g), full ionization."""
    kappa_es = _SIGMA_T * (1.0 + 2.0 * he) / ((1.0 + 4.0 * he) * _M_H)
    return float(kappa_es * _SIGMA_SB * teff**4 / (_C_CGS * 10.0**logg))


def grid_points() -> list[tuple[float, float, float]]:
    """All (Teff, log g, He/H) of the grid, in file order (He fastest, then log g)."""
    return [(t, g, h) for t in TEFF_AXIS for g in LOGG_AXIS for h in HE_AXIS]


def line_ids() -> list[str]:
    """Catalogue line ids in column order."""
    from starlines.lines import all_lines

    return [ln.id for ln in all_lines()]


def compute_row(teff: float, logg: float, he: float) -> dict[str, float]:
    """One grid row: parameters, Eddington factor and rounded EWs (the code path of the grid)."""
    from starlines.synth import synthetic_ews

    ews = synthetic_ews(teff, logg, he)
    row = {"teff": float(teff), "logg": float(logg), "he": float(he),
           "eddington_gamma": round(eddington_gamma(teff, logg, he), 4)}
    for ident in line_ids():
        row[f"ew_{ident}"] = round(ews[ident], EW_DECIMALS)
    return row


def _metadata() -> dict:
    from starlines import __version__
    from starlines.lineform import (
        BETA_DEPTH,
        BETA_SURFACE,
        MICROTURBULENCE,
        MICROTURBULENCE_SUPERGIANT,
    )
    from starlines.synthcal import (
        B_STAR_OFFSET,
        KNOTS_I,
        KNOTS_V,
        MODEL_VERSION,
        STRENGTH_EXPONENTS,
        calibration_statement,
    )

    return {
        "model_version": MODEL_VERSION,
        "starlines_version": __version__,
        "description": "Calibrated synthetic equivalent widths (Angstrom, absorption "
        "positive) of the starlines line catalogue for O and early-B stars.",
        "physics": "grey plane-parallel LTE atmosphere (Hopf T(tau), hydrostatic gas "
        "pressure, Thomson + H/He II bound-free + free-free opacity at 4500 A); LTE line "
        "formation with Saha-Boltzmann populations; Holtsmark Stark wings for H I and "
        "He II; see grids/README.md",
        "calibration": calibration_statement(),
        "strength_exponents": dict(STRENGTH_EXPONENTS),
        "temperature_knots_V": [list(k) for k in KNOTS_V],
        "temperature_knots_I": [list(k) for k in KNOTS_I],
        "b_star_offset_K": B_STAR_OFFSET,
        "line_source_depression": {"surface": dict(BETA_SURFACE), "depth_tau": BETA_DEPTH},
        "microturbulence_kms": f"{MICROTURBULENCE:g} at log g >= 3.75, "
        f"{MICROTURBULENCE_SUPERGIANT:g} at log g <= 2.75, linear in between",
        "axes": {"teff": list(TEFF_AXIS), "logg": list(LOGG_AXIS), "he": list(HE_AXIS)},
        "ew_decimals": EW_DECIMALS,
        "rebuild": "starlines grid build",
    }


def build_grid(points=None, *, progress: bool = False):
    """Compute the grid (or the rows of ``points``) as an astropy Table.

    Parameters
    ----------
    points : sequence of (teff, logg, he), optional
        Models to compute; default :func:`grid_points` (the shipped grid).
    progress : bool
        Show a tqdm progress bar.

    Returns
    -------
    astropy.table.Table
        Columns ``teff, logg, he, eddington_gamma, ew_<id>...``; metadata describing the
        model and its calibration.
    """
    from astropy.table import Table

    pts = grid_points() if points is None else list(points)
    if progress:
        from tqdm import tqdm

        pts = tqdm(pts, desc="grid models", unit="model")
    rows = [compute_row(*p) for p in pts]
    names = ["teff", "logg", "he", "eddington_gamma"] + [f"ew_{i}" for i in line_ids()]
    tab = Table(rows=[[r[n] for n in names] for r in rows], names=names,
                dtype=[float] * len(names))
    tab["teff"].unit = "K"
    for n in names[4:]:
        tab[n].unit = "Angstrom"
    tab.meta.update(_metadata())
    return tab


def shipped_grid_path() -> Path:
    """Path of the shipped grid file.

    Inside the installed ``starlines.grids`` package (pyproject maps the top-level
    ``grids/`` folder to it); when the package runs from a source checkout that is not
    installed, ``starlines.grids`` does not exist and the checkout's ``grids/`` is used.
    """
    try:
        return Path(str(resources.files("starlines.grids") / GRID_FILENAME))
    except ModuleNotFoundError:
        import starlines

        return Path(starlines.__file__).resolve().parent.parent / "grids" / GRID_FILENAME


#: Name of the parsed shipped grid's entries in the user cache (:mod:`starlines.cache`).
GRID_CACHE_NAME = "grid"


def load_grid(path=None):
    """Read the shipped grid (or ``path``) as an astropy Table.

    The shipped grid is parsed once and kept as ``.npz`` in the user cache
    (:mod:`starlines.cache`, keyed by the file's checksum), and in memory for the process;
    every call returns a new Table (free to modify) equal to a fresh ECSV read.

    Raises
    ------
    ConfigError
        If the file is missing or is not a starlines grid. A grid made by another model
        version is loaded with a :class:`~starlines.errors.StarlinesWarning`.
    """
    import warnings

    from starlines.synthcal import MODEL_VERSION

    p = shipped_grid_path() if path is None else Path(path)
    if not p.is_file():
        raise ConfigError("grid file not found; rebuild it with 'starlines grid build'",
                          path=str(p))
    tab = _load_shipped(p) if path is None else _read_ecsv(p)
    if tab.meta["model_version"] != MODEL_VERSION:
        warnings.warn(f"{p}: grid model version {tab.meta['model_version']} differs from the "
                      f"code's {MODEL_VERSION}; rebuild with 'starlines grid build'",
                      StarlinesWarning, stacklevel=2)
    return tab


def _read_ecsv(p: Path):
    """Parse and check a grid file (ConfigError when it is not a starlines grid)."""
    from astropy.table import Table

    try:
        tab = Table.read(p, format="ascii.ecsv")
    except Exception as exc:  # astropy raises many types for a corrupt file
        raise ConfigError(f"not a readable ECSV grid ({exc.__class__.__name__}: {exc})",
                          path=str(p)) from None
    missing = {"teff", "logg", "he"} - set(tab.colnames)
    if missing or "model_version" not in tab.meta:
        raise ConfigError(f"not a starlines grid (missing {sorted(missing) or 'metadata'})",
                          path=str(p))
    return tab


def _grid_to_arrays(tab) -> dict[str, np.ndarray]:
    from starlines.cache import json_array

    layout = {"names": tab.colnames, "units": [None if tab[n].unit is None else
                                               tab[n].unit.to_string() for n in tab.colnames],
              "meta": dict(tab.meta)}
    cols = [np.asarray(tab[n]) for n in tab.colnames]
    if all(c.dtype == np.float64 and c.ndim == 1 for c in cols):
        arrays = {"matrix": np.column_stack(cols)}  # one member: quicker to load
    else:
        arrays = {f"col{i}": c for i, c in enumerate(cols)}
    arrays["layout"] = json_array(layout)
    return arrays


def _table_from_arrays(arrays: dict[str, np.ndarray]):
    from astropy.table import Table

    from starlines.cache import from_json_array

    layout = from_json_array(arrays["layout"])
    if "matrix" in arrays:
        matrix = arrays["matrix"]
        cols = [np.array(matrix[:, i]) for i in range(len(layout["names"]))]
    else:
        cols = [np.array(arrays[f"col{i}"]) for i in range(len(layout["names"]))]
    tab = Table(cols, names=layout["names"], meta=layout["meta"], copy=False)
    for name, unit in zip(layout["names"], layout["units"]):
        if unit is not None:
            tab[name].unit = unit
    return tab


_GRID_MEMO: dict[str, dict[str, np.ndarray]] = {}


def _load_shipped(p: Path):
    """The shipped grid from process memory, the user cache or (once) the ECSV file."""
    from starlines.cache import (
        cache_key,
        code_digest,
        file_digest,
        library_version,
        load_arrays,
        save_arrays,
    )

    try:
        key = cache_key(GRID_CACHE_NAME, file_digest(p), code_digest(),
                        f"astropy {library_version('astropy')}")
    except OSError:
        return _read_ecsv(p)
    arrays = _GRID_MEMO.get(key) or load_arrays(GRID_CACHE_NAME, key)
    if arrays is not None:
        try:
            tab = _table_from_arrays(arrays)
            _GRID_MEMO.clear()
            _GRID_MEMO[key] = arrays
            return tab
        except (KeyError, ValueError, TypeError):
            pass  # entry of another layout: parse the file again and overwrite it
    tab = _read_ecsv(p)
    try:
        arrays = _grid_to_arrays(tab)
    except (TypeError, ValueError):  # metadata JSON cannot hold: no cache, same table
        return tab
    _GRID_MEMO.clear()
    _GRID_MEMO[key] = arrays
    save_arrays(GRID_CACHE_NAME, key, arrays)
    return tab


def grid_output_path(path=None) -> Path:
    """Checked output path for a grid: ``path`` (must end in .ecsv) or the shipped file."""
    p = shipped_grid_path() if path is None else Path(path)
    if p.suffix.lower() != ".ecsv":
        raise ConfigError("the grid is written as ECSV; give a .ecsv file name", path=str(p))
    if not p.parent.is_dir():
        raise ConfigError("the output folder does not exist", path=str(p))
    return p


def write_grid(tab, path=None) -> Path:
    """Write ``tab`` as ECSV (default: the shipped location) and return the path."""
    p = grid_output_path(path)
    tab.write(p, format="ascii.ecsv", overwrite=True)
    return p


def nearest_model(tab, teff: float, logg: float, he: float) -> int:
    """Row index of the grid model nearest to (teff, logg, he) in scaled units."""
    d = (
        ((np.asarray(tab["teff"]) - teff) / 1000.0) ** 2
        + ((np.asarray(tab["logg"]) - logg) / 0.25) ** 2
        + ((np.asarray(tab["he"]) - he) / 0.05) ** 2
    )
    return int(np.argmin(d))
