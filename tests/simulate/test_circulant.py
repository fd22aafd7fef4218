"""Unconditional realisations by circulant embedding reproduce the covariance model."""
from __future__ import annotations

import numpy as np
from scipy import linalg

from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from fieldcast.algorithms.simulate.circulant import UnconditionalGenerator, embedding_eigenvalues, odd_fast_length

# Anisotropic model: major axis towards azimuth 45 degrees (north-east), minor range half the major.
ANISOTROPIC = CovarianceModel((Structure("spherical", 2.0, 12.0, azimuth=45.0, ratio=0.5),))


def realisations(generator: UnconditionalGenerator, count: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    fields = []
    for _ in range(count // 2):
        fields.extend(generator.draw_pair(rng))
    return np.array(fields)


def test_padded_sizes_are_odd_fast_lengths():
    # Odd sizes make the torus offsets symmetric, so FFT2 of the base is real (Dietrich & Newsam 1997,
    # SIAM J. Sci. Comput. 18(4), section 2: the embedding matrix must be symmetric).
    for target in (1, 2, 63, 127, 2046):
        size = odd_fast_length(target)
        assert size >= target and size % 2 == 1
        rest = size
        for prime in (3, 5, 7, 11):
            while rest % prime == 0:
                rest //= prime
        assert rest == 1
    eigenvalues = embedding_eigenvalues(ANISOTROPIC, (odd_fast_length(79), odd_fast_length(95)), 1.0)
    assert eigenvalues.min() > -1e-9 * eigenvalues.max()


def test_semivariogram_along_and_across_the_anisotropy_matches_the_model():
    # Over many realisations the empirical semivariogram, gamma(h) = mean of (Z(x+h) - Z(x))^2 / 2
    # (Matheron 1963, Econ. Geol. 58, 1246-1266), matches the model at lags along the major axis
    # (azimuth 45: east and north) and across it (azimuth 135: east and south), within 4 standard
    # errors of the mean over independent realisations.
    generator = UnconditionalGenerator(ANISOTROPIC, (48, 48), 1.0)
    fields = realisations(generator, 300, seed=11)
    for k in (2, 4, 8):
        for row_step, name in ((-k, "along"), (k, "across")):
            # row index grows southwards: row_step -k means northing +k.
            a = fields[:, max(0, -row_step):48 - max(0, row_step), 0:48 - k]
            b = fields[:, max(0, row_step):48 - max(0, -row_step), k:48]
            per_realisation = 0.5 * np.mean((b - a) ** 2, axis=(1, 2))
            expected = ANISOTROPIC.semivariogram(np.array(float(k)), np.array(float(-row_step)))
            error = per_realisation.std(ddof=1) / np.sqrt(len(fields))
            assert abs(per_realisation.mean() - expected) < 4 * error, (name, k)
    along = ANISOTROPIC.semivariogram(np.array(4.0), np.array(4.0))
    across = ANISOTROPIC.semivariogram(np.array(4.0), np.array(-4.0))
    assert across > 1.5 * along  # the check above can tell the two directions apart


def test_per_cell_variance_is_the_sill():
    # Every cell of a stationary field has variance equal to the sill (definition of the covariance
    # model, C(0) = sill); the sample variance over R normal draws has standard error sill * sqrt(2 / (R-1)).
    generator = UnconditionalGenerator(ANISOTROPIC, (40, 30), 1.0)
    fields = realisations(generator, 400, seed=3)
    variance = fields.var(axis=0, ddof=1)
    standard_error = ANISOTROPIC.sill * np.sqrt(2.0 / (len(fields) - 1))
    assert np.max(np.abs(variance - ANISOTROPIC.sill)) < 5 * standard_error
    assert abs(variance.mean() - ANISOTROPIC.sill) < 0.05 * ANISOTROPIC.sill
    assert abs(fields.mean()) < 0.05


def _exact_lattice_covariance(model: CovarianceModel, shape: tuple[int, int]) -> np.ndarray:
    rows, cols = np.meshgrid(np.arange(shape[0]), np.arange(shape[1]), indexing="ij")
    xy = np.column_stack([cols.ravel(), -rows.ravel()]).astype(float)
    return model.cross_covariance(xy, xy)


def test_fft_and_cholesky_realisations_have_the_same_covariance():
    # Reference: realisations L @ xi with L the scipy Cholesky factor of the exact lattice covariance
    # (the textbook exact method). Both empirical covariance matrices agree within Monte Carlo error;
    # an entry of an empirical covariance from R normal draws has standard error <= sill * sqrt(2 / R).
    model = CovarianceModel((Structure("exponential", 1.5, 4.0, azimuth=120.0, ratio=0.4),), nugget=0.3)
    shape = (6, 7)
    generator = UnconditionalGenerator(model, shape, 1.0)
    assert generator.method == "circulant embedding"
    count = 6000
    fft_fields = realisations(generator, count, seed=5).reshape(count, -1)
    factor = linalg.cholesky(_exact_lattice_covariance(model, shape), lower=True)
    cholesky_fields = (factor @ np.random.default_rng(6).standard_normal((factor.shape[0], count))).T
    difference = np.cov(fft_fields.T) - np.cov(cholesky_fields.T)
    bound = 5 * model.field_variance * np.sqrt(2.0 / count) * np.sqrt(2.0)
    assert np.max(np.abs(difference)) < bound
    # and the FFT covariance is the model's (nugget not simulated: latent field)
    exact = _exact_lattice_covariance(model, shape)
    assert np.max(np.abs(np.cov(fft_fields.T) - exact)) < 5 * model.field_variance * np.sqrt(2.0 / count)


def test_negative_eigenvalues_enlarge_the_padding_then_fall_back_to_cholesky():
    # A Gaussian covariance with a range twice the lattice side is known to defeat the minimal
    # embedding (Wood & Chan 1994, J. Comput. Graph. Stat. 3(4), section 3; from memory); with the torus
    # capped at 2000 cells no embedding works, and the small lattice uses the exact Cholesky factor.
    model = CovarianceModel((Structure("gaussian", 1.0, 20.0),))
    generator = UnconditionalGenerator(model, (10, 10), 1.0, max_padded_cells=2000)
    assert generator.method == "Cholesky"
    assert any("enlarged" in note for note in generator.notes)
    assert any("Cholesky" in w for w in generator.warnings)
    fields = realisations(generator, 4000, seed=9).reshape(4000, -1)
    exact = _exact_lattice_covariance(model, (10, 10))
    assert np.max(np.abs(np.cov(fields.T) - exact)) < 5 * np.sqrt(2.0 / 4000)


def test_enlarged_padding_is_reported_and_non_negative():
    # Same family with a shorter range: the minimal 63 x 63 torus has negative eigenvalues, a larger one not.
    model = CovarianceModel((Structure("gaussian", 1.0, 12.0, azimuth=30.0, ratio=0.6),))
    generator = UnconditionalGenerator(model, (32, 32), 1.0)
    assert generator.method == "circulant embedding"
    assert generator.padded_shape[0] > 63
    # An enlargement that ends exact is information, not a warning.
    assert generator.warnings == [] and len(generator.notes) == 1 and "enlarged" in generator.notes[0]
    eigenvalues = embedding_eigenvalues(model, generator.padded_shape, 1.0)
    assert eigenvalues.min() > -1e-9 * eigenvalues.max()


def test_torus_covariance_equals_the_model_at_every_lattice_offset():
    # Exactness condition of circulant embedding (Dietrich & Newsam 1997, section 2): the torus covariance,
    # inverse FFT of the eigenvalues, equals the model at every offset between two lattice cells. For the
    # compactly supported spherical family a torus of n + reach cells per axis suffices.
    shape = (40, 30)
    for model in (ANISOTROPIC, CovarianceModel((Structure("exponential", 1.0, 6.0, azimuth=100.0, ratio=0.3),))):
        generator = UnconditionalGenerator(model, shape, 2.0)
        padded = generator.padded_shape
        base = np.fft.ifft2(embedding_eigenvalues(model, padded, 2.0)).real
        row_steps, col_steps = np.meshgrid(np.arange(-39, 40), np.arange(-29, 30), indexing="ij")
        torus = base[row_steps % padded[0], col_steps % padded[1]]
        exact = model.covariance_from_offsets(2.0 * col_steps, -2.0 * row_steps)
        assert np.max(np.abs(torus - exact)) < 1e-12
    assert padded == (odd_fast_length(79), odd_fast_length(59))
    assert UnconditionalGenerator(ANISOTROPIC, shape, 2.0).padded_shape[0] < 79


def test_large_lattice_without_exact_embedding_clips_and_says_so():
    # Wood & Chan 1994, section 3: when no affordable embedding is non-negative definite, negative eigenvalues
    # are set to zero and the realisations are approximate; the warning states the share dropped.
    model = CovarianceModel((Structure("gaussian", 1.0, 40.0),))
    generator = UnconditionalGenerator(model, (70, 70), 1.0, max_padded_cells=150 * 150)
    assert generator.method == "circulant embedding"
    assert any("approximate" in w for w in generator.warnings)
    field, _ = generator.draw_pair(np.random.default_rng(0))
    assert field.shape == (70, 70) and np.all(np.isfinite(field))
