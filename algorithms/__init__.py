"""Fieldcast numerical engine: Gaussian-process (kriging) models on numpy arrays.

This package never imports QGIS. It is used by the Processing algorithms in
``plugin/`` and by the scripts in ``tools/``, which import only the names listed
in :data:`__all__` from here; it is tested on its own.

Subpackages, by what the toolbox does:

``model``
    correlation families, covariance structures, mean models, transforms, fit parameters;
``fit``
    likelihoods (exact, Vecchia, joint), the fitter and its search, semivariograms;
``predict``
    global and local kriging, block kriging, cross-validation, exceedance, the neighbourhood check;
``simulate``
    circulant embedding and conditioning by kriging;
``io``
    samples, grids, masks, GeoTIFF writing, model files, atomic writes, staged outputs, CRS helpers;
``linalg``
    stacks of small systems and the BLAS thread switch;
``censored``
    values below detection limits: censored likelihood, Gibbs imputation, stochastic EM, imputed kriging.

The names are loaded on first use (PEP 562 module ``__getattr__``), so importing
the package costs nothing until a name is asked for: QGIS can load the plugin and
report a missing scipy or GDAL in words instead of failing at start-up.
"""
from __future__ import annotations

import importlib
from typing import Any

from .errors import Cancelled as Cancelled
from .errors import FieldcastError as FieldcastError
from .errors import FieldcastUsageError as FieldcastUsageError
from .version import __version__ as __version__

#: Public name -> the module (relative to this package) that defines it.
_PUBLIC = {
    # model
    "FAMILIES": "model.correlation",
    "CovarianceModel": "model.covariance",
    "Structure": "model.covariance",
    "MEAN_KINDS": "model.mean",
    "MeanModel": "model.mean",
    "TRANSFORM_KINDS": "model.transform",
    "Transform": "model.transform",
    # fit
    "FIT_METHODS": "fit.options",
    "KERNEL_CHOICES": "fit.options",
    "FitOptions": "fit.options",
    "FitResult": "fit.options",
    "fit_model": "fit.fitting",
    "fit_with": "fit.fitting",
    "fit_shared": "fit.shared",
    "fit_log_lines": "fit.fit_log",
    "coefficient_line": "fit.fit_log",
    "fit_vecchia": "fit.vecchia_fit",
    "VecchiaPlan": "fit.vecchia",
    "vecchia_log_likelihood": "fit.vecchia",
    "vecchia_divergence": "fit.vecchia_accuracy",
    "range_warning": "fit.range_check",
    "Declustering": "fit.declustering",
    "decluster": "fit.declustering",
    "TransformFit": "fit.transform_fit",
    "fitted_transform": "fit.transform_fit",
    "log_likelihood": "fit.likelihood",
    "EmpiricalVariogram": "fit.variogram",
    "empirical_semivariogram": "fit.variogram",
    "directional_semivariograms": "fit.variogram",
    "residual_semivariograms": "fit.variogram",
    # predict
    "KrigingPredictor": "predict.kriging",
    "LocalKrigingPredictor": "predict.local",
    "DEFAULT_POINTS_PER_SIDE": "predict.block",
    "block_predict": "predict.block",
    "AREA_FIELDS": "predict.areas",
    "assess_areas": "predict.areas",
    "CrossValidation": "predict.crossval",
    "leave_one_out": "predict.crossval",
    "local_leave_one_out": "predict.crossval",
    "k_fold": "predict.crossval",
    "candidate_rmse": "predict.crossval",
    "exceedance_probability": "predict.exceedance",
    "BACKTRANSFORMS": "predict.grid_surfaces",
    "SUPPORTS": "predict.grid_surfaces",
    "FieldRasters": "predict.grid_surfaces",
    "SurfaceScale": "predict.grid_surfaces",
    "check_interval": "predict.grid_surfaces",
    "CellPredictor": "predict.grid_surfaces",
    "cell_predictor": "predict.grid_surfaces",
    "write_surfaces": "predict.grid_surfaces",
    "PointValues": "predict.grid_surfaces",
    "predict_points": "predict.grid_surfaces",
    "krige_block": "predict.grid_surfaces",
    "row_blocks": "predict.grid_surfaces",
    "SurfaceBlock": "predict.grid_surfaces",
    "SurfaceWriters": "predict.grid_surfaces",
    "PREDICT_TARGETS": "predict.target",
    "measurement_variance": "predict.target",
    "target_words": "predict.target",
    "ExtrapolationCheck": "predict.extrapolation",
    "covariate_extrapolation": "predict.extrapolation",
    "AUTOMATIC_NEIGHBOURS": "predict.choice",
    "GLOBAL_SAMPLE_LIMIT": "predict.choice",
    "LogLine": "predict.choice",
    "Neighbourhood": "predict.choice",
    "choose_predictor": "predict.choice",
    "cross_validate_with": "predict.choice",
    "refuse_local_covariates": "predict.choice",
    "search_words": "predict.choice",
    "GlobalTrend": "predict.global_trend",
    "estimate_trend": "predict.global_trend",
    "trend_standard_errors": "predict.global_trend",
    "CHECK_SAMPLE_LIMIT": "predict.neighbourhood_check",
    "grid_targets": "predict.neighbourhood_check",
    "TargetDraw": "predict.neighbourhood_check",
    "neighbourhood_gap": "predict.neighbourhood_check",
    # cluster (runs outside QGIS; Dask only inside run_on_dask)
    "GridJob": "cluster.job",
    "GridRun": "cluster.job",
    "prepare_job": "cluster.job",
    "run_in_process": "cluster.runners",
    "run_on_dask": "cluster.dask_runner",
    "DESIGN_CRITERIA": "predict.design",
    "Proposal": "predict.design",
    "propose_samples": "predict.design",
    "PAIR_BUDGET": "predict.design",
    # linalg
    "CONDITION_ADVICE": "linalg.condition_policy",
    # censored
    "censored_log_likelihood": "censored.likelihood",
    "TruncatedGibbs": "censored.gibbs",
    "CensoredFit": "censored.stochastic_em",
    "censoring_summary": "censored.stochastic_em",
    "fit_censored": "censored.stochastic_em",
    "ImputedKriging": "censored.imputed_kriging",
    "impute_censored": "censored.imputed_kriging",
    "NONDETECT_TREATMENTS": "censored.limits",
    "check_factor": "censored.limits",
    "check_limits": "censored.limits",
    "censoring_words": "censored.limits",
    "minimum_pile_warning": "censored.limits",
    "parse_limit_texts": "censored.limits",
    "substituted": "censored.limits",
    # simulate
    "UnconditionalGenerator": "simulate.circulant",
    "covariance_factor": "simulate.circulant",
    "RealisationSummary": "simulate.simulation",
    "SimulationResult": "simulate.simulation",
    "simulate_conditional": "simulate.simulation",
    "summarise_realisations": "simulate.simulation",
    "polygon_areas_above": "simulate.polygon_areas",
    # io
    "area_words": "io.area_words",
    "Region": "io.region",
    "Samples": "io.samples",
    "FeatureReadings": "io.samples",
    "check_samples": "io.samples",
    "merge_coincident": "io.samples",
    "check_error_variance": "io.samples",
    "GridSpec": "io.grid",
    "default_pixel_size": "io.grid",
    "check_extent_reach": "io.grid",
    "RasterTemplate": "io.template",
    "COVARIATE_KINDS": "io.covariates",
    "CovariateSource": "io.covariates",
    "CovariateSet": "io.covariates",
    "SampleCovariates": "io.covariates",
    "check_design": "io.covariates",
    "covariate_mean": "io.covariates",
    "CellCovariates": "io.covariates",
    "output_grid": "io.grid",
    "cell_mask": "io.mask",
    "hull_mask": "io.mask",
    "hull_map_area": "io.mask",
    "checked_cell_mask": "io.mask",
    "GeoTiffWriter": "io.geotiff",
    "NodataCounts": "io.nodata_counts",
    "MAX_BANDS": "io.geotiff",
    "ModelDocument": "io.model_file",
    "json_ready": "io.model_file",
    "write_text_atomically": "io.atomic",
    "OutputSet": "io.staging",
    "current_output_set": "io.staging",
    "refuse_read_only": "io.staging",
    "remove_stale_files": "io.interruption",
    "termination_cleanup": "io.interruption",
    "linear_units": "io.crs",
    "parse_crs": "io.crs",
    "same_crs": "io.crs",
    "to_wkt2": "io.crs",
    "transform_points": "io.crs",
    "undefined_crs_error": "io.crs",
    "defined_crs": "io.crs",
    "utm_crs_for": "io.crs",
    "WorkingCrs": "io.working_crs",
    "choose_working_crs": "io.working_crs",
}

__all__ = sorted(["Cancelled", "FieldcastError", "FieldcastUsageError", "__version__", *_PUBLIC])


def __getattr__(name: str) -> Any:
    """Import the module that defines the public ``name`` and return the name (PEP 562)."""
    module_name = _PUBLIC.get(name)
    if module_name is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module_name}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__
