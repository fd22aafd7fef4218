"""Fitting covariance models: likelihoods (exact, Vecchia, joint), the fitter and its search, semivariograms."""
