"""The Fieldcast version, written into model files and raster metadata.

Keep it equal to ``version`` in ``metadata.txt`` (a test checks this).
"""
__version__ = "0.1.0"
