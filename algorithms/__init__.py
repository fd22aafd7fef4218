"""Fieldcast numerical engine: Gaussian-process (kriging) models on numpy arrays.

This package never imports QGIS; it is used by the Processing algorithms in
``plugin/`` and tested on its own.
"""
