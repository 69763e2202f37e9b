"""A small on-disk cache of data derived from the shipped grid, shared by processes.

Every analysis process needs the same derived data: the parsed grid, the fitted
nearest-neighbour model (:func:`starlines.knn.default_model`) and the calibrated ratio rules
(:func:`starlines.rulecal.calibrated_rules`). Deriving them costs about a second and tens of
MB per process; a pool worker would pay it again. They are stored once as ``.npz`` files
(no pickles) in the user cache folder, under a key made of the grid file's SHA-256, the
SHA-256 of the package's own source and data files (:func:`code_digest`) and the numpy /
scikit-learn versions, so any change of grid, code or library gives a new key and the data
is derived afresh. A cached result is bit for bit what the computation returns.

Folder: ``$STARLINES_CACHE_DIR`` if set (``off``, ``0``, ``none`` or empty disable the
cache), else ``$XDG_CACHE_HOME/starlines``, else ``~/.cache/starlines``. The cache never
makes anything fail: an unwritable folder, a corrupt or foreign file simply means the data
is computed in memory, as without a cache. Only the :data:`KEEP_ENTRIES` newest entries of
each kind are kept (a few MB each); the folder can be deleted at any time.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from functools import lru_cache
from pathlib import Path

import numpy as np

__all__ = [
    "CACHE_ENV",
    "cache_dir",
    "file_digest",
    "code_digest",
    "cache_key",
    "library_version",
    "load_arrays",
    "save_arrays",
    "json_array",
    "from_json_array",
]

#: Environment variable naming the cache folder ("off" disables the cache).
CACHE_ENV = "STARLINES_CACHE_DIR"
_DISABLED = {"", "0", "off", "none", "no", "false"}
#: Entries kept per name (one per code version; older ones are deleted when a new one is
#: written, so the folder stays below ~25 MB however often the code changes).
KEEP_ENTRIES = 8


def cache_dir() -> Path | None:
    """The cache folder (created if needed), or None when disabled or not writable."""
    env = os.environ.get(CACHE_ENV)
    if env is not None:
        if env.strip().lower() in _DISABLED:
            return None
        folder = Path(env).expanduser()
    else:
        base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
        folder = Path(base).expanduser() / "starlines"
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return folder if os.access(folder, os.W_OK | os.X_OK) else None


@lru_cache(maxsize=16)
def _digest_of(path: str, mtime_ns: int, size: int) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def file_digest(path) -> str:
    """SHA-256 (hex) of a file's bytes (memoised per path, modification time and size)."""
    st = os.stat(path)
    return _digest_of(str(Path(path).resolve()), st.st_mtime_ns, st.st_size)


@lru_cache(maxsize=1)
def code_digest() -> str:
    """SHA-256 over the package's ``*.py`` and ``data/*`` files and the library versions.

    Any edit of the code (or of numpy / scikit-learn, whose arithmetic and random streams
    the derived data depend on) changes it, so a cache entry can never outlive its code.
    """
    root = Path(__file__).parent
    h = hashlib.sha256()
    files = sorted(root.rglob("*.py")) + sorted(p for p in (root / "data").glob("*")
                                                if p.is_file())
    for p in files:
        h.update(str(p.relative_to(root)).encode())
        h.update(p.read_bytes())
    from starlines import __version__

    h.update(f"starlines {__version__} numpy {np.__version__} "
             f"scikit-learn {library_version('scikit-learn')}".encode())
    return h.hexdigest()


@lru_cache(maxsize=8)
def library_version(dist: str) -> str:
    """Installed version of a distribution (memoised; "absent" when not installed)."""
    from importlib import metadata

    try:
        return metadata.version(dist)
    except metadata.PackageNotFoundError:
        return "absent"


def cache_key(*parts: str) -> str:
    """Short hex key (24 characters) of the given strings."""
    return hashlib.sha256("\0".join(parts).encode()).hexdigest()[:24]


def _entry(name: str, key: str) -> Path | None:
    folder = cache_dir()
    return None if folder is None else folder / f"{name}-{key}.npz"


def load_arrays(name: str, key: str) -> dict[str, np.ndarray] | None:
    """The arrays stored under ``name`` and ``key``, or None (absent, unreadable, disabled)."""
    path = _entry(name, key)
    if path is None or not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as data:
            return {k: data[k] for k in data.files}
    except Exception:  # a truncated or foreign file is a cache miss, never an error
        return None


def save_arrays(name: str, key: str, arrays: dict[str, np.ndarray]) -> Path | None:
    """Store ``arrays`` atomically (write a temporary file, then rename); None on failure."""
    path = _entry(name, key)
    if path is None:
        return None
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{name}-", suffix=".npz", dir=path.parent)
        with os.fdopen(fd, "wb") as fh:
            np.savez(fh, **arrays)
        os.replace(tmp, path)
        _prune(path.parent, name, keep=KEEP_ENTRIES)
        return path
    except Exception:  # full disk, read-only folder, odd array: run without the cache
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
        return None


def _prune(folder: Path, name: str, keep: int) -> None:
    """Delete all but the ``keep`` newest entries of ``name`` (older code versions)."""
    try:
        entries = sorted(folder.glob(f"{name}-*.npz"), key=lambda p: p.stat().st_mtime_ns,
                         reverse=True)
        for old in entries[keep:]:
            old.unlink(missing_ok=True)
    except OSError:  # another process pruned first, or a read-only entry: leave it
        pass


def json_array(obj) -> np.ndarray:
    """A JSON document as a 0-d unicode array (to store metadata beside arrays)."""
    return np.array(json.dumps(obj))


def from_json_array(arr: np.ndarray):
    """Inverse of :func:`json_array`."""
    return json.loads(str(arr[()]))
