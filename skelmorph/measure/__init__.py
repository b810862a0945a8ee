"""Morphometrics: graph measures here; field-specific sets in submodules."""
