"""Conditional simulation: circulant embedding and conditioning by kriging."""
