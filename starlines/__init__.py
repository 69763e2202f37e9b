"""starlines: night triage for spectra of O and early-B stars.

Heavy submodules are imported lazily by the command line, so ``import starlines`` stays cheap.
"""

from starlines.errors import StarlinesError, StarlinesWarning

__version__ = "0.1.0"

__all__ = ["StarlinesError", "StarlinesWarning", "__version__"]
