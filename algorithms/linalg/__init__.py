"""Linear-algebra helpers: stacks of small systems and the BLAS thread switch."""
