"""Inputs and outputs: samples, grids, masks, GeoTIFF writing, model files, atomic and staged writes, CRS helpers."""
