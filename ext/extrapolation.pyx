# cython: language_level=3
"""Placeholder: filled in by its issue."""
