"""Covariance models: correlation families, covariance structures, mean models, transforms, fit parameters."""
