"""The fit in words for the log: the chosen model, every candidate with its AIC and ΔAIC, and what AIC compares.

ΔAIC is a candidate's AIC minus the lowest AIC among the candidates (Akaike 1974; Burnham & Anderson
2002): 0 for the chosen model. As a rule of thumb (common practice) candidates within about 2 of the
lowest are about as well supported by the data.
"""
from __future__ import annotations

from ..model.covariance import CovarianceModel, Structure
from .options import CandidateFit, FitResult

CLOSE_AIC = 2.0
"""ΔAIC below which a candidate is about as well supported as the chosen one (rule of thumb)."""


def _structure_words(structure: Structure, units: str) -> str:
    """Family, anisotropy and effective range(s) of one structure."""
    family = structure.family
    if structure.smoothness is not None and family == "matern":
        family += f" (smoothness {structure.smoothness:.3g})"
    reach = structure.effective_range
    if structure.ratio >= 1.0:
        return f"{family}, isotropic, effective range {reach:.4g} {units}, partial sill {structure.partial_sill:.4g}"
    return (f"{family}, anisotropic (major axis at azimuth {structure.azimuth:.0f}°, minor/major ratio "
            f"{structure.ratio:.3g}), effective range {reach:.4g} {units} along the major axis and "
            f"{reach * structure.ratio:.4g} {units} across it, partial sill {structure.partial_sill:.4g}")


def model_words(covariance: CovarianceModel, units: str) -> str:
    """A covariance model in words: each structure's family, anisotropy and effective range, and the nugget."""
    parts = [_structure_words(structure, units) for structure in covariance.structures]
    if len(parts) > 1:
        parts = [f"short-range structure {parts[0]}", f"long-range structure {parts[1]}"]
    return "; ".join(parts) + f"; nugget {covariance.nugget:.4g}"


def _candidate_words(candidate: CandidateFit, lowest: float, chosen: bool) -> str:
    delta = candidate.aic - lowest
    setting = "anisotropic" if candidate.anisotropy else "isotropic"
    if len(candidate.covariance.structures) > 1:
        setting += ", two structures (short and long range)"
    mark = " (chosen)" if chosen else (" (about as well supported)" if delta < CLOSE_AIC else "")
    return f"  {candidate.family}, {setting}: AIC {candidate.aic:.2f}, ΔAIC {delta:.2f}{mark}"


def fit_log_lines(result: FitResult, units: str) -> list[str]:
    """Lines for the log of a fit: the chosen model, the candidates table and a note on the criterion.

    Parameters
    ----------
    result : FitResult
    units : str
        Distance units of the working CRS, e.g. ``"metres"``.
    """
    held = " (held fixed)" if result.fixed_nugget is not None else ""
    errors = (f"; per-sample error variances of {result.error_variance_field} beside the nugget"
              if result.error_variance_field else "")
    lines = [f"Chosen model: {model_words(result.covariance, units)}{held} (variances in modelling units squared)"
             f"{errors}; {result.mean.kind} mean; {result.method.upper()} fit, AIC {result.aic:.2f}."]
    if result.candidates:
        lowest = min(candidate.aic for candidate in result.candidates)
        chosen = min(result.candidates, key=lambda candidate: candidate.aic)
        lines.append(f"Candidates ({len(result.candidates)}; ΔAIC = AIC minus the lowest; within about "
                     f"{CLOSE_AIC:g} counts as about as well supported, a rule of thumb):")
        lines += [_candidate_words(candidate, lowest, candidate is chosen) for candidate in result.candidates]
    if result.method != "ml":
        lines.append(f"The candidates share the {result.mean.kind} mean, so their REML criteria compare. REML "
                     "criteria of different trends do not: to choose a TREND, fit each with METHOD ml and "
                     "compare their AIC, or compare their leave-one-out errors in 'Cross-validate model'.")
    return lines


def coefficient_line(term_names: tuple[str, ...], coefficients, standard_errors) -> str:
    """The GLS mean coefficients with their standard errors (given the covariance) for the log, e.g.
    ``Mean coefficients (generalised least squares; ± standard error given the covariance): 1 = 6.52 ± 0.12,
    dist = -2.1 ± 0.3.``

    ``term_names`` as :attr:`..model.mean.MeanModel.term_names` (``1`` the constant, ``u``/``v`` the scaled
    coordinates, covariate columns by name, ``name=class`` the indicator of a class); ``standard_errors`` may be
    empty (not computed), then they are left out.
    """
    if not term_names:
        return "The mean is known: no coefficients were estimated."
    errors = list(standard_errors)
    parts = [f"{name} = {value:.4g}" + (f" ± {errors[k]:.3g}" if errors else "")
             for k, (name, value) in enumerate(zip(term_names, coefficients))]
    words = "generalised least squares" + ("; ± standard error given the covariance" if errors else "")
    return f"Mean coefficients ({words}): {', '.join(parts)}."
