"""Everything QGIS: plugin bootstrap, Processing provider and toolbox algorithms."""
