"""Subcommands of the ``starlines`` command line, one light module each."""
