"""Inputs and outputs: samples, grids, masks, GeoTIFF writing, model files, atomic writes, CRS helpers."""
