"""Kriging predictor checked against scikit-learn, textbook identities and brute-force kriging systems."""
from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel

from fieldcast.algorithms.errors import Cancelled, FieldcastError
from fieldcast.algorithms.model.correlation import FAMILIES
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.model.mean import MeanModel
from fieldcast.algorithms.predict.kriging import NEGATIVE_VARIANCE_TOLERANCE, KrigingPredictor, checked_variance

RANGE = 500.0  # metres; the Meuse samples span about 2.8 km x 4 km


@pytest.fixture(scope="module")
def log_zinc(meuse):
    """Meuse log-zinc, centred (so that simple kriging with known mean 0 is meaningful)."""
    values = np.log(meuse.zinc)
    return values - values.mean()


@pytest.fixture(scope="module")
def targets(meuse_grid):
    """Every seventh cell of the Meuse prediction grid (444 locations)."""
    return meuse_grid.xy[::7]


def fixed(kernel_class, **parameters):
    """A scikit-learn kernel with all hyperparameters fixed (nothing is optimised)."""
    bounds = {f"{name}_bounds": "fixed" for name in parameters}
    return kernel_class(**parameters, **bounds)


def sklearn_case(name):
    """Our covariance model and the scikit-learn kernel that is the same function.

    scikit-learn's Matern uses ``sqrt(2 nu) h / l`` like ours, so range = length_scale; its RBF is
    ``exp(-h^2 / (2 l^2))`` and ours ``exp(-(h / a)^2)``, so a = sqrt(2) l. An anisotropic length scale
    ``[l_x, l_y]`` divides the easting and northing offsets; our azimuth 0 puts the major range along
    northing, so ``[ratio * a, a]``, and azimuth 90 along easting, so ``[a, ratio * a]``.
    """
    nugget = 0.05
    white = fixed(WhiteKernel, noise_level=nugget)
    if name == "matern32":
        model = CovarianceModel((Structure("matern32", 0.6, RANGE),), nugget)
        kernel = fixed(ConstantKernel, constant_value=0.6) * Matern(RANGE, "fixed", nu=1.5)
    elif name == "matern52_anisotropic_north":
        model = CovarianceModel((Structure("matern52", 0.6, RANGE, azimuth=0.0, ratio=0.4),), nugget)
        kernel = fixed(ConstantKernel, constant_value=0.6) * Matern([0.4 * RANGE, RANGE], "fixed", nu=2.5)
    elif name == "exponential_anisotropic_east":
        model = CovarianceModel((Structure("exponential", 0.6, RANGE, azimuth=90.0, ratio=0.5),), nugget)
        kernel = fixed(ConstantKernel, constant_value=0.6) * Matern([RANGE, 0.5 * RANGE], "fixed", nu=0.5)
    elif name == "gaussian":
        model = CovarianceModel((Structure("gaussian", 0.6, RANGE),), nugget)
        kernel = fixed(ConstantKernel, constant_value=0.6) * RBF(RANGE / math.sqrt(2.0), "fixed")
    elif name == "matern_general":
        model = CovarianceModel((Structure("matern", 0.6, RANGE, smoothness=1.2),), nugget)
        kernel = fixed(ConstantKernel, constant_value=0.6) * Matern(RANGE, "fixed", nu=1.2)
    elif name == "nested":
        model = CovarianceModel(
            (Structure("matern52", 0.4, 200.0), Structure("gaussian", 0.3, 1200.0)), nugget
        )
        kernel = (fixed(ConstantKernel, constant_value=0.4) * Matern(200.0, "fixed", nu=2.5)
                  + fixed(ConstantKernel, constant_value=0.3) * RBF(1200.0 / math.sqrt(2.0), "fixed"))
    else:
        raise AssertionError(name)
    return model, kernel + white


@pytest.mark.parametrize("name", ["matern32", "matern52_anisotropic_north", "exponential_anisotropic_east",
                                  "gaussian", "matern_general", "nested"])
def test_simple_kriging_matches_sklearn(meuse, log_zinc, targets, name):
    model, kernel = sklearn_case(name)
    # Reference library: scikit-learn GaussianProcessRegressor with a fixed kernel (optimizer=None), no
    # extra diagonal (alpha=0) and no normalisation: its posterior mean is simple kriging with mean 0.
    reference = GaussianProcessRegressor(kernel, alpha=0.0, optimizer=None, normalize_y=False)
    reference.fit(meuse.xy, log_zinc)
    locations = np.vstack([targets, meuse.xy[:20]])
    expected_mean, expected_std = reference.predict(locations, return_std=True)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel("known", 0.0))
    mean, latent = predictor.predict(locations)
    _, measured = predictor.predict(locations, include_nugget=True)
    scale = float(np.std(log_zinc))
    np.testing.assert_allclose(mean, expected_mean, rtol=1e-8, atol=1e-10 * scale)
    # scikit-learn's predictive variance is k(x*, x*) - k*^T K^-1 k*, and its WhiteKernel is on the
    # diagonal of k(x*, x*) (but not in k*, the cross-covariance to distinct points), so it is the error
    # variance of a new noisy measurement: our include_nugget=True. Minus the noise level it is the
    # latent-field variance. WhiteKernel(X*, X) is zero even where a target is a sample (the 20 samples
    # reused as targets), as our nugget-free cross-covariance c0 is.
    np.testing.assert_allclose(measured, expected_std**2, rtol=1e-8, atol=1e-12 * model.sill)
    np.testing.assert_allclose(latent, expected_std**2 - model.nugget, rtol=1e-8, atol=1e-12 * model.sill)


def test_exact_interpolation_without_nugget(meuse, log_zinc):
    # Textbook identity (Cressie 1993, Statistics for Spatial Data, section 3.2): without a nugget kriging
    # is an exact interpolator: at a sample the prediction equals the value and the variance is zero.
    model = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.0)
    for kind in ("known", "constant", "linear"):
        predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data(kind, meuse.xy))
        mean, variance = predictor.predict(meuse.xy)
        np.testing.assert_allclose(mean, log_zinc, rtol=0, atol=1e-9)
        assert np.all(variance >= 0.0)
        assert np.max(variance) < 1e-9 * model.sill


def test_far_from_data(meuse, log_zinc):
    # Textbook identity (Rasmussen & Williams 2006, GPML, eq. 2.42 with k* = 0): where the cross-covariance
    # vanishes, simple kriging returns the known mean with the field variance, and ordinary kriging
    # returns the GLS mean with the field variance plus the variance (1^T K^-1 1)^-1 of that mean.
    model = CovarianceModel((Structure("matern32", 0.6, RANGE),), 0.05)
    far = np.array([[1.0e7, 1.0e7], [-1.0e7, 5.0e6]])
    simple = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel("known", 0.3))
    mean, variance = simple.predict(far)
    np.testing.assert_allclose(mean, 0.3, rtol=1e-14)
    np.testing.assert_allclose(variance, model.field_variance, rtol=1e-12)
    ordinary = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("constant", meuse.xy))
    mean, variance = ordinary.predict(far, include_nugget=True)
    solved = np.linalg.solve(model.data_covariance(meuse.xy), np.column_stack([np.ones(155), log_zinc]))
    gls_mean = solved[:, 1].sum() / solved[:, 0].sum()
    np.testing.assert_allclose(ordinary.coefficients, [gls_mean], rtol=1e-10)
    np.testing.assert_allclose(mean, gls_mean, rtol=1e-10)
    np.testing.assert_allclose(variance, model.sill + 1.0 / solved[:, 0].sum(), rtol=1e-10)


def bordered_system(model, design, design0, xy, xy0):
    """Kriging weights and variance from the bordered (Lagrange) system, solved directly.

    Cressie 1993, Statistics for Spatial Data, sections 3.2 (ordinary) and 3.4 (universal kriging):
    [[K, F], [F^T, 0]] [lambda; m] = [c0; f0], variance = C(0) - lambda^T c0 - m^T f0.
    """
    p = design.shape[1]
    system = np.block([[model.data_covariance(xy), design], [design.T, np.zeros((p, p))]])
    cross = model.cross_covariance(xy, xy0)
    solution = np.linalg.solve(system, np.vstack([cross, design0.T]))
    weights, multipliers = solution[: len(xy)], solution[len(xy):]
    variance = model.field_variance - np.sum(weights * cross, axis=0) - np.sum(multipliers * design0.T, axis=0)
    return weights, variance


@pytest.mark.parametrize("kind", ["constant", "linear", "quadratic", "linear+dist"])
def test_ordinary_and_universal_match_bordered_system(meuse, meuse_grid, log_zinc, kind):
    model = CovarianceModel((Structure("spherical", 0.5, 900.0, azimuth=40.0, ratio=0.6),), 0.08)
    names = ("dist",) if kind.endswith("+dist") else ()
    mean_model = MeanModel.for_data(kind.split("+")[0], meuse.xy, names)
    covariates = meuse.dist[:, None] if names else None
    covariates0 = meuse_grid.dist[::11, None] if names else None
    xy0 = meuse_grid.xy[::11]
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, mean_model, covariates)
    mean, variance = predictor.predict(xy0, covariates0, chunk_size=50)
    design0 = mean_model.design(xy0, covariates0)
    expected_weights, expected_variance = bordered_system(model, mean_model.design(meuse.xy, covariates),
                                                          design0, meuse.xy, xy0)
    weights = predictor.weights(xy0, covariates0)
    np.testing.assert_allclose(weights, expected_weights, rtol=0, atol=1e-10)
    np.testing.assert_allclose(mean, expected_weights.T @ log_zinc, rtol=0, atol=1e-10)
    np.testing.assert_allclose(variance, expected_variance, rtol=1e-9)
    # Unbiasedness constraints of universal kriging (Cressie 1993, section 3.4): F^T lambda = f0; for a
    # constant mean this is "the weights sum to one".
    np.testing.assert_allclose(weights.T @ mean_model.design(meuse.xy, covariates), design0, atol=1e-10)


def test_ordinary_kriging_weights_sum_to_one(meuse, targets, log_zinc):
    # Textbook identity (Cressie 1993, section 3.2): ordinary kriging weights sum to one.
    model = CovarianceModel((Structure("matern52", 0.6, RANGE, azimuth=120.0, ratio=0.3),), 0.0)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("constant", meuse.xy))
    np.testing.assert_allclose(predictor.weights(targets).sum(axis=0), 1.0, atol=1e-10)


def test_simple_kriging_weights_give_the_prediction(meuse, targets, log_zinc):
    # Definition of simple kriging (Cressie 1993, section 3.4.5): mean = m + lambda^T (y - m).
    model = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.1)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel("known", 0.2))
    mean, _ = predictor.predict(targets)
    np.testing.assert_allclose(mean, 0.2 + predictor.weights(targets).T @ (log_zinc - 0.2), atol=1e-12)


def test_matern_half_is_exponential(meuse, targets, log_zinc):
    # Published identity (Stein 1999, Interpolation of Spatial Data, section 2.7): Matern nu = 1/2 is the
    # exponential covariance, so kriging with either gives the same surface.
    mean_model = MeanModel.for_data("constant", meuse.xy)
    results = []
    for structure in (Structure("matern", 0.6, RANGE, 30.0, 0.5, smoothness=0.5),
                      Structure("exponential", 0.6, RANGE, 30.0, 0.5)):
        predictor = KrigingPredictor(meuse.xy, log_zinc, CovarianceModel((structure,), 0.05), mean_model)
        results.append(predictor.predict(targets))
    np.testing.assert_allclose(results[0][0], results[1][0], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(results[0][1], results[1][1], rtol=1e-10)


def every_structure():
    """Each family isotropic and anisotropic, plus a nested pair."""
    for family in FAMILIES:
        smoothness = 0.8 if family == "matern" else None
        yield (Structure(family, 1.0, RANGE, smoothness=smoothness),)
        yield (Structure(family, 1.0, RANGE, azimuth=35.0, ratio=0.3, smoothness=smoothness),)
    yield (Structure("spherical", 0.3, 150.0, azimuth=100.0, ratio=0.5),
           Structure("matern", 0.7, 1500.0, smoothness=2.5))


@pytest.mark.parametrize("structures", list(every_structure()), ids=lambda s: "+".join(
    f"{x.family}{'-aniso' if x.ratio < 1 else ''}" for x in s))
def test_covariance_matrices_are_positive_semidefinite(meuse, structures):
    # Definition of a valid covariance function (Cressie 1993, section 2.3.1 / Bochner's theorem): every
    # covariance matrix it builds is symmetric positive semidefinite.
    model = CovarianceModel(structures, 0.0)
    matrix = model.data_covariance(meuse.xy)
    np.testing.assert_array_equal(matrix, matrix.T)
    eigenvalues = np.linalg.eigvalsh(matrix)
    assert eigenvalues.min() >= -1e-10 * eigenvalues.max()


def test_chunked_prediction_equals_one_chunk(meuse, meuse_grid, log_zinc):
    model = CovarianceModel((Structure("matern32", 0.6, RANGE, 60.0, 0.5),), 0.05)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("linear", meuse.xy))
    whole = predictor.predict(meuse_grid.xy, chunk_size=10**6)
    for chunk_size in (1, 37, 1000):
        parts = predictor.predict(meuse_grid.xy[:1500], chunk_size=chunk_size)
        np.testing.assert_allclose(parts[0], whole[0][:1500], rtol=1e-12, atol=1e-13)
        np.testing.assert_allclose(parts[1], whole[1][:1500], rtol=1e-12, atol=1e-13)


def test_progress_and_cancel(meuse, meuse_grid, log_zinc):
    model = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.05)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("constant", meuse.xy))
    fractions = []
    predictor.predict(meuse_grid.xy, chunk_size=500, progress=fractions.append)
    assert len(fractions) == 7 and fractions == sorted(fractions) and fractions[-1] == 1.0
    asked = []

    def stop_on_third_chunk():
        asked.append(True)
        return len(asked) >= 3

    fractions.clear()
    with pytest.raises(Cancelled):
        predictor.predict(meuse_grid.xy, chunk_size=500, progress=fractions.append,
                          should_stop=stop_on_third_chunk)
    assert len(fractions) == 2


def test_include_nugget_adds_the_nugget(meuse, targets, log_zinc):
    model = CovarianceModel((Structure("matern52", 0.6, RANGE),), 0.07)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("quadratic", meuse.xy))
    mean, latent = predictor.predict(targets)
    mean_measured, measured = predictor.predict(targets, include_nugget=True)
    np.testing.assert_array_equal(mean, mean_measured)
    np.testing.assert_allclose(measured, latent + 0.07, rtol=1e-15)


def test_coincident_points(meuse, log_zinc):
    xy = np.vstack([meuse.xy, meuse.xy[[4, 9]]])
    values = np.concatenate([log_zinc, log_zinc[[4, 9]] + 0.1])
    mean_model = MeanModel.for_data("constant", xy)
    without_nugget = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.0)
    with pytest.raises(FieldcastError, match="coincide.*(Average|merge).*nugget"):
        KrigingPredictor(xy, values, without_nugget, mean_model)
    with_nugget = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.05)
    mean, variance = KrigingPredictor(xy, values, with_nugget, mean_model).predict(meuse.xy[:10])
    assert np.all(np.isfinite(mean)) and np.all(variance >= 0)


def test_nearly_coincident_points_without_nugget_fail_clearly(meuse, log_zinc):
    # Points 1 micrometre apart without nugget: the system is singular in double precision. The
    # predictor must refuse with advice rather than return NaN or nonsense.
    xy = np.vstack([meuse.xy, meuse.xy[:1] + [1e-6, 0.0]])
    values = np.append(log_zinc, log_zinc[0] + 0.5)
    model = CovarianceModel((Structure("gaussian", 0.6, RANGE),), 0.0)
    with pytest.raises(FieldcastError, match="nugget"):
        KrigingPredictor(xy, values, model, MeanModel.for_data("constant", xy))


def test_clearly_negative_variance_is_refused_with_advice(meuse, log_zinc):
    # Constructed case: targets whose own variance C(0) is given as 0 while their covariances with the
    # samples are real, so C(0) - c0^T K^-1 c0 (Rasmussen & Williams 2006, section 2.2) is clearly below 0.
    model = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.05)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("known", meuse.xy))
    cross = model.cross_covariance(meuse.xy, meuse.xy[:3] + 10.0)
    with pytest.raises(FieldcastError, match=r"clearly negative \(-0\.\d+ with sill 0\.65\).*model file.s \"nugget\""):
        predictor.predict_from_covariances(cross, np.zeros((3, 0)), 0.0)
    _, variance = predictor.predict_from_covariances(cross, np.zeros((3, 0)), model.field_variance)
    assert np.all(variance > 0)


def test_round_off_below_zero_becomes_zero_and_nan_is_refused_unless_allowed():
    sill = 2.0
    round_off = -0.5 * NEGATIVE_VARIANCE_TOLERANCE * sill
    variance = np.array([0.3, round_off, 0.0])
    np.testing.assert_array_equal(checked_variance(variance, sill), [0.3, 0.0, 0.0])
    assert variance[1] == round_off  # the input is not modified
    with pytest.raises(FieldcastError, match="clearly negative"):
        checked_variance(np.array([0.3, -2.0 * NEGATIVE_VARIANCE_TOLERANCE * sill]), sill)
    with pytest.raises(FieldcastError, match="non-finite"):
        checked_variance(np.array([0.3, np.nan]), sill)
    kept = checked_variance(np.array([np.nan, round_off]), sill, unresolved_allowed=True)
    assert np.isnan(kept[0]) and kept[1] == 0.0


def test_bad_inputs_are_refused(meuse, log_zinc):
    model = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.05)
    constant = MeanModel.for_data("constant", meuse.xy)
    values = log_zinc.copy()
    values[3] = np.nan
    with pytest.raises(FieldcastError, match="NaN"):
        KrigingPredictor(meuse.xy, values, model, constant)
    xy = meuse.xy.copy()
    xy[5, 1] = np.inf
    with pytest.raises(FieldcastError, match="NaN or infinite coordinates"):
        KrigingPredictor(xy, log_zinc, model, constant)
    with pytest.raises(FieldcastError, match="sample values"):
        KrigingPredictor(meuse.xy, log_zinc[:-1], model, constant)
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, constant)
    with pytest.raises(FieldcastError, match="Prediction locations"):
        predictor.predict(np.array([[180000.0, np.nan]]))
    with pytest.raises(FieldcastError, match="quadratic mean model has 6 term"):
        KrigingPredictor(meuse.xy[:5], log_zinc[:5], model, MeanModel.for_data("quadratic", meuse.xy))
    with pytest.raises(FieldcastError, match="trend term.*dist are zero at every sample.*simpler TREND"):
        KrigingPredictor(meuse.xy, log_zinc, model, MeanModel.for_data("constant", meuse.xy, ("dist",)),
                         np.zeros((155, 1)))
    on_a_line = np.column_stack([np.linspace(0.0, 1000.0, 20), np.full(20, 5.0)])
    with pytest.raises(FieldcastError, match="trend terms cannot be told apart"):
        KrigingPredictor(on_a_line, log_zinc[:20], model, MeanModel("linear", scale=500.0))


def test_covariate_rows_must_match(meuse, meuse_grid, log_zinc):
    model = CovarianceModel((Structure("exponential", 0.6, RANGE),), 0.05)
    mean_model = MeanModel.for_data("constant", meuse.xy, ("dist",))
    predictor = KrigingPredictor(meuse.xy, log_zinc, model, mean_model, meuse.dist[:, None])
    with pytest.raises(FieldcastError, match="covariate values for 3 prediction locations"):
        predictor.predict(meuse_grid.xy[:5], meuse_grid.dist[:3, None])
    with pytest.raises(FieldcastError, match="supply their values"):
        predictor.predict(meuse_grid.xy[:5])
    dist = meuse_grid.dist[:5, None].copy()
    dist[2] = np.nan
    with pytest.raises(FieldcastError, match="NaN"):
        predictor.predict(meuse_grid.xy[:5], dist)
