"""Values below detection limits (left-censored samples, "non-detects").

A censored sample carries a reporting limit ``l`` instead of a value: the true value lies below ``l``. The
default treatment keeps that inequality in the Gaussian (or log-Gaussian) model: :mod:`.likelihood` gives the
censored likelihood of small cases exactly, :mod:`.gibbs` draws the censored values from their truncated
conditional distributions, :mod:`.stochastic_em` fits the covariance by stochastic EM on imputed data sets and
:mod:`.imputed_kriging` turns several imputations into predictions conditioned on the inequalities.
:mod:`.limits` holds the substitution alternative and the checks of the values as given.
"""
