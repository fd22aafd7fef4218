"""How far a Vecchia approximation is from the exact Gaussian law: its Kullback-Leibler divergence.

At given parameters the Vecchia density is that of a Gaussian vector with precision
``Q~ = B^T D^-1 B`` (:mod:`.vecchia`), while the data follow ``N(0, K)`` under the model. With
``M = D^-1/2 B K B^T D^-1/2`` (similar to ``Q~ K``), the divergence of the approximation from the
exact law is the standard Gaussian formula::

    KL = E[l_exact - l_vecchia] = 0.5 [tr(M) - n - log det M],   log det M = log det K - sum log d_i

(``det B = 1``), and since ``l_exact - l_vecchia = 0.5 y^T (Q~ - K^-1) y + const`` is a quadratic form
of a Gaussian, its standard deviation under the exact law is ``sqrt(0.5 tr((M - I)^2))`` (variance of a
Gaussian quadratic form: ``var(y^T A y) = 2 tr((A K)^2)``). The observed difference of the two
log-likelihoods at data drawn from the model thus lies within a few such standard deviations of ``KL``;
``KL`` itself is the mean loss of log-likelihood, which is what the conditioning-set size trades for time.

Dense ``n x n`` algebra: meant for ``n`` up to a few thousand (checks and the accuracy curve).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

from ..linalg.condition_policy import FIT_CONDITION_ADVICE, jittered_cholesky
from ..model.covariance import CovarianceModel
from .likelihood import MeanBasis
from .vecchia import VecchiaData, VecchiaPlan


@dataclass(frozen=True)
class VecchiaDivergence:
    """Kullback-Leibler divergence of a Vecchia law from the exact one and the spread of the log-likelihood gap.

    Attributes
    ----------
    divergence : float
        ``KL = E[l_exact - l_vecchia]`` under the exact law (natural-log units).
    spread : float
        Standard deviation of ``l_exact - l_vecchia`` under the exact law.
    """

    divergence: float
    spread: float


def vecchia_divergence(xy: np.ndarray, covariance: CovarianceModel, plan: VecchiaPlan) -> VecchiaDivergence:
    """KL divergence of the Vecchia approximation ``plan`` of ``covariance`` at ``xy`` (see the module docstring).

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
        Sample locations in the original order (``plan.order`` reorders them).
    covariance : CovarianceModel
    plan : VecchiaPlan
        Ordering and conditioning sets, e.g. :meth:`.vecchia.VecchiaPlan.build`.
    """
    points = np.asarray(xy, dtype=float)
    n = len(points)
    data = VecchiaData(points, np.zeros(n), MeanBasis.from_design(np.zeros((n, 0))), "ml", plan)
    b, d = data.regression(covariance)
    rows = np.repeat(np.arange(n), plan.size)
    keep = plan.valid.ravel()
    regression = sparse.csr_matrix((-b.ravel()[keep], (rows[keep], plan.neighbours.ravel()[keep])), shape=(n, n))
    whitening = sparse.diags(d ** -0.5) @ (sparse.identity(n, format="csr") + regression)
    ordered = covariance.data_covariance(data.xy)
    m = whitening @ (whitening @ ordered).T  # D^-1/2 B K B^T D^-1/2 (K symmetric)
    (factor, _), _ = jittered_cholesky(ordered, "covariance matrix of the samples", FIT_CONDITION_ADVICE)
    log_det_k = 2.0 * float(np.sum(np.log(np.diag(factor))))
    log_det_m = log_det_k - float(np.sum(np.log(d)))
    divergence = 0.5 * (float(np.trace(m)) - n - log_det_m)
    offset = m - np.eye(n)
    return VecchiaDivergence(divergence, float(np.sqrt(0.5 * np.sum(offset * offset))))
