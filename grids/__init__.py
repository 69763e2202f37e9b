"""Synthetic line-strength grids shipped with starlines (installed as ``starlines.grids``)."""
